"""One night at one site: twilight, altitude and airmass, best windows, the Moon.

Positions come from astropy (``get_sun``, ``get_body`` with the built-in
ephemeris, ``AltAz``) and never need the network: every computation runs
with IERS auto-download off and with the bundled Earth-orientation tables;
for dates beyond those tables UT1 is extrapolated (an error of at most about
a second, irrelevant for planning) and astropy's warnings about it are
silenced.

The night of a date is the 24 h from local noon of that date to local noon
of the next day, local noon being 12 h UT minus longitude/15°.  Twilight
times are found by root finding (regula falsi, all crossings together) on
the Sun's altitude after bracketing the crossings on a coarse time grid; refraction is not applied
(the −0.833° sunset altitude includes it by convention).
"""

from __future__ import annotations

import datetime as _dt
import warnings
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass

import numpy as np
from astropy import units as u
from astropy.coordinates import AltAz, SkyCoord, get_body, get_sun
from astropy.time import Time
from astropy.utils import iers

from ..errors import StelltempError
from .airmass import airmass_kasten_young

__all__ = [
    "SUN_ALTITUDES",
    "offline_iers",
    "parse_date",
    "night_grid",
    "sun_altitude",
    "twilight_times",
    "dark_interval",
    "altaz_of",
    "best_windows",
    "Window",
    "moon_geometry",
]

#: Sun altitudes (deg) defining sunset/sunrise and the twilights (common practice)
SUN_ALTITUDES = {"sun": -0.833, "civil": -6.0, "nautical": -12.0, "astronomical": -18.0}


#: columns of the Earth-orientation table that time and alt-az transforms read
_EOP_COLUMNS = ("MJD", "UT1_UTC", "PM_x", "PM_y", "UT1Flag", "PolPMFlag")
_EOP = {}


def _eop_table():
    """The bundled Earth-orientation table (IERS-A with IERS-B), parsed once and then disk-cached.

    astropy parses the bundled text files (about 20,000 daily rows) in the
    first transform of every process, about 1 s of a short run.  The
    columns it uses are kept in stelltemp's disk cache, keyed by the bytes
    of those files and astropy's version, and set as astropy's table: the
    same numbers, so positions are identical to astropy's own offline ones.
    """
    if "table" in _EOP:
        return _EOP["table"]
    from astropy import __version__ as astropy_version
    from astropy.table import QTable

    from .. import cache

    def build():
        full = iers.IERS_Auto.open()
        cols = {c: np.asarray(getattr(full[c], "value", full[c])) for c in _EOP_COLUMNS}
        cols["predictive_mjd"] = np.asarray(getattr(full.meta["predictive_mjd"], "value",
                                                    full.meta["predictive_mjd"]), float)
        cols["predictive_index"] = np.asarray(full.meta["predictive_index"], int)
        return cols

    try:
        key = cache.digest("eop", 2, _EOP_COLUMNS, astropy_version, cache.file_digest(iers.IERS_A_FILE),
                           cache.file_digest(iers.IERS_B_FILE))
        cols = cache.load_or_build("eop", key, build)
        units = {"MJD": u.day, "UT1_UTC": u.s, "PM_x": u.arcsec, "PM_y": u.arcsec}
        meta = {"predictive_mjd": float(cols["predictive_mjd"]), "predictive_index": int(cols["predictive_index"]),
                "data_path": iers.IERS_A_FILE}
        table = iers.IERS_Auto(QTable({c: (cols[c] * units[c] if c in units else cols[c]) for c in _EOP_COLUMNS},
                                      meta=meta))
    except (OSError, KeyError, AttributeError, ValueError):  # an unusual astropy install: let astropy read it
        table = None
    _EOP["table"] = table
    return table


@contextmanager
def offline_iers():
    """Run astropy time/coordinate code with no IERS downloads and quiet extrapolation."""
    with ExitStack() as stack:
        stack.enter_context(iers.conf.set_temp("auto_download", False))
        stack.enter_context(iers.conf.set_temp("auto_max_age", None))
        stack.enter_context(iers.conf.set_temp("iers_degraded_accuracy", "ignore"))
        stack.enter_context(warnings.catch_warnings())
        from astropy.utils.exceptions import AstropyWarning
        from erfa import ErfaWarning

        warnings.simplefilter("ignore", ErfaWarning)  # "dubious year" for dates beyond the leap-second table
        warnings.simplefilter("ignore", AstropyWarning)  # polar motion / UT1 extrapolation notices
        table = _eop_table()
        if table is not None:
            stack.enter_context(iers.earth_orientation_table.set(table))
        yield


