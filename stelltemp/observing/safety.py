"""The Sun: warnings for targets near it and for plans in daylight or bright twilight.

Pointing a telescope at or near the Sun without a proper solar filter can
blind an observer instantly and destroy a camera.  Every warning returned
here carries the usual caution (`SUN_CAUTION`).  These checks are an aid,
not a safety system: local rules and experienced supervision come first.

Limits (common practice):

* a target closer than 15° to the Sun (default, adjustable) is flagged at any
  Sun altitude above −18°, and always when the Sun is up;
* any planned time with the Sun above −0.833° (sunrise/sunset altitude,
  refraction and semi-diameter included by convention) is daylight;
* with the Sun between −0.833° and −6° it is civil twilight.
"""

from __future__ import annotations

import numpy as np
from astropy.coordinates import AltAz, get_sun

from ..errors import StelltempError
from .night import SUN_ALTITUDES, _as_skycoord, offline_iers

__all__ = ["SUN_CAUTION", "DEFAULT_SUN_SEPARATION_DEG", "sun_warnings"]

#: the caution printed with every Sun warning (defer to local rules and experienced practice)
SUN_CAUTION = (
    "Caution: never look at the Sun or point unfiltered optics or a finder near it; observe the Sun only "
    "with a certified solar filter mounted securely over the front of the telescope (and cap or filter the "
    "finder), and follow local rules and experienced supervision."
)

#: default minimum Sun–target separation, degrees (common practice)
DEFAULT_SUN_SEPARATION_DEG = 15.0


def sun_warnings(times, location, coords=None, names=None, min_separation_deg=DEFAULT_SUN_SEPARATION_DEG):
    """Warning strings for planned times in daylight/civil twilight and targets near the Sun.

    Parameters
    ----------
    times : astropy.time.Time
        Planned times: a scalar, or an array (one per target, or shared).
    location : astropy.coordinates.EarthLocation
    coords : SkyCoord or (ra_deg, dec_deg), optional
        Targets; with ``times`` an array of the same length, target i is
        checked at times[i], otherwise every target at every time.
    names : list of str, optional
        Target names for the messages.
    min_separation_deg : float
        Smallest acceptable Sun–target separation.

    Returns
    -------
    list of str
        Empty when nothing is wrong; each string ends with `SUN_CAUTION`.

    Examples
    --------
    >>> from astropy import units as u
    >>> from astropy.coordinates import EarthLocation
    >>> from astropy.time import Time
    >>> site = EarthLocation.from_geodetic(-3.2 * u.deg, 37.5 * u.deg, 850 * u.m)
    >>> sun_warnings(Time("2026-03-15T12:00:00"), site)[0].startswith("DAYLIGHT")
    True

    """
    if not (0 <= min_separation_deg <= 180):
        raise StelltempError(f"minimum Sun separation must be 0–180 deg, got {min_separation_deg!r}")
    t = times.reshape(-1) if times.shape else times.reshape(1)
    with offline_iers():
        frame = AltAz(obstime=t, location=location)
        sun = get_sun(t).transform_to(frame)
    sun_alt = sun.alt.deg
    out = []
    day = sun_alt > SUN_ALTITUDES["sun"]
    civil = (~day) & (sun_alt > SUN_ALTITUDES["civil"])
    if np.any(day):
        first = t[np.argmax(day)].isot[:16]
        out.append(f"DAYLIGHT: {int(day.sum())} planned time(s) with the Sun above the horizon "
                   f"(first {first} UTC, Sun up to {sun_alt.max():.1f} deg). {SUN_CAUTION}")
    if np.any(civil):
        first = t[np.argmax(civil)].isot[:16]
        out.append(f"CIVIL TWILIGHT: {int(civil.sum())} planned time(s) with the Sun between "
                   f"{SUN_ALTITUDES['civil']:g} and {SUN_ALTITUDES['sun']:g} deg (first {first} UTC). {SUN_CAUTION}")
    if coords is None:
        return out
    c = _as_skycoord(coords).reshape(-1)
    names = list(names) if names is not None else [f"target {i + 1}" for i in range(len(c))]
    if len(names) != len(c):
        raise StelltempError("names and coordinates differ in length")
    paired = len(t) == len(c) and len(t) > 1
    with offline_iers():
        if paired:
            aa = c.transform_to(frame)
            alt1, az1 = aa.alt.rad[:, None], aa.az.rad[:, None]
            alt2, az2 = sun.alt.rad[:, None], sun.az.rad[:, None]
            s_alt = sun_alt[:, None]
        else:
            aa = c[:, None].transform_to(AltAz(obstime=t[None, :], location=location))
            alt1, az1 = aa.alt.rad, aa.az.rad
            alt2, az2 = sun.alt.rad[None, :], sun.az.rad[None, :]
            s_alt = sun_alt[None, :]
    cos_sep = np.sin(alt1) * np.sin(alt2) + np.cos(alt1) * np.cos(alt2) * np.cos(az1 - az2)
    sep = np.degrees(np.arccos(np.clip(cos_sep, -1.0, 1.0)))
    s_alt = np.broadcast_to(s_alt, sep.shape)
    near = (sep < min_separation_deg) & (s_alt > SUN_ALTITUDES["astronomical"])
    for i, name in enumerate(names):
        if np.any(near[i]):
            j = int(np.argmin(np.where(near[i], sep[i], np.inf)))
            when = (t[i] if paired else t[j]).isot[:16]
            out.append(f"SUN NEARBY: '{name}' is {sep[i, j]:.1f} deg from the Sun at {when} UTC "
                       f"(limit {min_separation_deg:g} deg; Sun altitude {s_alt[i, j]:.1f} deg). "
                       f"Do not point there. {SUN_CAUTION}")
    return out
