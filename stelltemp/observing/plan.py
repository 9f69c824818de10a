"""Planning tables: count rates, S/N, exposure times and saturation per target and filter.

`plan_target` does one star at one airmass through every filter of an
instrument; `plan_night` does a list of stars with coordinates for one night
at the instrument's site, each at the lowest airmass of its best dark-time
window, and adds the window and the Moon.

Choices (all adjustable by keyword):

* seeing grows with airmass as X^0.6 (Kolmogorov turbulence, common practice);
* the measuring aperture has radius 1 × FWHM, close to the S/N optimum for
  faint stars found by Howell (1989, PASP 101, 616) (from memory); the source
  rate in it is the profile's enclosed fraction;
* the sky is estimated in an annulus from 3 to 5 FWHM (common practice),
  which sets n_B in the CCD equation;
* the moonless sky brightens away from the zenith as in Krisciunas &
  Schaefer (1991, PASP 103, 1033) eq. 1;
* scintillation from Osborn et al. (2015) with C_Y = 1.5;
* exposures shorter than 1 s get a note in ``advice`` (mechanical shutters
  and scintillation make them unreliable; common practice).

Every numeric column carries an astropy unit; text columns carry a
description.
"""

from __future__ import annotations

import math

import numpy as np
from astropy import units as u
from astropy.coordinates import Angle
from astropy.table import Table

from ..errors import StelltempError
from . import ccd, counts, psf
from .airmass import airmass_kasten_young
from .instrument import Instrument

__all__ = ["plan_target", "plan_night", "read_targets", "parse_targets", "night_tracks", "SEEING_AIRMASS_POWER"]

#: seeing FWHM ∝ X^0.6 (Kolmogorov turbulence, common practice)
SEEING_AIRMASS_POWER = 0.6

_E_S = u.electron / u.s
_E_S_PIX = u.electron / (u.s * u.pix)

# (name, unit, description) of the per-filter columns, in order
_FILTER_COLUMNS = [
    ("target", None, "target name"),
    ("filter", None, "instrument filter"),
    ("mag", u.mag, "given magnitude (outside the atmosphere)"),
    ("mag_band", None, "passband of the given magnitude"),
    ("teff", u.K, "blackbody temperature (NaN: Vega-shaped spectrum)"),
    ("ebv", u.mag, "E(B-V) applied to the blackbody (the magnitude is the reddened one)"),
    ("airmass", u.dimensionless_unscaled, "airmass X used for extinction, sky and seeing"),
    ("seeing_fwhm", u.arcsec, "seeing FWHM at this airmass"),
    ("aperture_radius", u.arcsec, "measuring aperture radius"),
    ("n_pix", u.pix, "pixels in the aperture (read-out pixels)"),
    ("n_background", u.pix, "pixels in the sky annulus"),
    ("star_rate", _E_S, "source electrons per second in the whole image"),
    ("aperture_rate", _E_S, "source electrons per second inside the aperture"),
    ("sky_mag", u.mag / u.arcsec**2, "sky surface brightness used"),
    ("sky_rate", _E_S_PIX, "sky electrons per second per read-out pixel"),
    ("dark_rate", _E_S_PIX, "dark electrons per second per read-out pixel"),
    ("scintillation_1s", u.dimensionless_unscaled, "relative scintillation noise for a 1 s exposure"),
    ("exposure_for_snr", u.s, "single exposure reaching the target S/N"),
    ("exposure", u.s, "planned single exposure"),
    ("snr", u.dimensionless_unscaled, "S/N of the planned exposure"),
    ("peak_e", u.electron, "electrons in the brightest physical pixel (star centred)"),
    ("peak_adu", u.adu, "ADU of the brightest read-out pixel, bias included, before clipping at the ADC limit"),
    ("nonlinear_after", u.s, "exposure at which the peak reaches the headroom"),
    ("saturation", None, "ok / nonlinear / saturated"),
    ("n_exposures", u.dimensionless_unscaled, "suggested number of exposures"),
    ("each_exposure", u.s, "suggested time of each exposure"),
    ("total_time", u.s, "suggested total time"),
    ("advice", None, "saturation advice"),
]