def parse_date(date) -> _dt.date:
    """A calendar date from 'YYYY-MM-DD', a date/datetime or an astropy Time."""
    if isinstance(date, Time):
        return date.to_datetime().date()
    if isinstance(date, _dt.datetime):
        return date.date()
    if isinstance(date, _dt.date):
        return date
    try:
        return _dt.date.fromisoformat(str(date).strip())
    except ValueError:
        raise StelltempError(f"date must look like YYYY-MM-DD, got {date!r}") from None


def _local_noon(date, longitude_deg) -> Time:
    d = parse_date(date)
    with offline_iers():
        return Time(f"{d.isoformat()}T12:00:00", scale="utc") - (longitude_deg / 15.0) * u.hour


def night_grid(date, site, step_min=10.0) -> Time:
    """Times from local noon of ``date`` to the next local noon, every ``step_min`` minutes."""
    from ..validation import STEP_MINUTES, check_number

    check_number("step", step_min, rng=STEP_MINUTES)
    start = _local_noon(date, site.longitude_deg)
    n = int(round(24 * 60 / step_min)) + 1
    with offline_iers():
        return start + np.linspace(0.0, 1.0, n) * u.day


def sun_altitude(times, location):
    """Apparent (unrefracted) altitude of the Sun in degrees at ``times``."""
    with offline_iers():
        return get_sun(times).transform_to(AltAz(obstime=times, location=location)).alt.deg


def _crossings(grid, alt, level):
    """Indices i where alt crosses ``level`` between grid[i] and grid[i+1], with direction."""
    d = alt - level
    idx = np.nonzero(np.sign(d[:-1]) * np.sign(d[1:]) < 0)[0]
    return [(i, "down" if d[i] > 0 else "up") for i in idx]


#: twilights already solved in this run, by (date, site position, grid step)
_TWILIGHTS = {}


def twilight_times(date, site, step_min=10.0):
    """Sunset, sunrise and the civil, nautical and astronomical twilights of one night.

    Parameters
    ----------
    date : str or date
        The local calendar date of the evening.
    site : Site
        From the instrument file (latitude, longitude, elevation).
    step_min : float
        Bracketing grid step, minutes; each crossing is then solved to ~0.1 s.

    Returns
    -------
    dict
        Keys ``"<name>_evening"`` and ``"<name>_morning"`` for name in
        ``sun, civil, nautical, astronomical``; values are astropy Time or
        None when the Sun does not cross that altitude that night.

    Notes
    -----
    All crossings are solved together by the Illinois variant of regula
    falsi (Dowell & Jarratt 1971, BIT 11, 168) on their grid brackets: one
    Sun-position evaluation per step for every crossing at once, steps until
    every bracket is below 1e-6 d (0.09 s); the end of the bracket with the
    Sun at or below the level is returned.  A night asked for again in the
    same run (same date, site position and step) is not solved again.

    Examples
    --------
    >>> from stelltemp.observing import load_instrument
    >>> from stelltemp.tour import find_demo_dir
    >>> site = load_instrument(find_demo_dir() / "instruments" / "quillmere_04m_ccd.toml").site
    >>> tw = twilight_times("2026-03-15", site)
    >>> tw["sun_evening"] < tw["astronomical_evening"] < tw["astronomical_morning"] < tw["sun_morning"]
    True

    """
    memo = (parse_date(date), float(site.latitude_deg), float(site.longitude_deg), float(site.elevation_m),
            float(step_min))
    if memo in _TWILIGHTS:
        return dict(_TWILIGHTS[memo])
    loc = site.location()
    grid = night_grid(date, site, step_min)
    alt = sun_altitude(grid, loc)
    found = [(name, level, i, direction) for name, level in SUN_ALTITUDES.items()
             for i, direction in _crossings(grid, alt, level)]
    roots = _solve_crossings(grid.mjd, alt, found, loc)
    out = {}
    for name in SUN_ALTITUDES:
        out[f"{name}_evening"] = out[f"{name}_morning"] = None
    for (name, _, _, direction), root in zip(found, roots):
        key = f"{name}_evening" if direction == "down" else f"{name}_morning"
        if out[key] is None:  # first crossing of each kind after local noon
            with offline_iers():
                out[key] = Time(root, format="mjd", scale="utc")
    _TWILIGHTS[memo] = dict(out)
    return out


