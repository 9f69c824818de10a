"""Instrumental photometry and standard-star lists as the reduction reads them.

Observations come one measurement per row (a "long" table), so that each
measurement carries its own airmass::

    star       name of the star (standards: as in the standard list)
    filter     filter name (as in the instrument file)
    inst_mag   instrumental magnitude, −2.5 log10(counts per second) + any constant (mag)
    inst_mag_err   its 1σ error (mag)
    airmass    X; or, instead, time_utc (ISO), ra and dec (ICRS degrees),
               from which X is computed for the instrument's site
               (Kasten & Young 1989, :mod:`stelltemp.observing.airmass`)
    visit      optional: measurements of one star sharing a visit label are
               reduced together (default: all of a star's measurements)

Standard lists have one row per star: ``star``, then one column per
passband key (standard magnitude, mag) with its error in ``<key>_err``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import StelltempError

__all__ = ["Observations", "observations_from_table", "standards_from_table", "airmass_from_position"]

OBS_COLUMNS = ("star", "filter", "inst_mag", "inst_mag_err")


@dataclass(frozen=True)
class Observations:
    """Measurements, one per element (plain arrays of equal length).

    Attributes
    ----------
    star, filter, visit : ndarray of str
    mag, err : ndarray of float
        Instrumental magnitude and its 1σ error (mag).
    airmass : ndarray of float
    airmass_source : str
        ``"table"`` or how it was computed.
    """

    star: np.ndarray
    filter: np.ndarray
    mag: np.ndarray
    err: np.ndarray
    airmass: np.ndarray
    visit: np.ndarray
    airmass_source: str = "table"

    def __len__(self):
        return len(self.mag)

    @classmethod
    def from_arrays(cls, star, filter, mag, err, airmass, visit=None, airmass_source="given"):
        """Build from plain sequences of one length (``filter``, ``err``, ``airmass`` may be single values)."""
        star = np.asarray(star, dtype=str)
        n = star.size
        def full(a, kind):  # a single value stands for every measurement
            a = np.asarray(a, dtype=kind)
            return np.full(n, a, dtype=a.dtype) if a.ndim == 0 else a

        arrays = [full(filter, str), np.asarray(mag, float), full(err, float), full(airmass, float)]
        visit = np.full(n, "", dtype=str) if visit is None else np.asarray(visit, dtype=str)
        for name, a in zip(("filter", "mag", "err", "airmass", "visit"), arrays + [visit]):
            if a.shape != (n,):
                raise StelltempError(f"observations: '{name}' has {a.size} entries, 'star' has {n}")
        return cls(star, arrays[0], arrays[1], arrays[2], arrays[3], visit, airmass_source)

    def usable(self):
        """True where magnitude, error and airmass are finite and plausible."""
        with np.errstate(invalid="ignore"):
            return (np.isfinite(self.mag) & (np.abs(self.mag) < 40) & np.isfinite(self.err) & (self.err > 0)
                    & (self.err < 5) & np.isfinite(self.airmass) & (self.airmass >= 1.0) & (self.airmass < 40))


def airmass_from_position(time_utc, ra_deg, dec_deg, site):
    """Airmass of each measurement from its time and position at ``site``.

    Parameters
    ----------
    time_utc : sequence of str or astropy Time
        Mid-exposure times (UTC).
    ra_deg, dec_deg : array_like
        ICRS position, degrees (one per measurement).
    site : stelltemp.observing.instrument.Site

    Returns
    -------
    ndarray
        Kasten & Young (1989) airmass; NaN below the horizon.
    """
    from astropy import units as u
    from astropy.coordinates import AltAz, SkyCoord
    from astropy.coordinates.erfa_astrom import ErfaAstromInterpolator, erfa_astrom
    from astropy.time import Time

    from ..observing.airmass import airmass_kasten_young
    from ..observing.night import offline_iers

    with offline_iers():
        try:
            t = Time(list(np.asarray(time_utc, dtype=str)), scale="utc")
        except ValueError as exc:
            raise StelltempError(f"observations: 'time_utc' holds a value that is not an ISO time ({exc})") from None
        c = SkyCoord(ra=np.asarray(ra_deg, float) * u.deg, dec=np.asarray(dec_deg, float) * u.deg, frame="icrs")
        # astrometry parameters interpolated over 5 min: far below an airmass error that matters
        with erfa_astrom.set(ErfaAstromInterpolator(300 * u.s)):
            alt = c.transform_to(AltAz(obstime=t, location=site.location())).alt.deg
    return airmass_kasten_young(alt)


def _float_column(table, name, what):
    col = table[name]
    try:
        values = np.ma.filled(np.ma.asarray(col, dtype=float), np.nan)
    except (TypeError, ValueError):
        raise StelltempError(f"{what}: column '{name}' is not numeric") from None
    return np.asarray(values, float)


def _text_column(table, name):
    return np.array([str(v).strip() for v in np.ma.filled(np.ma.asarray(table[name]).astype(str), "")])


def observations_from_table(table, site=None, what="observations"):
    """Read measurements from an astropy Table in the layout of this module.

    Parameters
    ----------
    table : astropy.table.Table
    site : Site, optional
        Needed when the table gives time and position instead of airmass.
    what : str
        Name used in error messages (e.g. the file name).

    Returns
    -------
    Observations
    """
    missing = [c for c in OBS_COLUMNS if c not in table.colnames]
    if missing:
        raise StelltempError(f"{what}: missing column(s) {', '.join(missing)} "
                             f"(needs {', '.join(OBS_COLUMNS)} and airmass or time_utc+ra+dec)")
    if len(table) == 0:
        raise StelltempError(f"{what}: no rows")
    star = _text_column(table, "star")
    filt = _text_column(table, "filter")
    visit = _text_column(table, "visit") if "visit" in table.colnames else None
    mag = _float_column(table, "inst_mag", what)
    err = _float_column(table, "inst_mag_err", what)
    if "airmass" in table.colnames:
        x, source = _float_column(table, "airmass", what), "table"
    elif all(c in table.colnames for c in ("time_utc", "ra", "dec")):
        if site is None:
            raise StelltempError(f"{what}: airmass from time_utc/ra/dec needs the instrument file (its site)")
        x = airmass_from_position(_text_column(table, "time_utc"), _float_column(table, "ra", what),
                                  _float_column(table, "dec", what), site)
        source = "computed from time_utc, ra, dec at the instrument site (Kasten & Young 1989)"
    else:
        raise StelltempError(f"{what}: give an 'airmass' column, or 'time_utc', 'ra' and 'dec'")
    return Observations.from_arrays(star, filt, mag, err, x, visit, source)


def standards_from_table(table, what="standards"):
    """Standard magnitudes per star: {star: {passband key: (mag, err)}}.

    Columns named by passband key (any spelling :func:`stelltemp.passbands.get_passband`
    accepts) with ``<column>_err``; a missing error column means error 0 (noted by
    the caller); empty cells are not measured.
    """
    from ..passbands import get_passband

    if "star" not in table.colnames:
        raise StelltempError(f"{what}: missing column 'star'")
    names = _text_column(table, "star")
    if len(set(names)) < len(names):
        dup = sorted({n for n in names if list(names).count(n) > 1})
        raise StelltempError(f"{what}: star listed twice: {', '.join(dup[:5])}")
    bands = {}
    for col in table.colnames:
        if col == "star" or col.endswith("_err"):
            continue
        try:
            key = get_passband(col).key
        except (StelltempError, OSError, ValueError):
            continue  # not a passband: other information
        mag = _float_column(table, col, what)
        err = _float_column(table, col + "_err", what) if col + "_err" in table.colnames else np.zeros(len(mag))
        bands[key] = (mag, err)
    if not bands:
        raise StelltempError(f"{what}: no column named by a passband key")
    out = {}
    for i, n in enumerate(names):
        out[n] = {k: (float(m[i]), float(e[i])) for k, (m, e) in bands.items() if np.isfinite(m[i])}
    return out