_NIGHT_COLUMNS = [
    ("window_start", None, "start of the best window, UTC (ISO 8601)"),
    ("window_end", None, "end of the best window, UTC (ISO 8601)"),
    ("best_time", None, "time of highest altitude in the window, UTC (ISO 8601)"),
    ("max_altitude", u.deg, "highest altitude in the window"),
    ("min_airmass", u.dimensionless_unscaled, "lowest airmass in the window (Kasten & Young 1989)"),
    ("moon_separation", u.deg, "Moon–target separation at the best time"),
    ("moon_altitude", u.deg, "Moon altitude at the best time"),
    ("moon_delta_v", u.mag, "V sky change from moonlight at the best time (Krisciunas & Schaefer 1991)"),
    ("flags", None, "problems with this row ('' when none)"),
]


def _resolve_band(instrument: Instrument, band):
    """A passband key, or the passband of an instrument filter of that name."""
    if band is None:
        return None
    if isinstance(band, str) and band in instrument.filters:
        return instrument.filters[band].passband
    from ..passbands import get_passband

    return get_passband(band)


def _filter_row(instrument, fname, mag, band, teff, airmass, snr, exposure_s, seeing_arcsec, aperture_fwhm,
                annulus_fwhm, profile, beta, headroom, c_y, sky_delta_mag, min_exposure_s=1.0, ebv=0.0):
    spec = instrument.filter(fname)
    cam, tel, site = instrument.camera, instrument.telescope, instrument.site
    x = float(airmass)
    if not (math.isfinite(x) and 1.0 <= x <= 40.0):
        raise StelltempError(f"airmass must be between 1 and 40, got {airmass!r}")
    fwhm = (seeing_arcsec or site.seeing_fwhm_arcsec) * x**SEEING_AIRMASS_POWER
    pix = cam.binned_scale_arcsec
    r_ap = aperture_fwhm * fwhm
    n_pix = psf.aperture_pixels(r_ap, pix)
    r1, r2 = annulus_fwhm
    if not (0 < r1 < r2):
        raise StelltempError(f"sky annulus must have 0 < inner < outer, got {annulus_fwhm!r}")
    n_b = math.pi * ((r2 * fwhm) ** 2 - (r1 * fwhm) ** 2) / pix**2
    rate = counts.star_electron_rate(instrument, fname, mag, band, teff, airmass=x, ebv=ebv)
    ap_rate = rate * float(psf.enclosed_fraction(r_ap, fwhm, profile, beta))
    sky_mag = spec.sky_mag_arcsec2 + float(counts.sky_airmass_brightening(x, spec.extinction_mag_per_airmass)) \
        + sky_delta_mag
    sky = counts.sky_electron_rate(instrument, fname, sky_mag)
    dark = counts.dark_electron_rate(instrument)
    scint = float(ccd.scintillation_coefficient(tel.aperture_m, x, site.elevation_m, c_y)) if c_y else 0.0
    common = (ap_rate, sky, dark, cam.read_noise_e, n_pix, n_b, cam.gain_e_per_adu, ccd.SIGMA_F_ADU, scint)
    t_snr = float(ccd.exposure_for_snr(snr, *common)) if snr is not None else math.nan
    t_plan = float(exposure_s) if exposure_s is not None else t_snr
    s_n = float(ccd.snr(t_plan, *common))
    adv = psf.saturation_advice(t_plan, snr, rate, ap_rate, sky, dark, cam.read_noise_e, n_pix, n_b, fwhm,
                                cam.pixel_scale_arcsec, cam.full_well_e, cam.gain_e_per_adu, cam.saturation_adu,
                                cam.bias_adu, cam.binning, scint, headroom, profile, beta, warn=False)
    message = adv.message
    shortest = min(t_plan, adv.exposure_s) if math.isfinite(adv.exposure_s) else t_plan
    if math.isfinite(shortest) and shortest < min_exposure_s:
        note = (f"exposure {shortest:.2g} s is below {min_exposure_s:g} s: shutter timing and scintillation "
                "make very short exposures unreliable")
        message = f"{message}; {note}" if message else note
    return {
        "airmass": x, "seeing_fwhm": fwhm, "aperture_radius": r_ap, "n_pix": n_pix, "n_background": n_b,
        "star_rate": rate, "aperture_rate": ap_rate, "sky_mag": sky_mag, "sky_rate": sky, "dark_rate": dark,
        "scintillation_1s": scint, "exposure_for_snr": t_snr, "exposure": t_plan, "snr": s_n,
        "peak_e": adv.peak_e, "peak_adu": adv.peak_adu, "nonlinear_after": adv.limit_s,
        "saturation": adv.status, "n_exposures": adv.n_exposures, "each_exposure": adv.exposure_s,
        "total_time": adv.total_s, "advice": message,
    }


