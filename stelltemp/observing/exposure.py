"""One star through each filter of an instrument, at a given airmass or at a time and place in the sky.

:func:`plan_exposure` wraps :func:`stelltemp.observing.plan.plan_target`
with what a person planning one exposure also needs: the airmass from a
time and coordinates at the instrument's site, the Sun-safety warnings for
that pointing, and a refusal (with the usual caution) to plan a look at the
Sun.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import StelltempError
from .safety import SUN_CAUTION

__all__ = ["MOON_BRIGHT_MAG", "SUN_BRIGHT_MAG", "airmass_at", "sky_at", "plan_exposure"]

#: brighter than this only the Moon (full Moon V ≈ −12.7, common practice) and the Sun qualify
MOON_BRIGHT_MAG = -10.0
#: brighter than this it is the Sun (V ≈ −26.7, common practice): no plan, only the caution
SUN_BRIGHT_MAG = -20.0


def airmass_at(instrument, when, ra, dec):
    """Airmass of a position at a time from the instrument's site, and Sun warnings.

    Parameters
    ----------
    instrument : Instrument
        Its ``site`` gives the location.
    when : str or astropy.time.Time
        The time (ISO text is read as UTC).
    ra, dec : str or float
        Right ascension (degrees, or h:m:s) and declination (degrees, or d:m:s).

    Returns
    -------
    airmass : float
        Kasten & Young (1989) airmass.
    warnings : list of str
        Sun-proximity and daylight warnings for that pointing (empty when safe).

    Raises
    ------
    StelltempError
        For a missing coordinate, unreadable time or angle, or a target below the horizon.
    """
    from astropy.time import Time

    from .airmass import airmass_kasten_young
    from .night import altaz_of, offline_iers
    from .plan import _parse_angle
    from .safety import sun_warnings

    if ra is None or dec is None:
        raise StelltempError("a time needs the target's right ascension and declination")
    try:
        with offline_iers():
            t = Time(when, scale="utc")
    except ValueError:
        raise StelltempError(f"not an ISO time: {when!r}") from None
    try:
        ra_deg, dec_deg = _parse_angle(ra, "hourangle") % 360.0, _parse_angle(dec, "deg")
    except ValueError:
        raise StelltempError(f"cannot read right ascension {ra!r} / declination {dec!r}") from None
    loc = instrument.site.location()
    alt, _ = altaz_of(([ra_deg], [dec_deg]), t.reshape(1), loc)
    alt = float(alt[0, 0])
    warnings_ = sun_warnings(t, loc, ([ra_deg], [dec_deg]), ["target"])
    if alt <= 0:
        raise StelltempError(f"the target is below the horizon at {t.isot[:16]} UTC (altitude {alt:.1f} deg)")
    return float(airmass_kasten_young(alt)), warnings_


def sky_at(instrument, when, ra, dec, moon=True):
    """What the sky is like for one pointing at one time: airmass, warnings and the Moon.

    Daylight (Sun above −0.833°) is refused: the plans are for the night sky.
    Twilight (Sun between −0.833° and −18°) gives a warning: the sky is then
    brighter than the dark-sky values planned with (twilight is not modelled).

    Returns
    -------
    dict
        ``airmass``, ``warnings`` (list of str), ``sun_alt_deg``,
        ``moon_v_arcsec2`` (V surface brightness of moonlight at the target,
        ``inf`` without Moon), ``moon_separation_deg``, ``moon_alt_deg``,
        ``moon_illuminated`` (NaN without ``moon``).

    Raises
    ------
    StelltempError
        In daylight (with the Sun warnings and the caution), within 10° of
        the Moon, and as `airmass_at`.
    """
    from astropy.time import Time

    from .moon import MIN_SEPARATION_DEG, moonlight_vmag
    from .night import SUN_ALTITUDES, moon_geometry, offline_iers, sun_altitude
    from .plan import _parse_angle, _v_like_filter

    airmass, warnings_ = airmass_at(instrument, when, ra, dec)
    loc = instrument.site.location()
    with offline_iers():
        t = Time(when, scale="utc")
    sun = float(np.atleast_1d(sun_altitude(t.reshape(1), loc))[0])
    if sun > SUN_ALTITUDES["sun"]:
        raise StelltempError(f"the Sun is up at {t.isot[:16]} UTC (altitude {sun:.1f} deg): daylight, so no "
                             "night-sky plan. " + " ".join(warnings_ or [SUN_CAUTION]))
    if sun > SUN_ALTITUDES["astronomical"]:
        warnings_ = warnings_ + [f"TWILIGHT: the Sun is at {sun:.1f} deg at {t.isot[:16]} UTC; the sky is brighter "
                                 "than the dark-sky values these numbers use (twilight is not modelled)"]
    out = {"airmass": airmass, "warnings": warnings_, "sun_alt_deg": sun, "moon_v_arcsec2": math.inf,
           "moon_separation_deg": math.nan, "moon_alt_deg": math.nan, "moon_illuminated": math.nan}
    if not moon:
        return out
    ra_deg, dec_deg = _parse_angle(ra, "hourangle") % 360.0, _parse_angle(dec, "deg")
    m = moon_geometry(t.reshape(1), loc, ([ra_deg], [dec_deg]))
    sep, malt = float(m["separation_deg"][0, 0]), float(m["alt_deg"][0])
    v = _v_like_filter(instrument)
    k_v = v.extinction_mag_per_airmass if v else 0.2
    alt_t = _target_altitude(instrument, t, ra_deg, dec_deg)
    z_target = 90.0 - alt_t
    mu = float(moonlight_vmag(m["phase_angle_deg"][0], sep, z_target, 90.0 - malt, k_v))
    if math.isnan(mu):
        raise StelltempError(f"the target is {sep:.1f} deg from the Moon at {t.isot[:16]} UTC: closer than "
                             f"{MIN_SEPARATION_DEG:g} deg the moonlight model does not apply; not planned")
    out.update(moon_v_arcsec2=mu, moon_separation_deg=sep, moon_alt_deg=malt,
               moon_illuminated=float(m["illuminated"][0]))
    return out


def _target_altitude(instrument, t, ra_deg, dec_deg):
    from .night import altaz_of

    alt, _ = altaz_of(([ra_deg], [dec_deg]), t.reshape(1), instrument.site.location())
    return float(alt[0, 0])


def plan_exposure(instrument, mag=None, band=None, teff=None, *, photometry=None, ebv=0.0, ebv_err=0.0, snr=None,
                  exposure_s=None, airmass=1.0, when=None, ra=None, dec=None, moon=True, filters=None,
                  seeing_arcsec=None, profile="moffat"):
    """Count rates, S/N, exposure time and saturation for one star in each filter.

    Parameters
    ----------
    instrument : Instrument
    mag : float, optional
        Magnitude outside the atmosphere, mag, in ``band`` (or ``photometry``).
    band : str, optional
        Passband key or instrument filter of ``mag`` (required with it).
    teff : float, optional
        Blackbody temperature, K (default: fitted by the engine to two or
        more measured bands, else the A0 V template, reported per row).
    photometry : dict, optional
        The star's measured magnitudes, passband key or filter → magnitude
        or (magnitude, error); each filter's rate is anchored to them.
    ebv, ebv_err : float
        E(B−V) and its error, mag, reddening the spectrum.
    snr, exposure_s : float, optional
        Goal S/N and/or planned exposure time (s); at least one.
    airmass : float
        Used unless ``when`` is given.
    when, ra, dec : optional
        Time and coordinates: airmass, Sun and Moon at the site (see
        :func:`sky_at`; daylight is refused).
    moon : bool
        Add the scattered moonlight at ``when`` to the sky (Krisciunas &
        Schaefer 1991).
    filters : list of str, optional
        Subset of the instrument's filters.
    seeing_arcsec : float, optional
        Zenith seeing FWHM (default: the site's).
    profile : {"moffat", "gaussian"}

    Returns
    -------
    Table
        One row per filter (see :func:`stelltemp.observing.plan.plan_target`);
        ``meta["sun_warnings"]`` lists Sun-safety, twilight and brightness
        warnings, ``meta["moon"]`` the Moon's geometry at ``when``.

    Raises
    ------
    StelltempError
        For the Sun (with the caution), daylight, an unknown filter, a
        magnitude without its band, or no goal.

    Examples
    --------
    >>> from stelltemp.observing import load_instrument
    >>> from stelltemp.tour import find_demo_dir
    >>> inst = load_instrument(find_demo_dir() / "instruments" / "quillmere_04m_ccd.toml")
    >>> rows = plan_exposure(inst, mag=12.0, band="V_JC", teff=5800, snr=100)
    >>> [str(f) for f in rows["filter"]]
    ['B', 'V', 'R', 'I']

    """
    from .plan import _resolve_band, plan_target

    if photometry is None:
        if mag is None or band is None:
            raise StelltempError("give the magnitude's band (BAND=MAG, e.g. V=12.0) or per-band magnitudes")
        photometry = {band: mag}
    phot = {}
    for k, v in photometry.items():
        key = _resolve_band(instrument, k).key
        if key in phot:
            raise StelltempError(f"two magnitudes for passband {key}")
        phot[key] = v
    brightest = min(float(v[0] if isinstance(v, (tuple, list)) else v) for v in phot.values())
    if brightest < SUN_BRIGHT_MAG:
        raise StelltempError(f"magnitude {brightest:g} is the Sun; stelltemp does not plan solar exposures. "
                             + SUN_CAUTION)
    if snr is None and exposure_s is None:
        raise StelltempError("give a goal S/N, an exposure time or both")
    for f in filters or []:
        instrument.filter(f)
    warnings_, moon_v, sky = [], math.inf, None
    if when is not None:
        sky = sky_at(instrument, when, ra, dec, moon=moon)
        airmass, warnings_, moon_v = sky["airmass"], sky["warnings"], sky["moon_v_arcsec2"]
    table = plan_target(instrument, teff=teff, photometry=phot, ebv=ebv, ebv_err=ebv_err, snr=snr,
                        exposure_s=exposure_s, airmass=airmass, filters=filters, seeing_arcsec=seeing_arcsec,
                        profile=profile, moon_v_arcsec2=moon_v)
    if brightest < MOON_BRIGHT_MAG:
        warnings_ = warnings_ + [f"magnitude {brightest:g} is as bright as the Moon: "
                                 "use a filter of the right density and check for saturation"]
    table.meta["sun_warnings"] = warnings_
    if sky is not None:
        table.meta["moon"] = {k: sky[k] for k in ("moon_separation_deg", "moon_alt_deg", "moon_illuminated",
                                                  "moon_v_arcsec2", "sun_alt_deg")}
    return table
