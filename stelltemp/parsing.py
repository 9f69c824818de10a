"""Values typed by a person: temperatures with a unit, magnitudes as ``BAND=MAG[,ERR]``.

The command line reads its arguments through these functions, and scripts
that take the same text (a configuration file, a web form) can too.  Bad
text raises :class:`~stelltemp.errors.StelltempError` with one line naming
the problem.
"""

import math

from astropy import units as u

from .errors import StelltempError

__all__ = ["TEMPERATURE_UNITS", "parse_temperature", "parse_magnitude"]

#: unit letters a typed temperature may carry
TEMPERATURE_UNITS = {"K": u.K, "C": u.deg_C, "F": u.imperial.deg_F}


def parse_temperature(text, unit="K"):
    """A typed temperature as a Quantity in K.

    Parameters
    ----------
    text : str or float
        The number.
    unit : {"K", "C", "F"}
        The unit the number is in (kelvin, degrees Celsius, degrees Fahrenheit).

    Returns
    -------
    Quantity
        Temperature in K (scalar).

    Raises
    ------
    StelltempError
        For a unit other than K, C or F, text that is not a number, or a
        temperature at or below 0 K.

    Examples
    --------
    >>> parse_temperature("37", "C")
    <Quantity 310.15 K>
    """
    from .planck import as_kelvin

    if unit not in TEMPERATURE_UNITS:
        raise StelltempError(f"temperature unit must be K, C or F, got {unit!r}")
    try:
        value = float(text)
    except (TypeError, ValueError):
        raise StelltempError(f"not a temperature: {text!r}") from None
    return float(as_kelvin(value * TEMPERATURE_UNITS[unit])) * u.K


def parse_magnitude(text):
    """``BAND=MAG`` or ``BAND=MAG,ERR`` as ``(band, mag, err or None)``.

    The band is returned as typed (resolve it with
    :func:`stelltemp.passbands.get_passband`); magnitudes and errors are in mag.

    Raises
    ------
    StelltempError
        For text without ``=``, a value that is not a number, more than two
        values, a non-finite magnitude or a negative or non-finite error.

    Examples
    --------
    >>> parse_magnitude("V=10.00,0.01")
    ('V', 10.0, 0.01)
    >>> parse_magnitude("Ks=8.2")
    ('Ks', 8.2, None)
    """
    if "=" not in text:
        raise StelltempError(f"magnitude must look like BAND=MAG or BAND=MAG,ERR, got {text!r}")
    key, value = text.split("=", 1)
    parts = value.split(",")
    if len(parts) > 2:
        raise StelltempError(f"too many values in {text!r}")
    try:
        mag = float(parts[0])
        err = float(parts[1]) if len(parts) > 1 else None
    except ValueError:
        raise StelltempError(f"not a number in {text!r}") from None
    if not math.isfinite(mag) or (err is not None and not (err >= 0 and math.isfinite(err))):
        raise StelltempError(f"magnitude and error must be finite (error >= 0) in {text!r}")
    return key.strip(), mag, err