def _blank_row():
    return {name: ("" if unit is None else math.nan) for name, unit, _ in _FILTER_COLUMNS + _NIGHT_COLUMNS}


def _build_table(rows, columns, meta):
    t = Table(meta=meta)
    for name, unit, desc in columns:
        values = [r[name] for r in rows]
        if unit is None:
            t[name] = np.array([str(v) for v in values], dtype=str) if values else np.array([], dtype=str)
        else:
            t[name] = np.array(values, dtype=float) if values else np.array([], dtype=float)
            t[name].unit = unit
        t[name].description = desc
    return t


def _check_goal(snr, exposure_s):
    if snr is None and exposure_s is None:
        raise StelltempError("give a target S/N, an exposure time, or both")
    if snr is not None and not (math.isfinite(snr) and snr > 0):
        raise StelltempError(f"target S/N must be positive, got {snr!r}")
    if exposure_s is not None and not (math.isfinite(exposure_s) and exposure_s > 0):
        raise StelltempError(f"exposure time must be positive, got {exposure_s!r}")


def plan_target(instrument: Instrument, mag, band=None, teff=None, *, ebv=0.0, snr=None, exposure_s=None, airmass=1.0,
                filters=None, name="target", seeing_arcsec=None, aperture_fwhm=1.0, annulus_fwhm=(3.0, 5.0),
                profile="moffat", beta=psf.MOFFAT_BETA_TURBULENCE, headroom=psf.DEFAULT_HEADROOM,
                c_y=ccd.C_Y_TYPICAL, sky_delta_mag=0.0) -> Table:
    """Plan one star through the filters of an instrument.

    Parameters
    ----------
    instrument : Instrument
    mag : float
        Magnitude outside the atmosphere in ``band``.
    band : str, optional
        Passband key or instrument filter name of ``mag`` (default: each
        filter's own passband, i.e. ``mag`` is taken in every filter).
    teff : float, optional
        Blackbody temperature, K (None: Vega-shaped spectrum).
    ebv : float
        E(B−V) of the star, applied to the blackbody (``mag`` is then the
        observed, reddened magnitude).
    snr : float, optional
        Target S/N; gives ``exposure_for_snr``.
    exposure_s : float, optional
        Planned exposure, s (default: the exposure for the target S/N).
    airmass : float
        Airmass X (≥ 1).
    filters : list of str, optional
        Subset of the instrument's filters (default: all).
    seeing_arcsec : float, optional
        Zenith seeing FWHM (default: the site's).
    aperture_fwhm, annulus_fwhm : float, (float, float)
        Aperture radius and sky annulus radii in units of the FWHM.
    profile, beta : str, float
        Seeing profile ("moffat"/"gaussian") and Moffat β.
    headroom : float
        Usable fraction of full well / ADC range.
    c_y : float
        Scintillation correction factor (0 to ignore scintillation).
    sky_delta_mag : float
        Added to the sky magnitude (e.g. moonlight, negative = brighter).

    Returns
    -------
    astropy.table.Table
        One row per filter; columns and units as listed in ``_FILTER_COLUMNS``.
    """
    _check_goal(snr, exposure_s)
    pb_band = _resolve_band(instrument, band)
    names = list(filters) if filters else list(instrument.filters)
    rows = []
    for f in names:
        r = _blank_row()
        r.update(target=name, filter=f, mag=float(mag), mag_band=(pb_band.key if pb_band is not None else
                                                                   instrument.filter(f).passband.key),
                 teff=math.nan if teff is None else float(teff), ebv=float(ebv))
        r.update(_filter_row(instrument, f, mag, pb_band, teff, airmass, snr, exposure_s, seeing_arcsec,
                             aperture_fwhm, annulus_fwhm, profile, beta, headroom, c_y, sky_delta_mag, ebv=ebv))
        rows.append(r)
    meta = {"instrument": instrument.title or instrument.source, "target_snr": snr, "planned_exposure_s": exposure_s,
            "read_noise_e": instrument.camera.read_noise_e, "gain_e_per_adu": instrument.camera.gain_e_per_adu,
            "sky_spectrum": "zero-point source of each band's magnitude system (Vega or flat F_nu)"}
    return _build_table(rows, _FILTER_COLUMNS, meta)


# --------------------------------------------------------------------------
# Target lists
# --------------------------------------------------------------------------
def _parse_angle(value, unit):
    if isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool):
        v = float(value)
        if not math.isfinite(v):
            raise ValueError("not finite")
        return v
    s = str(value).strip()
    try:
        return float(s)
    except ValueError:
        pass
    has_unit = any(c in s for c in "hdms°'\"")
    return Angle(s, unit=None if has_unit else unit).deg


