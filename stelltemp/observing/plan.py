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
* the star's count rate in each filter is anchored to its own measured
  magnitudes (`stelltemp.observing.anchor`), and the table says per row
  where each rate came from;
* moonlight (Krisciunas & Schaefer 1991) at the target's position and best
  time is added to the sky, with the colour assumption of
  `counts.MOONLIGHT_COLOUR`;
* no exposure shorter than the camera's ``min_exposure_s`` is advised: a
  goal reached sooner is planned at the minimum (higher S/N), and a star too
  bright even then gets the light cut it needs (ND filter, stop, defocus).

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
from ..validation import STEP_MINUTES
from . import ccd, counts, psf
from .airmass import airmass_kasten_young
from .instrument import Instrument

__all__ = ["plan_target", "plan_night", "night_summary", "read_targets", "parse_targets", "night_tracks",
           "SEEING_AIRMASS_POWER"]

#: seeing FWHM ∝ X^0.6 (Kolmogorov turbulence, common practice)
SEEING_AIRMASS_POWER = 0.6

_E_S = u.electron / u.s
_E_S_PIX = u.electron / (u.s * u.pix)

# (name, unit, description) of the per-filter columns, in order
_FILTER_COLUMNS = [
    ("target", None, "target name"),
    ("filter", None, "instrument filter"),
    ("mag", u.mag, "measured magnitude the rate is anchored to (outside the atmosphere; NaN: interpolated)"),
    ("mag_band", None, "measured passband(s) the rate is anchored to"),
    ("rate_source", None, "where the rate comes from: measured / interpolated / extrapolated / template"),
    ("colour_term", u.mag, "natural-band minus standard-band magnitude of the star (measured rates)"),
    ("teff", u.K, "blackbody temperature of the spectral shape (NaN: A0 V template)"),
    ("spectrum", None, "spectral shape: given teff / engine (T_bb fitted to the row) / template"),
    ("ebv", u.mag, "E(B-V) applied to the spectrum (magnitudes are the observed, reddened ones)"),
    ("airmass", u.dimensionless_unscaled, "airmass X used for extinction, sky and seeing"),
    ("seeing_fwhm", u.arcsec, "seeing FWHM at this airmass"),
    ("aperture_radius", u.arcsec, "measuring aperture radius"),
    ("n_pix", u.pix, "pixels in the aperture (read-out pixels)"),
    ("n_background", u.pix, "pixels in the sky annulus"),
    ("star_rate", _E_S, "source electrons per second in the whole image"),
    ("aperture_rate", _E_S, "source electrons per second inside the aperture"),
    ("sky_mag", u.mag / u.arcsec**2, "sky surface brightness used, moonlight included (band's own system)"),
    ("moon_sky_rate", _E_S_PIX, "part of sky_rate from scattered moonlight"),
    ("sky_rate", _E_S_PIX, "sky electrons per second per read-out pixel (dark sky + moonlight)"),
    ("dark_rate", _E_S_PIX, "dark electrons per second per read-out pixel"),
    ("scintillation_1s", u.dimensionless_unscaled, "relative scintillation noise for a 1 s exposure"),
    ("exposure_for_snr", u.s, "single exposure reaching the target S/N"),
    ("exposure", u.s, "planned single exposure"),
    ("snr", u.dimensionless_unscaled, "S/N of the planned exposure"),
    ("peak_e", u.electron, "electrons in the brightest physical pixel (star centred), clipped at the full well"),
    ("peak_adu", u.adu, "ADU of the brightest read-out pixel, bias included, clipped at the ADC maximum"),
    ("peak_excess", u.dimensionless_unscaled, "unclipped peak / hard limit (> 1: clipped by this factor)"),
    ("light_cut", u.dimensionless_unscaled, "factor the light must be cut by (ND, stop, defocus); 1: none"),
    ("nonlinear_after", u.s, "exposure at which the peak reaches the headroom"),
    ("saturation", None, "ok / nonlinear / saturated"),
    ("n_exposures", u.dimensionless_unscaled, "suggested number of exposures"),
    ("each_exposure", u.s, "suggested time of each exposure"),
    ("total_time", u.s, "suggested total time"),
    ("advice", None, "exposure and saturation advice"),
    ("rate_note", None, "how the rate was computed"),
]