def _solve_crossings(mjd, alt, found, loc, xtol=1e-6, max_steps=40):
    """MJDs where the Sun's altitude equals each crossing's level (Illinois regula falsi, vectorised)."""
    if not found:
        return []
    level = np.array([f[1] for f in found])
    idx = np.array([f[2] for f in found])
    a, b = mjd[idx].copy(), mjd[idx + 1].copy()
    fa, fb = alt[idx] - level, alt[idx + 1] - level
    side = np.zeros(len(found), int)
    x = a.copy()
    for _ in range(max_steps):
        open_ = np.abs(b - a) > xtol
        if not open_.any():
            break
        x = np.where(fb != fa, (a * fb - b * fa) / np.where(fb != fa, fb - fa, 1.0), 0.5 * (a + b))
        with offline_iers():
            fx = sun_altitude(Time(x, format="mjd", scale="utc"), loc) - level
        exact = fx == 0
        left = (np.sign(fx) == np.sign(fa)) & ~exact  # root in [x, b]
        right = ~left & ~exact  # root in [a, x]
        # Illinois: halve the value kept twice on the same side, so both ends move
        fb = np.where(left & (side == 1), 0.5 * fb, fb)
        fa = np.where(right & (side == -1), 0.5 * fa, fa)
        a, fa = np.where(left, x, a), np.where(left, fx, fa)
        b, fb = np.where(right, x, b), np.where(right, fx, fb)
        a, b = np.where(exact, x, a), np.where(exact, x, b)
        side = np.where(left, 1, np.where(right, -1, 0))
        if np.all(np.abs(fx[open_]) < 1e-9):
            a, b = np.where(open_, x, a), np.where(open_, x, b)
    # the end of the final bracket on the dark side of the level (Sun at or below it), so a dark
    # interval bounded by these times never starts or ends a hair above its Sun altitude
    return list(np.where(np.abs(b - a) <= xtol, np.where(fa <= 0, a, b), x))


def dark_interval(twilights, sun_limit="astronomical"):
    """(start, end) Time of the dark part of the night, or None if the Sun never gets that low.

    ``sun_limit`` names a twilight in `SUN_ALTITUDES`.  A night where the Sun
    sets below the limit but the evening crossing fell before the grid start
    (polar regions) is not handled and returns None.
    """
    if sun_limit not in SUN_ALTITUDES:
        raise StelltempError(f"unknown twilight '{sun_limit}' (use one of {', '.join(SUN_ALTITUDES)})")
    a, b = twilights[f"{sun_limit}_evening"], twilights[f"{sun_limit}_morning"]
    if a is None or b is None or b <= a:
        return None
    return a, b


def _as_skycoord(coords):
    if isinstance(coords, SkyCoord):
        return coords
    ra, dec = coords
    return SkyCoord(ra=np.atleast_1d(ra) * u.deg, dec=np.atleast_1d(dec) * u.deg, frame="icrs")


def altaz_of(coords, times, location):
    """Altitude and azimuth (deg) of targets over times: arrays of shape (n_targets, n_times).

    ``coords`` is an ICRS SkyCoord (array) or a pair (ra_deg, dec_deg).
    """
    c = _as_skycoord(coords)
    c = c.reshape(-1)
    with offline_iers():
        frame = AltAz(obstime=times[None, :], location=location)
        aa = c[:, None].transform_to(frame)
        return aa.alt.deg, aa.az.deg


@dataclass(frozen=True)
class Window:
    """Best observing window of one target in one night.

    Times are astropy Time (None when the target never qualifies);
    ``max_alt_deg`` and ``min_airmass`` refer to the best moment.
    """

    start: Time | None
    end: Time | None
    best: Time | None
    max_alt_deg: float
    min_airmass: float

    @property
    def usable(self) -> bool:
        return self.start is not None


def _interp_time(t0, t1, a0, a1, level):
    frac = (level - a0) / (a1 - a0) if a1 != a0 else 0.0
    return t0 + frac * (t1 - t0)