def parse_targets(table: Table):
    """Check a target table row by row.

    Required columns (case-insensitive): ``name, ra, dec, mag, band``;
    optional ``teff`` (K, blank = none) and ``ebv`` (mag, blank = 0).  ``ra`` is degrees or sexagesimal
    hours ("12:30:00" or "12h30m"); ``dec`` degrees or sexagesimal degrees.

    Returns
    -------
    list of dict
        One per row: name, ra_deg, dec_deg, mag, band, teff (None or K), ebv (mag), and
        ``error`` ('' or the one-line problem).
    """
    cols = {c.lower(): c for c in table.colnames}
    missing = [c for c in ("name", "ra", "dec", "mag", "band") if c not in cols]
    if missing:
        raise StelltempError(f"target list lacks column(s) {', '.join(missing)} (has: {', '.join(table.colnames)})")
    out = []
    for i, row in enumerate(table):
        rec = {"name": str(row[cols["name"]]).strip() or f"row {i + 1}", "ra_deg": math.nan, "dec_deg": math.nan,
               "mag": math.nan, "band": str(row[cols["band"]]).strip(), "teff": None, "ebv": 0.0, "error": ""}
        try:
            rec["ra_deg"] = _parse_angle(row[cols["ra"]], u.hourangle) % 360.0
        except (ValueError, TypeError, u.UnitsError):
            rec["error"] = f"bad ra '{row[cols['ra']]}'"
        try:
            dec = _parse_angle(row[cols["dec"]], u.deg)
            if not -90 <= dec <= 90:
                raise ValueError
            rec["dec_deg"] = dec
        except (ValueError, TypeError, u.UnitsError):
            rec["error"] = rec["error"] or f"bad dec '{row[cols['dec']]}'"
        try:
            m = float(row[cols["mag"]])
            if not (math.isfinite(m) and -30 < m < 40):
                raise ValueError
            rec["mag"] = m
        except (ValueError, TypeError):
            rec["error"] = rec["error"] or f"bad mag '{row[cols['mag']]}'"
        if "teff" in cols:
            v = row[cols["teff"]]
            if not (np.ma.is_masked(v) or str(v).strip() in ("", "nan", "--")):
                try:
                    t = float(v)
                    if not (math.isfinite(t) and 500 <= t <= 1e6):
                        raise ValueError
                    rec["teff"] = t
                except (ValueError, TypeError):
                    rec["error"] = rec["error"] or f"bad teff '{v}' (K, 500-1e6)"
        if "ebv" in cols:
            v = row[cols["ebv"]]
            if not (np.ma.is_masked(v) or str(v).strip() in ("", "nan", "--")):
                try:
                    e = float(v)
                    if not (math.isfinite(e) and -0.5 <= e <= 6.0):
                        raise ValueError
                    rec["ebv"] = e
                except (ValueError, TypeError):
                    rec["error"] = rec["error"] or f"bad ebv '{v}' (mag, -0.5 to 6)"
        out.append(rec)
    return out


def read_targets(path):
    """Read a target list (CSV or ECSV) and check it with `parse_targets`."""
    from pathlib import Path

    p = Path(path)
    fmt = "ascii.ecsv" if p.suffix.lower() == ".ecsv" else "ascii.csv"
    from ..errors import plain_reason
    from ..safeio import read_text_file

    text = read_text_file(p, "target list").splitlines()  # missing, unreadable or not UTF-8: one plain line
    try:
        # CSV: '#' lines are comments, as in the catalogue reader
        t = Table.read(text, format=fmt) if fmt == "ascii.ecsv" else Table.read(text, format=fmt, comment="#")
    except Exception as exc:  # astropy raises many types for malformed tables
        raise StelltempError(f"cannot read target list {p.name}: {plain_reason(exc)}") from None
    return parse_targets(t)


def _night_setup(instrument, date, step_min, sun_limit):
    from . import night

    site = instrument.site
    tw = night.twilight_times(date, site)
    dark = night.dark_interval(tw, sun_limit)
    grid = night.night_grid(date, site, step_min)
    return night, site.location(), tw, dark, grid