_NIGHT_COLUMNS = [
    ("window_start", None, "start of the best window, UTC (ISO 8601)"),
    ("window_end", None, "end of the best window, UTC (ISO 8601)"),
    ("best_time", None, "time of highest altitude in the window, UTC (ISO 8601)"),
    ("max_altitude", u.deg, "highest altitude in the window"),
    ("min_airmass", u.dimensionless_unscaled, "lowest airmass in the window (Kasten & Young 1989)"),
    ("moon_separation", u.deg, "Moon–target separation at the best time"),
    ("moon_altitude", u.deg, "Moon altitude at the best time"),
    ("moon_illuminated", u.dimensionless_unscaled, "illuminated fraction of the Moon at the best time"),
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


def _filter_row(instrument, fname, rate_top, airmass, snr, exposure_s, seeing_arcsec, aperture_fwhm,
                annulus_fwhm, profile, beta, headroom, c_y, sky_delta_mag=0.0, moon_v_arcsec2=math.inf):
    """One filter at one airmass from the rate above the atmosphere (e⁻ s⁻¹)."""
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
    rate = float(rate_top * counts.extinction_factor(spec.extinction_mag_per_airmass, x))
    ap_rate = rate * float(psf.enclosed_fraction(r_ap, fwhm, profile, beta))
    dark_sky_mag = spec.sky_mag_arcsec2 + float(counts.sky_airmass_brightening(x, spec.extinction_mag_per_airmass)) \
        + sky_delta_mag
    moon = counts.moonlight_electron_rate(instrument, fname, moon_v_arcsec2)
    sky = counts.sky_electron_rate(instrument, fname, dark_sky_mag) + moon
    sky_mag = -2.5 * math.log10(sky / (counts.zero_point_rate(instrument, fname) * pix**2))
    dark = counts.dark_electron_rate(instrument)
    scint = float(ccd.scintillation_coefficient(tel.aperture_m, x, site.elevation_m, c_y)) if c_y else 0.0
    common = (ap_rate, sky, dark, cam.read_noise_e, n_pix, n_b, cam.gain_e_per_adu, ccd.SIGMA_F_ADU, scint)
    t_snr = float(ccd.exposure_for_snr(snr, *common)) if snr is not None else math.nan
    t_min = cam.min_exposure_s
    notes = []
    if exposure_s is not None:
        t_plan = float(exposure_s)
        if t_plan < t_min:
            notes.append(f"the given {t_plan:.3g} s is below this camera's {t_min:.3g} s minimum exposure")
    elif t_snr < t_min:
        t_plan = t_min
        notes.append(f"S/N {snr:.3g} is reached in {t_snr:.2g} s, below the {t_min:.3g} s minimum exposure: "
                     f"planned {t_min:.3g} s")
    else:
        t_plan = t_snr
    s_n = float(ccd.snr(t_plan, *common))
    adv = psf.saturation_advice(t_plan, snr, rate, ap_rate, sky, dark, cam.read_noise_e, n_pix, n_b, fwhm,
                                cam.pixel_scale_arcsec, cam.full_well_e, cam.gain_e_per_adu, cam.saturation_adu,
                                cam.bias_adu, cam.binning, scint, headroom, profile, beta, warn=False,
                                min_exposure_s=t_min, aperture_m=tel.aperture_m, obstruction_m=tel.obstruction_m)
    if adv.message:
        notes.append(adv.message)
    return {
        "airmass": x, "seeing_fwhm": fwhm, "aperture_radius": r_ap, "n_pix": n_pix, "n_background": n_b,
        "star_rate": rate, "aperture_rate": ap_rate, "sky_mag": sky_mag, "moon_sky_rate": moon, "sky_rate": sky,
        "dark_rate": dark, "scintillation_1s": scint, "exposure_for_snr": t_snr, "exposure": t_plan, "snr": s_n,
        "peak_e": adv.peak_e, "peak_adu": adv.peak_adu, "peak_excess": adv.peak_excess,
        "light_cut": adv.light_factor, "nonlinear_after": adv.limit_s,
        "saturation": adv.status, "n_exposures": adv.n_exposures, "each_exposure": adv.exposure_s,
        "total_time": adv.total_s, "advice": "; ".join(notes),
    }


def _source_fields(src, spectrum):
    """Table fields describing where a filter's rate came from."""
    return {"mag": src.anchor_mag, "mag_band": "+".join(src.bands), "rate_source": src.source,
            "colour_term": src.colour_term, "teff": math.nan if spectrum.teff is None else spectrum.teff,
            "spectrum": spectrum.origin, "ebv": spectrum.ebv, "rate_note": src.note}


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


def _check_goal(snr, exposure_s, seeing_arcsec=None):
    """The user's numbers of a plan, against their documented ranges (:mod:`stelltemp.validation`)."""
    from ..validation import check_optional

    if snr is None and exposure_s is None:
        raise StelltempError("give a target S/N, an exposure time, or both")
    check_optional("snr", snr)
    check_optional("exposure", exposure_s)
    check_optional("seeing", seeing_arcsec)


def _photometry_arg(instrument, mag, band, photometry):
    """The photometry dict of `plan_target` from its (mag, band) or photometry arguments."""
    if photometry is not None:
        if mag is not None or band is not None:
            raise StelltempError("give either mag and band or photometry, not both")
        return photometry
    if mag is None:
        raise StelltempError("give a magnitude and its band, or per-band photometry")
    if band is None:
        raise StelltempError("give the passband of the magnitude (a key such as V_JC, or an instrument filter)")
    return {_resolve_band(instrument, band).key: mag}


def plan_target(instrument: Instrument, mag=None, band=None, teff=None, *, photometry=None, ebv=0.0, ebv_err=0.0,
                snr=None, exposure_s=None, airmass=1.0, filters=None, name="target", seeing_arcsec=None,
                aperture_fwhm=1.0, annulus_fwhm=(3.0, 5.0), profile="moffat", beta=psf.MOFFAT_BETA_TURBULENCE,
                headroom=psf.DEFAULT_HEADROOM, c_y=ccd.C_Y_TYPICAL, sky_delta_mag=0.0,
                moon_v_arcsec2=math.inf) -> Table:
    """Plan one star through the filters of an instrument.

    Parameters
    ----------
    instrument : Instrument
    mag : float, optional
        Magnitude outside the atmosphere in ``band`` (or use ``photometry``).
    band : str, optional
        Passband key or instrument filter name of ``mag`` (required with it).
    teff : float, optional
        Blackbody temperature, K (default: the engine's T_bb from
        ``photometry`` with two or more bands, else the A0 V template).
    photometry : dict, optional
        Passband key → magnitude or (magnitude, error): the star's own
        measured magnitudes; each filter's rate is anchored to them
        (`stelltemp.observing.anchor.anchored_rates`).
    ebv, ebv_err : float
        E(B−V) of the star and its error, applied to the spectrum (the
        magnitudes are the observed, reddened ones).
    snr : float, optional
        Target S/N; gives ``exposure_for_snr``.
    exposure_s : float, optional
        Planned exposure, s (default: the exposure for the target S/N, at
        least the camera's ``min_exposure_s``).
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
        Added to the dark-sky magnitude (negative = brighter).
    moon_v_arcsec2 : float
        V surface brightness of scattered moonlight at the target, mag
        arcsec⁻² (`moon.moonlight_vmag`; default ``inf``: no Moon).

    Returns
    -------
    astropy.table.Table
        One row per filter; columns and units as listed in ``_FILTER_COLUMNS``.

    Examples
    --------
    >>> from stelltemp.observing import load_instrument
    >>> from stelltemp.tour import find_demo_dir
    >>> inst = load_instrument(find_demo_dir() / "instruments" / "quillmere_04m_ccd.toml")
    >>> rows = plan_target(inst, mag=12.0, band="V_JC", teff=5800, snr=100, airmass=1.3)
    >>> len(rows), bool((rows["snr"] >= 99.9).all())
    (4, True)

    """
    from ..validation import check_number, check_optional
    from .anchor import anchored_rates

    _check_goal(snr, exposure_s, seeing_arcsec)
    phot = _photometry_arg(instrument, mag, band, photometry)
    for value in phot.values():  # a magnitude, or (magnitude, error)
        check_number("mag", value[0] if isinstance(value, (tuple, list)) else value)
    check_number("airmass", airmass)
    check_number("ebv", ebv)
    check_optional("ebv_err", ebv_err)
    check_optional("teff", teff)
    names = list(filters) if filters else list(instrument.filters)
    sources = anchored_rates(instrument, phot, teff=teff, ebv=ebv, ebv_err=ebv_err, filters=names)
    spectrum = sources["_spectrum"]
    rows = []
    for f in names:
        r = _blank_row()
        r.update(target=name, filter=f)
        r.update(_source_fields(sources[f], spectrum))
        r.update(_filter_row(instrument, f, sources[f].rate, airmass, snr, exposure_s, seeing_arcsec,
                             aperture_fwhm, annulus_fwhm, profile, beta, headroom, c_y, sky_delta_mag,
                             moon_v_arcsec2))
        rows.append(r)
    return _build_table(rows, _FILTER_COLUMNS, _plan_meta(instrument, snr, exposure_s,
                                                          moon=math.isfinite(moon_v_arcsec2)))


def _plan_meta(instrument, snr, exposure_s, moon):
    from . import counts as _c

    return {"instrument": instrument.title or instrument.source, "target_snr": snr,
            "planned_exposure_s": exposure_s, "read_noise_e": instrument.camera.read_noise_e,
            "gain_e_per_adu": instrument.camera.gain_e_per_adu,
            "min_exposure_s": instrument.camera.min_exposure_s,
            "curve_kinds": {f: s.curve_kind for f, s in instrument.filters.items()},
            "sky_spectrum": "dark sky: zero-point source of each band's magnitude system (Vega or flat F_nu)",
            "moonlight": ("Krisciunas & Schaefer 1991 (PASP 103, 1033) at each target's best time; "
                          + _c.MOONLIGHT_COLOUR) if moon
            else "not included"}


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


def _blank(v) -> bool:
    return np.ma.is_masked(v) or str(v).strip().lower() in ("", "nan", "--", "none")


def _number(v, lo, hi):
    x = float(v)
    if not (math.isfinite(x) and lo <= x <= hi):
        raise ValueError
    return x


def _row_photometry(row, cmap, rec):
    """The row's measured magnitudes {key: (mag, err)}; unusable values noted and left out."""
    from ..engine import ABSURD_MAG, MAX_MAG_ERR

    phot = {}
    for key, bc in cmap.bands.items():
        v = row[bc.mag]
        if _blank(v):
            continue
        e = math.nan
        if bc.err is not None and not _blank(row[bc.err]):
            try:
                e = float(row[bc.err])
            except (TypeError, ValueError):
                e = math.nan
        try:
            m = float(v)
        except (TypeError, ValueError):
            rec["notes"].append(f"{key} '{v}' is not a number: not used")
            continue
        if not math.isfinite(m) or abs(m) > ABSURD_MAG or (math.isfinite(e) and not 0 <= e <= MAX_MAG_ERR):
            rec["notes"].append(f"{key} = {v} (error {e:g}) is a placeholder or impossible: not used")
            continue
        phot[key] = (m, e)
    return phot


def parse_targets(table: Table):
    """Check a target table row by row.

    Columns (case-insensitive names for the fixed ones): ``name, ra, dec``
    and the star's magnitudes, as columns named by passband key (``V_JC``,
    ``V_JC_err``, … as in the catalogue layer, `stelltemp.catalog.mapping`)
    and/or a pair ``mag, band``; optional ``teff`` (K, blank = none),
    ``ebv`` and ``ebv_err`` (mag; blank = 0, said in the row's notes).
    ``ra`` is degrees or sexagesimal hours ("12:30:00" or "12h30m"); ``dec``
    degrees or sexagesimal degrees.  Placeholder magnitudes (|m| > 40, or an
    error above 5 mag) are left out with a note.

    Returns
    -------
    list of dict
        One per row: name, ra_deg, dec_deg, ``photometry`` {key: (mag, err)},
        mag and band (the ``mag, band`` pair or the first measured band),
        teff (None or K), ebv, ebv_err (mag), ``notes`` (list of str) and
        ``error`` ('' or the one-line problem).
    """
    from ..catalog.mapping import default_mapping
    from ..passbands import get_passband

    cols = {c.lower(): c for c in table.colnames}
    missing = [c for c in ("name", "ra", "dec") if c not in cols]
    if missing:
        raise StelltempError(f"target list lacks column(s) {', '.join(missing)} (has: {', '.join(table.colnames)})")
    cmap = default_mapping(table.colnames)
    legacy = "mag" in cols and "band" in cols
    if not cmap.bands and not legacy:
        raise StelltempError("target list lacks magnitudes: give columns named by passband key (V_JC, V_JC_err, "
                             f"...) or the pair mag, band (has: {', '.join(table.colnames)})")
    out = []
    for i, row in enumerate(table):
        rec = {"name": str(row[cols["name"]]).strip() or f"row {i + 1}", "ra_deg": math.nan, "dec_deg": math.nan,
               "mag": math.nan, "band": "", "photometry": {}, "teff": None, "ebv": 0.0, "ebv_err": 0.0,
               "notes": [], "error": ""}
        problems = []
        try:
            rec["ra_deg"] = _parse_angle(row[cols["ra"]], u.hourangle) % 360.0
        except (ValueError, TypeError, u.UnitsError):
            problems.append(f"bad ra '{row[cols['ra']]}'")
        try:
            dec = _parse_angle(row[cols["dec"]], u.deg)
            if not -90 <= dec <= 90:
                raise ValueError
            rec["dec_deg"] = dec
        except (ValueError, TypeError, u.UnitsError):
            problems.append(f"bad dec '{row[cols['dec']]}'")
        phot = _row_photometry(row, cmap, rec)
        if legacy and not _blank(row[cols["mag"]]):
            try:
                rec["mag"], rec["band"] = _number(row[cols["mag"]], -30, 40), str(row[cols["band"]]).strip()
            except (ValueError, TypeError):
                problems.append(f"bad mag '{row[cols['mag']]}'")
            if rec["band"]:
                try:  # a passband key now; an instrument filter name is resolved when planning
                    key = get_passband(rec["band"]).key
                except StelltempError:
                    key = None
                if key is not None and key in phot and abs(phot[key][0] - rec["mag"]) > 1e-6:
                    problems.append(f"mag {rec['mag']:g} ({key}) disagrees with the {key} column "
                                    f"({phot[key][0]:g})")
        if not phot and not rec["band"] and not problems:
            problems.append("no usable magnitude")
        rec["photometry"] = phot
        if phot and not rec["band"]:
            rec["band"], (rec["mag"], _) = next(iter(phot.items()))
        if "teff" in cols and not _blank(row[cols["teff"]]):
            try:
                rec["teff"] = _number(row[cols["teff"]], 500, 1e6)
            except (ValueError, TypeError):
                problems.append(f"bad teff '{row[cols['teff']]}' (K, 500-1e6)")
        if "ebv" in cols and not _blank(row[cols["ebv"]]):
            try:
                rec["ebv"] = _number(row[cols["ebv"]], -0.5, 6.0)
            except (ValueError, TypeError):
                problems.append(f"bad ebv '{row[cols['ebv']]}' (mag, -0.5 to 6)")
        else:
            rec["notes"].append("no E(B-V) given: 0 assumed")
        if "ebv_err" in cols and not _blank(row[cols["ebv_err"]]):
            try:
                rec["ebv_err"] = _number(row[cols["ebv_err"]], 0.0, 6.0)
            except (ValueError, TypeError):
                problems.append(f"bad ebv_err '{row[cols['ebv_err']]}' (mag, 0 to 6)")
        rec["error"] = problems[0] if problems else ""
        out.append(rec)
    return out


def target_photometry(instrument: Instrument, target) -> dict:
    """The measured magnitudes of a `parse_targets` row, its ``mag, band`` pair resolved on ``instrument``."""
    phot = dict(target.get("photometry") or {})
    band = target.get("band")
    if band and math.isfinite(target.get("mag", math.nan)):
        key = _resolve_band(instrument, band).key
        phot.setdefault(key, (float(target["mag"]), math.nan))
    if not phot:
        raise StelltempError("no usable magnitude")
    return phot


def read_targets(path):
    """Read a target list (any table format of `stelltemp.catalog.tableio`) and check it with `parse_targets`.

    Examples
    --------
    >>> from stelltemp.tour import find_demo_dir
    >>> len(read_targets(find_demo_dir() / "targets.csv"))
    60

    """
    from pathlib import Path

    from ..catalog.tableio import read_table, table_format
    from ..errors import plain_reason
    from ..safeio import read_text_file

    p = Path(path)
    if table_format(p) in ("csv", "ecsv"):
        read_text_file(p, "target list")  # missing, unreadable or not UTF-8: one plain line
    try:
        t = read_table(p)  # the one table reader: CSV '#' lines are comments, a CSV sidecar gives units
    except StelltempError as exc:
        raise StelltempError(f"cannot read target list {p.name}: {exc}") from None
    except Exception as exc:  # astropy raises many types for malformed tables
        raise StelltempError(f"cannot read target list {p.name}: {plain_reason(exc)}") from None
    return parse_targets(t)


def _night_setup(instrument, date, step_min, sun_limit):
    """Twilights, the dark interval and the time grid, the dark interval's ends included exactly."""
    from astropy.time import Time

    from . import night

    site = instrument.site
    tw = night.twilight_times(date, site)
    dark = night.dark_interval(tw, sun_limit)
    grid = night.night_grid(date, site, step_min)
    if dark is not None:  # windows then start and end at the twilight times themselves, not the nearest grid step
        with night.offline_iers():
            grid = Time(np.unique(np.concatenate([grid.mjd, [dark[0].mjd, dark[1].mjd]])), format="mjd",
                        scale="utc")
    return night, site.location(), tw, dark, grid


def _dark_mask(grid, dark):
    if dark is None:
        return np.zeros(len(grid), bool)
    return (grid.mjd >= dark[0].mjd) & (grid.mjd <= dark[1].mjd)


def _targets_rates(instrument, targets, filters=None):
    """Anchored rates above the atmosphere for `parse_targets` rows: a list of dicts or StelltempErrors.

    The temperature engine runs once for all rows that need it
    (`anchor.star_spectra`); should that joint call fail, each row is tried
    on its own so that one bad row is flagged and the rest go on.
    """
    from .anchor import anchored_rates, clean_photometry, star_spectra

    out, phots = [None] * len(targets), {}
    for i, t in enumerate(targets):
        try:
            phots[i] = clean_photometry(target_photometry(instrument, t))
        except StelltempError as exc:
            out[i] = exc
    idx = list(phots)
    args = ([phots[i] for i in idx], [targets[i]["teff"] for i in idx], [targets[i].get("ebv", 0.0) for i in idx],
            [targets[i].get("ebv_err", 0.0) for i in idx])
    try:
        spectra = dict(zip(idx, star_spectra(*args)))
    except StelltempError:
        spectra = {}
    for i in idx:
        t = targets[i]
        try:
            out[i] = anchored_rates(instrument, phots[i], teff=t["teff"], ebv=t.get("ebv", 0.0),
                                    ebv_err=t.get("ebv_err", 0.0), filters=filters, spectrum=spectra.get(i))
        except StelltempError as exc:
            out[i] = exc
    return out


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
        (n_targets × n_times), NaN below the horizon; each star's rate
        anchored to its own photometry}, ``twilight``; for the night chart
        ``moon_alt`` (deg) and ``moon_illuminated`` (fraction) on the grid,
        ``site`` and ``utc_offset_hours``.
    """
    night, loc, tw, dark, grid = _night_setup(instrument, date, step_min, sun_limit)
    good = [t for t in targets if not t["error"]]
    sun_alt = night.sun_altitude(grid, loc)
    mask = _dark_mask(grid, dark)
    if not good:
        return {"times": grid, "sun_alt": sun_alt, "dark": mask, "names": [], "alt": np.empty((0, len(grid))),
                "airmass": np.empty((0, len(grid))), "rates": {}, "twilight": tw,
                **_figure_context(instrument, night, grid, loc)}
    alt, _ = night.altaz_of(([t["ra_deg"] for t in good], [t["dec_deg"] for t in good]), grid, loc)
    x = airmass_kasten_young(alt)
    rates = {f: np.full(alt.shape, np.nan) for f in instrument.filters}
    for i, src in enumerate(_targets_rates(instrument, good)):
        if isinstance(src, StelltempError):
            continue
        for f in instrument.filters:
            k = instrument.filters[f].extinction_mag_per_airmass
            rates[f][i] = src[f].rate * np.where(np.isfinite(x[i]), counts.extinction_factor(k, np.nan_to_num(x[i])),
                                                 np.nan)
    return {"times": grid, "sun_alt": sun_alt, "dark": mask, "names": [t["name"] for t in good], "alt": alt,
            "airmass": x, "rates": rates, "twilight": tw, **_figure_context(instrument, night, grid, loc)}


def _figure_context(instrument, night, grid, loc):
    """What the night chart shows besides the targets: the Moon's track and phase, the site and its UTC offset."""
    m = night.moon_geometry(grid, loc)
    return {"moon_alt": m["alt_deg"], "moon_illuminated": m["illuminated"], "site": instrument.site.name,
            "utc_offset_hours": instrument.site.utc_offset[0]}