def best_windows(alt_deg, times, dark_mask, min_alt_deg=30.0):
    """Per target, the contiguous stretch of dark time above ``min_alt_deg`` around its highest point.

    Parameters
    ----------
    alt_deg : ndarray (n_targets, n_times)
        Target altitudes on the grid ``times``.
    times : Time
        The grid.
    dark_mask : ndarray of bool (n_times,)
        Grid points inside the dark interval.
    min_alt_deg : float
        Lowest usable altitude.

    Returns
    -------
    list of Window
        Start/end times are interpolated linearly in altitude where the
        window is bounded by ``min_alt_deg``; otherwise they are the edges of
        dark time on the grid.

    Examples
    --------
    Two invented targets on a grid of 9 dark times 0.05 d apart: one rises
    to 55°, the other never reaches 35°.

    >>> import numpy as np
    >>> from astropy.time import Time
    >>> times = Time(60000.0 + np.linspace(0, 0.4, 9), format="mjd")
    >>> alt = np.array([[20, 30, 40, 50, 55, 50, 40, 30, 20.0], [5, 6, 7, 8, 9, 10, 11, 12, 13.0]])
    >>> high, low = best_windows(alt, times, np.ones(9, bool), min_alt_deg=35.0)
    >>> round(float((high.end - high.start).to_value("h")), 2), high.max_alt_deg, round(high.min_airmass, 3)
    (6.0, 55.0, 1.22)
    >>> low.usable, low.max_alt_deg
    (False, 13.0)
    """
    alt = np.atleast_2d(alt_deg)
    mjd = times.mjd
    out = []
    for row in alt:
        ok = dark_mask & (row >= min_alt_deg)
        if not np.any(ok):
            out.append(Window(None, None, None, float(np.nanmax(np.where(dark_mask, row, np.nan)))
                              if np.any(dark_mask) else np.nan, np.nan))
            continue
        best_i = int(np.argmax(np.where(ok, row, -np.inf)))
        i0 = best_i
        while i0 > 0 and ok[i0 - 1]:
            i0 -= 1
        i1 = best_i
        while i1 < len(row) - 1 and ok[i1 + 1]:
            i1 += 1
        start, end = mjd[i0], mjd[i1]
        if i0 > 0 and dark_mask[i0 - 1] and row[i0 - 1] < min_alt_deg:
            start = _interp_time(mjd[i0 - 1], mjd[i0], row[i0 - 1], row[i0], min_alt_deg)
        if i1 < len(row) - 1 and dark_mask[i1 + 1] and row[i1 + 1] < min_alt_deg:
            end = _interp_time(mjd[i1], mjd[i1 + 1], row[i1], row[i1 + 1], min_alt_deg)
        with offline_iers():
            mk = lambda m: Time(m, format="mjd", scale="utc")  # noqa: E731
            out.append(Window(mk(start), mk(end), mk(mjd[best_i]), float(row[best_i]),
                              float(airmass_kasten_young(row[best_i]))))
    return out


def moon_geometry(times, location, coords=None):
    """The Moon over ``times``: altitude (deg), phase angle (deg, 0 = full), illuminated fraction,
    and, if ``coords`` given, the separation from each target (deg, shape (n_targets, n_times)).

    The phase angle follows from the geocentric Sun–Moon elongation ψ and the
    distances: tan α = r_sun sin ψ / (r_moon − r_sun cos ψ).
    """
    with offline_iers():
        frame = AltAz(obstime=times, location=location)
        moon = get_body("moon", times, location)
        sun = get_sun(times)
        moon_aa = moon.transform_to(frame)
        elong = sun.separation(moon).rad
        r_sun = sun.distance.to_value(u.km)
        r_moon = moon.distance.to_value(u.km)
        phase = np.degrees(np.arctan2(r_sun * np.sin(elong), r_moon - r_sun * np.cos(elong)))
        sep = None
        if coords is not None:
            c = _as_skycoord(coords).reshape(-1)
            t_aa = c[:, None].transform_to(AltAz(obstime=times[None, :], location=location))
            a1, z1 = t_aa.alt.rad, t_aa.az.rad
            a2, z2 = moon_aa.alt.rad[None, :], moon_aa.az.rad[None, :]
            cos_sep = np.sin(a1) * np.sin(a2) + np.cos(a1) * np.cos(a2) * np.cos(z1 - z2)
            sep = np.degrees(np.arccos(np.clip(cos_sep, -1.0, 1.0)))
    illum = 0.5 * (1.0 + np.cos(np.radians(phase)))
    return {"alt_deg": moon_aa.alt.deg, "phase_angle_deg": phase, "illuminated": illum, "separation_deg": sep}