def night_tracks(instrument: Instrument, targets, date, step_min=10.0, sun_limit="astronomical"):
    """Altitude, airmass and count rates through the night for a target list.

    Parameters
    ----------
    targets : list of dict
        From `parse_targets` / `read_targets` (rows with errors are skipped).

    Returns
    -------
    dict
        ``times`` (Time grid), ``sun_alt`` (deg), ``dark`` (bool mask),
        ``names``, ``alt`` and ``airmass`` (n_targets × n_times, Kasten &
        Young; NaN below the horizon), ``rates`` {filter: e⁻ s⁻¹ array
        (n_targets × n_times), NaN below the horizon}, ``twilight``.
    """
    night, loc, tw, dark, grid = _night_setup(instrument, date, step_min, sun_limit)
    good = [t for t in targets if not t["error"]]
    sun_alt = night.sun_altitude(grid, loc)
    mask = np.zeros(len(grid), bool) if dark is None else (grid >= dark[0]) & (grid <= dark[1])
    if not good:
        return {"times": grid, "sun_alt": sun_alt, "dark": mask, "names": [], "alt": np.empty((0, len(grid))),
                "airmass": np.empty((0, len(grid))), "rates": {}, "twilight": tw}
    alt, _ = night.altaz_of(([t["ra_deg"] for t in good], [t["dec_deg"] for t in good]), grid, loc)
    x = airmass_kasten_young(alt)
    rates = {}
    for f in instrument.filters:
        k = instrument.filters[f].extinction_mag_per_airmass
        r = np.full(alt.shape, np.nan)
        for i, t in enumerate(good):
            try:
                top = counts.star_electron_rate(instrument, f, t["mag"], _resolve_band(instrument, t["band"]),
                                                t["teff"], airmass=0.0, ebv=t.get("ebv", 0.0))
            except StelltempError:
                continue
            r[i] = top * np.where(np.isfinite(x[i]), counts.extinction_factor(k, np.nan_to_num(x[i])), np.nan)
        rates[f] = r
    return {"times": grid, "sun_alt": sun_alt, "dark": mask, "names": [t["name"] for t in good], "alt": alt,
            "airmass": x, "rates": rates, "twilight": tw}