def _moon_at_best(night, grid, loc, coords, windows, good, v_filter):
    """Per usable target: (separation, Moon altitude, illuminated fraction, ΔV, moonlight V mag/arcsec²)."""
    from .moon import moon_sky_vmag, moonlight_vmag

    out = {}
    m = night.moon_geometry(grid, loc, coords)
    k_v = v_filter.extinction_mag_per_airmass if v_filter else 0.2
    sky_v = v_filter.sky_mag_arcsec2 if v_filter else 21.5
    for j, i in enumerate(good):
        w = windows[i]
        if not w.usable:
            continue
        b = int(np.argmin(np.abs(grid.mjd - w.best.mjd)))
        sep, malt = float(m["separation_deg"][j, b]), float(m["alt_deg"][b])
        geo = (m["phase_angle_deg"][b], sep, 90.0 - w.max_alt_deg, 90.0 - malt, k_v)
        _, dv = moon_sky_vmag(sky_v, *geo)
        out[i] = (sep, malt, float(m["illuminated"][b]), float(dv), float(moonlight_vmag(*geo)))
    return out


def plan_night(instrument: Instrument, targets, date, *, snr=None, exposure_s=None, min_alt_deg=30.0,
               step_min=10.0, sun_limit="astronomical", moon=True, **options) -> Table:
    """Plan a target list for one night at the instrument's site.

    Each target is planned (as `plan_target`, with the same ``options``) at
    the lowest airmass of its best window: the contiguous stretch of dark time
    (Sun below ``sun_limit``) above ``min_alt_deg`` around its highest point,
    starting and ending exactly at the twilight times where those bound it.
    Each filter's rate is anchored to the star's own photometry; with
    ``moon`` the scattered moonlight at the target's position and best time
    (Krisciunas & Schaefer 1991) is added to the sky of every filter.  A bad
    row or a target with no window gets a note in ``flags`` and the rest go
    on.  Windows that reach into twilight (``sun_limit`` other than
    astronomical) get a flag: the twilight sky is brighter than the dark sky
    planned with.

    Parameters
    ----------
    targets : list of dict or Table
        `parse_targets` output, or a target table (see `parse_targets`).
    date : str
        Local date of the evening, YYYY-MM-DD.

    Returns
    -------
    astropy.table.Table
        One row per target and filter; ``meta`` holds the twilight times,
        the dark interval and any Sun-safety warnings.  `night_summary`
        turns it into one row per target.

    Examples
    --------
    >>> from stelltemp.observing import load_instrument
    >>> from stelltemp.tour import find_demo_dir
    >>> demo = find_demo_dir()
    >>> inst = load_instrument(demo / "instruments" / "quillmere_04m_ccd.toml")
    >>> plan = plan_night(inst, read_targets(demo / "targets.csv")[:2], "2026-03-15", snr=50)
    >>> len(plan)  # two targets, four filters
    8

    """
    from .safety import sun_warnings

    _check_goal(snr, exposure_s)
    from ..validation import check_memory, check_number

    _check_goal(snr, exposure_s, options.get("seeing_arcsec"))
    check_number("min_alt", min_alt_deg)
    if min_alt_deg >= 90:
        raise StelltempError(f"min_alt (lowest altitude) must be below 90 deg, got {min_alt_deg:g}")
    n_times = 24 * 60 / check_number("step", step_min, rng=STEP_MINUTES) + 1
    # altitudes, airmasses, Moon terms and masks: about 12 float64 arrays of targets × times
    check_memory(f"a night plan of {len(targets)} targets every {step_min:g} min", 96.0 * len(targets) * n_times,
                 "plan fewer targets at once or use a longer time step")
    if isinstance(targets, Table):
        targets = parse_targets(targets)
    night, loc, tw, dark, grid = _night_setup(instrument, date, step_min, sun_limit)
    mask = _dark_mask(grid, dark)
    good = [i for i, t in enumerate(targets) if not t["error"]]
    windows, moon_info = {}, {}
    if good:
        coords = ([targets[i]["ra_deg"] for i in good], [targets[i]["dec_deg"] for i in good])
        alt, _ = night.altaz_of(coords, grid, loc)
        for i, w in zip(good, night.best_windows(alt, grid, mask, min_alt_deg)):
            windows[i] = w
        if moon:
            moon_info = _moon_at_best(night, grid, loc, coords, windows, good, _v_like_filter(instrument))
    astro = tw.get("astronomical_evening"), tw.get("astronomical_morning")
    keys = ("seeing_arcsec", "aperture_fwhm", "annulus_fwhm", "profile", "beta", "headroom", "c_y", "sky_delta_mag")
    defaults = (None, 1.0, (3.0, 5.0), "moffat", psf.MOFFAT_BETA_TURBULENCE, psf.DEFAULT_HEADROOM, ccd.C_Y_TYPICAL, 0.0)
    opts = [options.get(k, d) for k, d in zip(keys, defaults)]
    # rates of every target that will be planned, with one temperature-engine call for the list
    todo = [i for i in good if windows[i].usable and not (i in moon_info and not math.isfinite(moon_info[i][3]))]
    all_sources = dict(zip(todo, _targets_rates(instrument, [targets[i] for i in todo])))
    rows = []
    for i, t in enumerate(targets):
        base = _blank_row()
        base.update(target=t["name"], mag=t["mag"], mag_band=t["band"], ebv=t.get("ebv", 0.0),
                    teff=math.nan if t["teff"] is None else t["teff"])
        flags = [t["error"]] if t["error"] else []
        w = windows.get(i)
        if w is not None:
            base.update(max_altitude=w.max_alt_deg, min_airmass=w.min_airmass)
            if w.usable:
                base.update(window_start=w.start.isot[:19], window_end=w.end.isot[:19], best_time=w.best.isot[:19])
                if sun_limit != "astronomical":
                    if astro[0] is None or w.best < astro[0] or w.best > astro[1]:
                        flags.append("best time is in twilight: the twilight sky is not modelled, so the sky is "
                                     "brighter and the exposures longer than planned here")
                    elif w.start < astro[0] or w.end > astro[1]:
                        flags.append("window reaches into twilight (the twilight sky is not modelled): the numbers "
                                     "are for the dark sky at the best time")
            else:
                flags.append(f"no dark time above {min_alt_deg:g} deg" if dark is not None
                             else f"no dark time (Sun never below the {sun_limit} limit)")
        moon_v = math.inf
        if i in moon_info:
            sep, malt, illum, dv, moon_v = moon_info[i]
            base.update(moon_separation=sep, moon_altitude=malt, moon_illuminated=illum, moon_delta_v=dv)
            if not math.isfinite(dv):
                flags.append("within 10 deg of the Moon: not planned")
        sources = all_sources.get(i)
        if isinstance(sources, StelltempError):
            flags.append(str(sources))
            sources = None
        notes = "; ".join(t.get("notes", []))
        for f in instrument.filters:
            r = dict(base, filter=f, rate_note=notes)
            if sources is not None:
                try:
                    r.update(_source_fields(sources[f], sources["_spectrum"]))
                    if notes:
                        r["rate_note"] = f"{r['rate_note']}; {notes}"
                    r.update(_filter_row(instrument, f, sources[f].rate, w.min_airmass, snr, exposure_s, *opts,
                                         moon_v_arcsec2=moon_v))
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
    offset, offset_how = instrument.site.utc_offset
    meta = _plan_meta(instrument, snr, exposure_s, moon=moon)
    meta.update({
        "date": str(night.parse_date(date)),
        "site": instrument.site.name,
        "twilight": {k: (v.isot[:19] if v is not None else None) for k, v in tw.items()},
        "dark_start": dark[0].isot[:19] if dark else None,
        "dark_end": dark[1].isot[:19] if dark else None,
        "sun_limit": sun_limit,
        "twilight_sky": ("not modelled: windows may reach into twilight, flagged per target" if sun_limit != "astronomical"
                         else "not needed: windows lie in astronomical darkness"),
        "min_altitude_deg": min_alt_deg,
        "utc_offset_hours": offset,
        "utc_offset_from": offset_how,
        "sun_warnings": warnings_,
    })
    return _build_table(rows, _FILTER_COLUMNS + _NIGHT_COLUMNS, meta)


