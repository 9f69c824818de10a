"""One star through each filter of an instrument, at a given airmass or at a time and place in the sky.

:func:`plan_exposure` wraps :func:`stelltemp.observing.plan.plan_target`
with what a person planning one exposure also needs: the airmass from a
time and coordinates at the instrument's site, the Sun-safety warnings for
that pointing, and a refusal (with the usual caution) to plan a look at the
Sun.
"""

from __future__ import annotations

from ..errors import StelltempError

__all__ = ["MOON_BRIGHT_MAG", "SUN_BRIGHT_MAG", "airmass_at", "plan_exposure"]

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


def plan_exposure(instrument, mag, band=None, teff=None, *, ebv=0.0, snr=None, exposure_s=None, airmass=1.0,
                  when=None, ra=None, dec=None, filters=None, seeing_arcsec=None, profile="moffat"):
    """Count rates, S/N, exposure time and saturation for one star in each filter.

    Parameters
    ----------
    instrument : Instrument
    mag : float or dict
        Magnitude outside the atmosphere, mag, in ``band``; or a dict
        ``{band: mag}`` of several: each filter then takes the magnitude
        measured in its own passband (or given under its filter name), and a
        filter without one takes the first (scaled through the spectrum).
        The ``mag_band`` column says which was used.
    band : str, optional
        Passband key or instrument filter of a single ``mag`` (default: each filter's own).
    teff : float, optional
        Blackbody temperature, K (default: a Vega-shaped spectrum).
    ebv : float
        E(B−V), mag, reddening the blackbody of ``teff`` (needs ``teff``).
    snr, exposure_s : float, optional
        Goal S/N and/or planned exposure time (s); at least one.
    airmass : float
        Used unless ``when`` is given.
    when, ra, dec : optional
        Time and coordinates: the airmass is computed at the site (see :func:`airmass_at`).
    filters : list of str, optional
        Subset of the instrument's filters.
    seeing_arcsec : float, optional
        Zenith seeing FWHM (default: the site's).
    profile : {"moffat", "gaussian"}

    Returns
    -------
    Table
        One row per filter (see :func:`stelltemp.observing.plan.plan_target`);
        ``meta["sun_warnings"]`` lists Sun-safety and brightness warnings.

    Raises
    ------
    StelltempError
        For the Sun (with the caution), ``ebv`` without ``teff``, an unknown
        filter, or no goal.
    """
    from .plan import plan_target
    from .safety import SUN_CAUTION

    if isinstance(mag, dict):
        if band is not None:
            raise StelltempError("give the bands inside the magnitudes, not also as band")
        return _plan_several(instrument, mag, teff, ebv=ebv, snr=snr, exposure_s=exposure_s, airmass=airmass,
                             when=when, ra=ra, dec=dec, filters=filters, seeing_arcsec=seeing_arcsec,
                             profile=profile)
    if mag < SUN_BRIGHT_MAG:
        raise StelltempError(f"magnitude {mag:g} is the Sun; stelltemp does not plan solar exposures. "
                             + SUN_CAUTION)
    if snr is None and exposure_s is None:
        raise StelltempError("give a goal S/N, an exposure time or both")
    warnings_ = []
    if when is not None:
        airmass, warnings_ = airmass_at(instrument, when, ra, dec)
    for f in filters or []:
        instrument.filter(f)
    if ebv and teff is None:
        raise StelltempError("a reddening E(B-V) applies to the blackbody of a temperature: give the temperature too")
    table = plan_target(instrument, mag, band, teff, ebv=ebv, snr=snr, exposure_s=exposure_s, airmass=airmass,
                        filters=filters, seeing_arcsec=seeing_arcsec, profile=profile)
    if mag < MOON_BRIGHT_MAG:
        warnings_ = warnings_ + [f"magnitude {mag:g} is as bright as the Moon: "
                                 "use a filter of the right density and check for saturation"]
    table.meta["sun_warnings"] = warnings_
    return table


def _plan_several(instrument, mags, teff, *, filters=None, **options):
    """:func:`plan_exposure` with several magnitudes: each filter takes its own band's, else the first."""
    from astropy.table import vstack

    from ..passbands import get_passband

    if not mags:
        raise StelltempError("give at least one magnitude")
    by_key = {}
    for b, m in mags.items():
        key = instrument.filters[b].passband.key if b in instrument.filters else get_passband(b).key
        if key in by_key:
            raise StelltempError(f"two magnitudes for passband {key}")
        by_key[key] = (b, float(m))
    first = next(iter(by_key.values()))
    names = list(filters) if filters else list(instrument.filters)
    choice = {f: by_key.get(instrument.filter(f).passband.key, first) for f in names}
    parts = []
    for b, m in dict.fromkeys(choice.values()):
        parts.append(plan_exposure(instrument, m, b, teff, filters=[f for f in names if choice[f] == (b, m)],
                                   **options))
    table = vstack(parts, metadata_conflicts="silent") if len(parts) > 1 else parts[0]
    order = {f: i for i, f in enumerate(names)}
    table = table[sorted(range(len(table)), key=lambda i: order[table["filter"][i]])]
    table.meta = dict(parts[0].meta)
    table.meta["sun_warnings"] = list(dict.fromkeys(w for p in parts for w in p.meta["sun_warnings"]))
    return table
