"""One set of rules for every number a user gives: options, API arguments, file fields.

Each quantity has a documented physical range (`RANGES`) and each size the
user controls has a documented limit (`SIZE_LIMITS`).  The command line and
the Python API call the same functions, so both refuse the same value with
the same one-line message (a :class:`~stelltemp.errors.StelltempError`),
before any work starts.  The API's message names the parameter
(``ebv_err``); the command line's names the option typed (``--ebv-err``),
through the error's ``parameter`` and the parser's own option names
(``stelltemp.cli.option_names``).  Catalogue rows use the same ranges, row by row, to
flag a bad cell instead of refusing the run (:mod:`stelltemp.catalog.hygiene`).

Ranges
------
==================  ===================  ======  =====================================
name                range                unit    why
==================  ===================  ======  =====================================
``mag``             −40 … 40             mag     brightest and faintest catalogued
                                                 objects lie well within (common
                                                 practice); beyond are sentinels
``mag_err``         0 … 5                mag     above 5 mag an error carries no
                                                 information (common practice)
``colour``          −20 … 20             mag     a difference of two ``mag`` values far
                                                 beyond any star's (common practice)
``ebv``             −0.5 … 6             mag     the kernel's tabulated E(B−V) grid
                                                 (:mod:`stelltemp.bandgrid`)
``ebv_err``         0 … 6                mag     as ``ebv``
``av``              −1.5 … 36            mag     ``ebv`` times the widest R_V
``parallax``        −1000 … 1000         mas     no star above ~770 mas (from memory)
``parallax_err``    0 … 1000             mas
``feh``             −10 … 2              dex     known stars −7 … +1 (from memory)
``feh_err``         0 … 5                dex     as ``mag_err`` (common practice)
``logg``            −2 … 10              dex     supergiants ~0, white dwarfs ~8–9
                                                 (from memory)
``seeing``          > 0 … 30             arcsec  worst usable seeing a few arcsec
                                                 (common practice)
``airmass``         1 … 40               —       the horizon is ~38 (Kasten & Young
                                                 1989, Appl. Opt. 28, 4735)
``snr``             > 0 … 1e6            —
``exposure``        > 0 … 1e6            s       about 11 days
``min_alt``         0 … 90               deg
``teff``            1000 … 100000        K       the kernel's temperature grid
``temperature``     1e-3 … 1e9           K       Planck physics has no upper end;
                                                 1e9 K keeps numbers finite; below
                                                 1 mK the Wien peaks lie beyond 1 m,
                                                 outside ``wavelength``
``wavelength``      1e-3 … 1e9           nm      1 pm to 1 m: beyond, a star's Planck
                                                 curve is radio, not photometry, and
                                                 below 1 pm its numbers underflow
``radius``          > 0 … 1e5            R_sun   larger than any star (from memory)
``curve_wavelength``  10 … 1e5           nm      user passband curves: the reference
                                                 spectra and extinction laws end
                                                 within it; a 2 Å grid over it is
                                                 at most 5e5 points (4 MB)
==================  ===================  ======  =====================================

Sizes
-----
Limits on user-controlled sizes keep every command's memory and time
bounded (see `SIZE_LIMITS`); ``monte_carlo`` is bounded instead by the
memory it would need (`check_memory`).

Examples
--------
>>> check_number("ebv", 0.1)
0.1
>>> check_number("ebv", float("nan"))
Traceback (most recent call last):
...
stelltemp.errors.StelltempError: ebv (E(B-V)) must be a finite number in [-0.5, 6] mag, got nan
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .errors import StelltempError

__all__ = ["Range", "RANGES", "SIZE_LIMITS", "MEMORY_LIMIT_BYTES", "check_number", "check_optional",
           "check_size", "check_memory", "parse_number"]


@dataclass(frozen=True)
class Range:
    """A documented physical range of one kind of number.

    Parameters
    ----------
    lo, hi : float
        Bounds (inclusive unless `lo_open`).
    unit : str
        Unit of the number, for messages ('' for none).
    what : str
        What the number is, for messages.
    lo_open : bool
        True when `lo` itself is not allowed (strictly positive quantities).
    """

    lo: float
    hi: float
    unit: str
    what: str
    lo_open: bool = False

    def text(self):
        bracket = "(" if self.lo_open else "["
        return f"{bracket}{self.lo:g}, {self.hi:g}]" + (f" {self.unit}" if self.unit else "")

    def holds(self, value):
        """True when `value` is finite and inside (works on numpy arrays too)."""
        import numpy as np

        v = np.asarray(value, dtype=float)
        with np.errstate(invalid="ignore"):
            low = v > self.lo if self.lo_open else v >= self.lo
            return np.isfinite(v) & low & (v <= self.hi)


RANGES = {
    "mag": Range(-40.0, 40.0, "mag", "magnitude"),
    "mag_err": Range(0.0, 5.0, "mag", "magnitude error"),
    "colour": Range(-20.0, 20.0, "mag", "colour index"),
    "ebv": Range(-0.5, 6.0, "mag", "E(B-V)"),
    "ebv_err": Range(0.0, 6.0, "mag", "E(B-V) error"),
    "av": Range(-1.5, 36.0, "mag", "A_V"),
    "av_err": Range(0.0, 36.0, "mag", "A_V error"),
    "parallax": Range(-1000.0, 1000.0, "mas", "parallax"),
    "parallax_err": Range(0.0, 1000.0, "mas", "parallax error"),
    "feh": Range(-10.0, 2.0, "dex", "[Fe/H]"),
    "feh_err": Range(0.0, 5.0, "dex", "[Fe/H] error"),
    "logg": Range(-2.0, 10.0, "dex", "log g"),
    "seeing": Range(0.0, 30.0, "arcsec", "seeing FWHM", lo_open=True),
    "airmass": Range(1.0, 40.0, "", "airmass"),
    "snr": Range(0.0, 1e6, "", "signal-to-noise ratio", lo_open=True),
    "exposure": Range(0.0, 1e6, "s", "exposure time", lo_open=True),
    "min_alt": Range(0.0, 90.0, "deg", "lowest altitude"),
    "teff": Range(1000.0, 100000.0, "K", "temperature"),
    "temperature": Range(1e-3, 1e9, "K", "temperature"),
    "wavelength": Range(1e-3, 1e9, "nm", "wavelength"),
    "radius": Range(0.0, 1e5, "R_sun", "radius", lo_open=True),
    "curve_wavelength": Range(10.0, 1e5, "nm", "passband curve wavelength"),
}

#: name -> (smallest, largest, what): every size the user controls
SIZE_LIMITS = {
    # temperatures of `colourgrid`: a table beyond 100 000 rows reads no better
    "steps": (2, 100_000, "number of temperatures"),
    # rows per catalogue chunk: beyond ten million the work arrays alone need GBs
    "chunk_rows": (1, 10_000_000, "rows per chunk"),
    # Monte Carlo realisations per star (the memory check below also applies)
    "monte_carlo": (0, 1_000_000, "Monte Carlo samples"),
    # local Dask workers
    "workers": (1, 1024, "Dask workers"),
}

#: night-plan time step, minutes: below 0.5 min the grid of a long night has
#: thousands of points per target with nothing gained (airmass changes slowly)
STEP_MINUTES = Range(0.5, 60.0, "min", "time step")

#: the most memory one command may plan to use for its work arrays
MEMORY_LIMIT_BYTES = 2 << 30


def parse_number(value, name, option=None):
    """A float from a number or text; `StelltempError` naming `option` if it is none."""
    param = None if option else name
    if isinstance(value, bool):
        raise StelltempError(f"{option or name} must be a number, got {value!r}", param)
    try:
        return float(value)
    except (TypeError, ValueError, OverflowError):
        raise StelltempError(f"{option or name} must be a number, got {_short(value)}", param) from None


def check_number(name, value, option=None, rng=None):
    """Check one number against its documented range; return it as a float.

    Parameters
    ----------
    name : str
        Key of `RANGES` (or any name with `rng` given).
    value : float, int or str
        The number.
    option : str, optional
        How the user spells it (defaults to `name`).
    rng : Range, optional
        A range other than ``RANGES[name]``.

    Raises
    ------
    StelltempError
        Not a number, not finite, or outside the range.

    Examples
    --------
    >>> check_number("seeing", 0)
    Traceback (most recent call last):
    ...
    stelltemp.errors.StelltempError: seeing (seeing FWHM) must be a finite number in (0, 30] arcsec, got 0
    """
    rng = rng or RANGES[name]
    v = parse_number(value, name, option)
    if not bool(rng.holds(v)):
        label = option or name
        if rng.what.lower() != label.strip("-").replace("_", " ").lower():
            label += f" ({rng.what})"
        raise StelltempError(f"{label} must be a finite number in {rng.text()}, got {_short(value)}",
                             None if option else name)
    return v


def check_optional(name, value, option=None):
    """`check_number` unless `value` is None."""
    return None if value is None else check_number(name, value, option)


def check_size(name, value, option=None):
    """Check a user-controlled size (an integer) against `SIZE_LIMITS`; return it as int.

    Examples
    --------
    >>> check_size("steps", 10)
    10
    >>> check_size("steps", 99999999999999999999)
    Traceback (most recent call last):
    ...
    stelltemp.errors.StelltempError: steps (number of temperatures) must be a whole number from 2 to 100000, got 99999999999999999999
    """
    lo, hi, what = SIZE_LIMITS[name]
    label = f"{option or name} ({what})"
    try:
        f = float(value)
        ok = not isinstance(value, bool) and math.isfinite(f) and f == int(f)
    except (TypeError, ValueError, OverflowError):
        ok = False
    if not ok or not (lo <= int(f) <= hi):
        raise StelltempError(f"{label} must be a whole number from {lo} to {hi}, got {_short(value)}",
                             None if option else name)
    return int(f)


def check_memory(what, n_bytes, hint=""):
    """Refuse work whose arrays would need more than `MEMORY_LIMIT_BYTES`.

    Examples
    --------
    >>> check_memory("the Monte Carlo", 1e12, "use fewer samples")
    Traceback (most recent call last):
    ...
    stelltemp.errors.StelltempError: the Monte Carlo would need about 931 GiB of memory (limit 2 GiB); use fewer samples
    """
    if n_bytes > MEMORY_LIMIT_BYTES:
        need = n_bytes / (1 << 30)
        raise StelltempError(f"{what} would need about {need:.3g} GiB of memory "
                             f"(limit {MEMORY_LIMIT_BYTES / (1 << 30):g} GiB)" + (f"; {hint}" if hint else ""))


def _short(value, limit=40):
    text = value if isinstance(value, str) else repr(value) if not isinstance(value, float) else f"{value:g}"
    return text if len(text) <= limit else text[: limit - 1] + "…"