def plan_night(instrument: Instrument, targets, date, *, snr=None, exposure_s=None, min_alt_deg=30.0,
               step_min=10.0, sun_limit="astronomical", moon=True, **options) -> Table:
    """Plan a target list for one night at the instrument's site.

    Each target is planned (as `plan_target`, with the same ``options``) at
    the lowest airmass of its best window: the contiguous stretch of dark time
    (Sun below ``sun_limit``) above ``min_alt_deg`` around its highest point.
    A bad row or a target with no window gets a note in ``flags`` and the
    rest go on.

    Parameters
    ----------
    targets : list of dict or Table
        `parse_targets` output, or a table with columns name, ra, dec, mag,
        band[, teff, ebv].
    date : str
        Local date of the evening, YYYY-MM-DD.

    Returns
    -------
    astropy.table.Table
        One row per target and filter; ``meta`` holds the twilight times,
        the dark interval and any Sun-safety warnings.
    """
    from .moon import moon_sky_vmag
    from .safety import sun_warnings

    _check_goal(snr, exposure_s)
    if not (0 <= min_alt_deg < 90):
        raise StelltempError(f"minimum altitude must be 0–90 deg, got {min_alt_deg!r}")
    if isinstance(targets, Table):
        targets = parse_targets(targets)
    night, loc, tw, dark, grid = _night_setup(instrument, date, step_min, sun_limit)
    mask = np.zeros(len(grid), bool) if dark is None else (grid >= dark[0]) & (grid <= dark[1])
    good = [i for i, t in enumerate(targets) if not t["error"]]
    windows, moon_info = {}, {}
    if good:
        coords = ([targets[i]["ra_deg"] for i in good], [targets[i]["dec_deg"] for i in good])
        alt, _ = night.altaz_of(coords, grid, loc)
        for i, w in zip(good, night.best_windows(alt, grid, mask, min_alt_deg)):
            windows[i] = w
        if moon:
            m = night.moon_geometry(grid, loc, coords)
            v_filter = _v_like_filter(instrument)
            for j, i in enumerate(good):
                w = windows[i]
                if not w.usable:
                    continue
                b = int(np.argmin(np.abs(grid.mjd - w.best.mjd)))
                sep, malt = float(m["separation_deg"][j, b]), float(m["alt_deg"][b])
                k_v = v_filter.extinction_mag_per_airmass if v_filter else 0.2
                sky_v = v_filter.sky_mag_arcsec2 if v_filter else 21.5
                _, dv = moon_sky_vmag(sky_v, m["phase_angle_deg"][b], sep, 90.0 - w.max_alt_deg, 90.0 - malt, k_v)
                moon_info[i] = (sep, malt, float(dv))
    rows = []
    for i, t in enumerate(targets):
        base = _blank_row()
        base.update(target=t["name"], mag=t["mag"], mag_band=t["band"],
                    teff=math.nan if t["teff"] is None else t["teff"], ebv=t.get("ebv", 0.0))
        flags = [t["error"]] if t["error"] else []
        w = windows.get(i)
        if w is not None:
            base.update(max_altitude=w.max_alt_deg, min_airmass=w.min_airmass)
            if w.usable:
                base.update(window_start=w.start.isot[:19], window_end=w.end.isot[:19], best_time=w.best.isot[:19])
            else:
                flags.append(f"no dark time above {min_alt_deg:g} deg" if dark is not None
                             else f"no dark time (Sun never below the {sun_limit} limit)")
        if i in moon_info:
            base.update(moon_separation=moon_info[i][0], moon_altitude=moon_info[i][1], moon_delta_v=moon_info[i][2])
            if not math.isfinite(moon_info[i][2]):
                flags.append("within 10 deg of the Moon")
        for f in instrument.filters:
            r = dict(base, filter=f)
            if w is not None and w.usable and not t["error"]:
                try:
                    band = _resolve_band(instrument, t["band"])
                    r.update(_filter_row(instrument, f, t["mag"], band, t["teff"], w.min_airmass, snr, exposure_s,
                                         options.get("seeing_arcsec"), options.get("aperture_fwhm", 1.0),
                                         options.get("annulus_fwhm", (3.0, 5.0)), options.get("profile", "moffat"),
                                         options.get("beta", psf.MOFFAT_BETA_TURBULENCE),
                                         options.get("headroom", psf.DEFAULT_HEADROOM),
                                         options.get("c_y", ccd.C_Y_TYPICAL), options.get("sky_delta_mag", 0.0),
                                         ebv=t.get("ebv", 0.0)))
                except StelltempError as exc:
                    r["flags"] = "; ".join(flags + [str(exc)])
                    rows.append(r)
                    continue
            r["flags"] = "; ".join(flags)
            rows.append(r)
    # Sun check at the start, best moment and end of every window (windows lie in the chosen dark time,
    # but with sun_limit="civil" they may reach into bright twilight)
    usable = [i for i in good if windows[i].usable]
    warnings_ = []
    if usable:
        from astropy.time import Time

        mjds = [getattr(windows[i], k).mjd for k in ("start", "best", "end") for i in usable]
        names = [targets[i]["name"] for _ in range(3) for i in usable]
        coords = ([targets[i]["ra_deg"] for _ in range(3) for i in usable],
                  [targets[i]["dec_deg"] for _ in range(3) for i in usable])
        tt = Time(mjds, format="mjd", scale="utc")
        if len(tt) == 1:
            tt = tt[0]
        for w in sun_warnings(tt, loc, coords, names):
            if w not in warnings_:
                warnings_.append(w)
    meta = {
        "instrument": instrument.title or instrument.source,
        "date": str(night.parse_date(date)),
        "site": instrument.site.name,
        "twilight": {k: (v.isot[:19] if v is not None else None) for k, v in tw.items()},
        "dark_start": dark[0].isot[:19] if dark else None,
        "dark_end": dark[1].isot[:19] if dark else None,
        "sun_limit": sun_limit,
        "min_altitude_deg": min_alt_deg,
        "target_snr": snr,
        "planned_exposure_s": exposure_s,
        "read_noise_e": instrument.camera.read_noise_e,
        "gain_e_per_adu": instrument.camera.gain_e_per_adu,
        "sun_warnings": warnings_,
    }
    return _build_table(rows, _FILTER_COLUMNS + _NIGHT_COLUMNS, meta)


def _v_like_filter(instrument):
    """The filter whose pivot wavelength is closest to 5500 Å (for the V-band Moon model)."""
    best, dist = None, math.inf
    for spec in instrument.filters.values():
        pb = spec.passband
        s_, w_ = pb.photon_response, pb.wave
        pivot = math.sqrt(np.trapezoid(s_ * w_, w_) / np.trapezoid(s_ / w_, w_))  # Tokunaga & Vacca 2005
        d = abs(pivot - 5500.0)
        if d < dist:
            best, dist = spec, d
    return best if dist < 800 else None