_COLUMN = {c[0]: c for c in _FILTER_COLUMNS + _NIGHT_COLUMNS}  # one definition of each shared column
_SUMMARY_COLUMNS = [_COLUMN[n] for n in ("target", "best_time")] + [
    ("best_time_local", None, "the same in local time (offset in meta)")] + [
    _COLUMN[n] for n in ("window_start", "window_end")] + [
    ("window_local", None, "the window in local time, HH:MM-HH:MM")] + [
    _COLUMN[n] for n in ("max_altitude", "min_airmass", "moon_separation", "moon_delta_v", "spectrum", "teff",
                         "ebv")] + [
    ("rate_sources", None, "filter:source for each filter"),
    ("total_time", u.s, "sum over filters of the planned time (split frames included)"),
    ("flags", None, "problems with this target ('' when none)"),
]


def _local(isot, offset_h):
    if not isot:
        return ""
    import datetime as _dt

    t = _dt.datetime.fromisoformat(isot) + _dt.timedelta(hours=offset_h)
    return t.strftime("%Y-%m-%dT%H:%M:%S")


def night_summary(plan: Table) -> Table:
    """One row per target of a `plan_night` table: when, how high, the Moon, and the time it takes.

    Local times use ``plan.meta["utc_offset_hours"]`` (from the site; see
    `stelltemp.observing.instrument.Site.utc_offset`).

    Examples
    --------
    >>> from stelltemp.observing import load_instrument
    >>> from stelltemp.tour import find_demo_dir
    >>> demo = find_demo_dir()
    >>> inst = load_instrument(demo / "instruments" / "quillmere_04m_ccd.toml")
    >>> plan = plan_night(inst, read_targets(demo / "targets.csv")[:2], "2026-03-15", snr=50)
    >>> len(night_summary(plan))  # one row per target
    2

    """
    offset = float(plan.meta.get("utc_offset_hours", 0.0))
    rows, order = {}, []
    for r in plan:
        name = str(r["target"])
        if name not in rows:
            order.append(name)
            s, e = str(r["window_start"]), str(r["window_end"])
            rows[name] = {
                "target": name, "best_time": str(r["best_time"]), "best_time_local": _local(str(r["best_time"]), offset),
                "window_start": s, "window_end": e,
                "window_local": f"{_local(s, offset)[11:16]}-{_local(e, offset)[11:16]}" if s and e else "",
                "max_altitude": float(r["max_altitude"]), "min_airmass": float(r["min_airmass"]),
                "moon_separation": float(r["moon_separation"]), "moon_delta_v": float(r["moon_delta_v"]),
                "spectrum": str(r["spectrum"]), "teff": float(r["teff"]), "ebv": float(r["ebv"]),
                "sources": [], "total_time": 0.0, "flags": str(r["flags"]), "_any": False}
        row = rows[name]
        if str(r["rate_source"]):
            row["sources"].append(f"{r['filter']}:{r['rate_source']}")
        tt = float(r["total_time"])
        if math.isfinite(tt):
            row["total_time"] += tt
            row["_any"] = True
    out = []
    for name in order:
        row = rows[name]
        row["rate_sources"] = " ".join(row.pop("sources"))
        if not row.pop("_any"):
            row["total_time"] = math.nan
        out.append(row)
    meta = {k: plan.meta[k] for k in ("date", "site", "dark_start", "dark_end", "utc_offset_hours", "utc_offset_from",
                                      "target_snr", "moonlight") if k in plan.meta}
    return _build_table(out, _SUMMARY_COLUMNS, meta)


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
