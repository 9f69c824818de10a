"""Synthetic magnitudes and colours of blackbodies over a range of temperatures.

The magnitude scale is that of a sphere of 1 R☉ seen from 10 pc, so the
numbers read as absolute magnitudes of a Sun-sized blackbody; colours are
independent of that choice.  Magnitudes come from the fast tables of
:mod:`stelltemp.bandgrid` (reddening applied through each passband).
"""

import numpy as np
from astropy import units as u

from .errors import StelltempError
from .extinction import DEFAULT_LAW, DEFAULT_RV

__all__ = ["ONE_RSUN_AT_10PC_RAD", "colour_grid"]

#: angular diameter (rad) of a 1 R☉ sphere at 10 pc (IAU 2015 nominal R☉; 1 pc from the IAU 2012 au)
ONE_RSUN_AT_10PC_RAD = 2 * 6.957e8 / (10 * 3.0856775814913673e16)


def colour_grid(bands, temperatures, ebv=0.0, law=DEFAULT_LAW, rv=DEFAULT_RV):
    """Magnitudes of 1 R☉ blackbodies at 10 pc, and colours of adjacent bands.

    Parameters
    ----------
    bands : sequence of str
        Passband keys or curve files, in the order the colours are taken.
    temperatures : array_like or Quantity
        Plain numbers in K; 1,000–100,000 K.
    ebv : float
        E(B−V), mag (−0.5 to 6).
    law, rv
        Extinction law name and R_V.

    Returns
    -------
    mags : dict
        Band key → magnitudes (float arrays, mag, in each band's own system).
    colours : dict
        ``"<blue>-<red>"`` → colour (mag) for each pair of adjacent bands.

    Examples
    --------
    >>> mags, colours = colour_grid(["B_JC", "V_JC"], [5772.0])
    >>> 4.5 < float(mags["V_JC"][0]) < 5.1 and 0.5 < float(colours["B_JC-V_JC"][0]) < 0.8
    True
    """
    from .bandgrid import blackbody_mag, inside
    from .passbands import get_passband

    keys = [get_passband(b).key for b in bands]
    if not keys:
        raise StelltempError("give at least one passband")
    t = temperatures.to_value(u.K, equivalencies=u.temperature()) if isinstance(temperatures, u.Quantity) \
        else temperatures
    t = np.atleast_1d(np.asarray(t, float))
    if not np.all(inside(t, ebv)):
        raise StelltempError("temperatures must lie in 1000–100000 K and E(B-V) in -0.5–6")
    mags = {k: blackbody_mag(k, t, ebv, law, rv, ONE_RSUN_AT_10PC_RAD) for k in keys}
    colours = {f"{b1}-{b2}": mags[b1] - mags[b2] for b1, b2 in zip(keys[:-1], keys[1:])}
    return mags, colours
