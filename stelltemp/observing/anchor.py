"""Count rates anchored to a star's own measured magnitudes.

For each filter of an instrument the rate of electrons above the atmosphere
comes from the best thing the target list offers, and says which:

``measured``
    The list holds a magnitude m in the filter's standard band (the
    passband its curve stands for).  The rate is that band's zero point
    times 10^(−0.4 m), times the small colour term between the
    instrument's natural band (curve × optics × detector, see
    `counts.system_efficiency`) and the standard band, computed from the
    star's spectrum: in practice the spectrum is scaled to m in the
    standard band and integrated through the natural band, so the colour
    term is exactly 0 when the two bands coincide.
``interpolated`` / ``extrapolated``
    No magnitude in that band.  The star's spectrum is scaled to each of the
    nearest measured bands on either side in pivot wavelength (or the one
    nearest, beyond the measured range) and the logarithm of the rate is
    interpolated linearly in pivot wavelength between them.
``template``
    Not enough photometry for a temperature (fewer than two usable bands,
    or the engine found none) and no ``teff`` given: the A0 V (Vega)
    template, reddened, scaled to a measured band — an explicit fallback,
    named in the note.

The star's spectrum is a blackbody of the given ``teff`` or, when none is
given, of the temperature engine's ``t_bb`` fitted to the same row's
magnitudes with its E(B−V) held fixed (`stelltemp.engine.estimate`),
reddened by that E(B−V) with the law of `stelltemp.extinction`.  Reddening
is never dropped: the E(B−V) enters both the engine and the spectrum.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import StelltempError
from . import counts
from .instrument import Instrument

__all__ = ["RateSource", "StarSpectrum", "clean_photometry", "star_spectrum", "star_spectra", "anchored_rates", "SOURCES"]

#: the kinds of rate source, best first
SOURCES = ("measured", "interpolated", "extrapolated", "template")


@dataclass(frozen=True)
class StarSpectrum:
    """The spectral shape used for a star's colour terms and interpolation.

    Attributes
    ----------
    teff : float or None
        Blackbody temperature, K (None: the A0 V template).
    ebv : float
        E(B−V) applied, mag.
    origin : str
        ``"given"`` (a teff from the list), ``"engine"`` (fitted to the
        row's magnitudes) or ``"template"``.
    note : str
        One line saying what was used and why.
    """

    teff: float | None
    ebv: float
    origin: str
    note: str


@dataclass(frozen=True)
class RateSource:
    """Electron rate above the atmosphere through one filter, and where it came from.

    Attributes
    ----------
    rate : float
        e⁻ s⁻¹ in the whole image, airmass 0.
    source : str
        One of `SOURCES`.
    bands : tuple of str
        Measured band(s) the rate is anchored to.
    colour_term : float
        Natural-minus-standard magnitude correction for ``measured`` rates
        (mag; rate = ZP × 10^(−0.4 (m + colour_term))); NaN otherwise.
    note : str
        One line for the plan's table.
    anchor_mag : float
        The measured magnitude the rate is scaled to (NaN when interpolated).
    """

    rate: float
    source: str
    bands: tuple
    colour_term: float
    note: str
    anchor_mag: float = math.nan


def clean_photometry(photometry) -> dict:
    """``{key: (mag, err)}`` with canonical passband keys and only finite magnitudes.

    ``photometry`` maps a passband key (or anything `get_passband` accepts) to
    a magnitude or a (magnitude, error) pair; NaN or None magnitudes are left
    out.  Errors default to NaN (unknown).
    """
    from ..passbands import get_passband

    out = {}
    for key, value in (photometry or {}).items():
        mag, err = (value if isinstance(value, (tuple, list)) else (value, math.nan))
        if mag is None or np.ma.is_masked(mag):
            continue
        mag = float(mag)
        if not math.isfinite(mag):
            continue
        err = math.nan if err is None or np.ma.is_masked(err) else float(err)
        k = get_passband(key).key
        if k in out:
            raise StelltempError(f"two magnitudes for passband {k}")
        out[k] = (mag, err)
    return out


def _engine_temperatures(phots, ebvs, ebv_errs, law, rv):
    """T_bb (K) and flag text for many stars in one engine call.

    Each star's bands not measured are NaN; the engine treats every row on
    its own (method chosen per row from its measured bands), so the result
    of one call equals that of one call per star.
    """
    from ..engine import estimate
    from ..engine import flags as fl

    keys = list(dict.fromkeys(k for p in phots for k in p))
    mags = {k: np.array([p[k][0] if k in p else np.nan for p in phots]) for k in keys}
    errs = {k: np.array([p[k][1] if k in p and math.isfinite(p[k][1]) else np.nan for p in phots]) for k in keys}
    res = estimate(mags, errs, ebv=np.asarray(ebvs, float), ebv_err=np.asarray(ebv_errs, float), law=law, rv=rv)
    t = np.asarray(res["t_bb"].value, float)
    flags = np.asarray(res["flags"], int)
    return [(float(t[i]), fl.describe(int(flags[i])) if flags[i] else "") for i in range(len(phots))]


def _check_ebv(ebv):
    e = float(ebv)
    if not math.isfinite(e):
        raise StelltempError("E(B-V) must be finite")
    return e


def _spectrum_from(photometry, teff, e, engine_result):
    """The `StarSpectrum` of one star given its engine result ((T_bb, flag text) or None)."""
    if teff is not None:
        return StarSpectrum(float(teff), e, "given", f"blackbody T = {float(teff):.0f} K (given), E(B-V) = {e:.3f}")
    if len(photometry) >= 2:
        t, why = engine_result
        bands = ", ".join(photometry)
        if math.isfinite(t) and t > 0:
            return StarSpectrum(t, e, "engine",
                                f"blackbody T_bb = {t:.0f} K fitted to {bands} with E(B-V) = {e:.3f}")
        reason = f"no temperature from {bands} ({why or 'no solution'})"
    else:
        reason = "fewer than two measured bands for a temperature"
    return StarSpectrum(None, e, "template", f"A0 V template reddened by E(B-V) = {e:.3f}: {reason}")


def star_spectra(photometries, teffs, ebvs, ebv_errs, law="G23", rv=3.1) -> list:
    """`star_spectrum` for many stars, with one temperature-engine call for all that need one.

    Parameters
    ----------
    photometries : list of dict
        `clean_photometry` outputs, one per star.
    teffs : list of float or None
        Given blackbody temperatures, K (None: fit with the engine).
    ebvs, ebv_errs : list of float
        E(B−V) and its error per star, mag.

    Returns
    -------
    list of StarSpectrum

    Examples
    --------
    >>> s = star_spectra([{"B_JC": (10.9, 0.01), "V_JC": (10.0, 0.01)}, {"V_JC": (9.0, 0.01)}],
    ...                  [None, None], [0.0, 0.1], [0.0, 0.0])
    >>> [x.origin for x in s]
    ['engine', 'template']
    """
    es = [_check_ebv(e) for e in ebvs]
    need = [i for i, (p, t) in enumerate(zip(photometries, teffs)) if t is None and len(p) >= 2]
    results = {}
    if need:
        found = _engine_temperatures([photometries[i] for i in need], [es[i] for i in need],
                                     [ebv_errs[i] for i in need], law, rv)
        results = dict(zip(need, found))
    return [_spectrum_from(p, t, e, results.get(i)) for i, (p, t, e) in enumerate(zip(photometries, teffs, es))]


def star_spectrum(photometry, teff=None, ebv=0.0, ebv_err=0.0, law="G23", rv=3.1) -> StarSpectrum:
    """The spectral shape for a star: given ``teff``, the engine's T_bb, or the template.

    Parameters
    ----------
    photometry : dict
        Output of `clean_photometry`.
    teff : float, optional
        Blackbody temperature from the target list, K.
    ebv, ebv_err : float
        The star's E(B−V) and its error, mag (held fixed in the engine).

    Returns
    -------
    StarSpectrum
    """
    return star_spectra([photometry], [teff], [ebv], [ebv_err], law, rv)[0]


def _pivot(pb) -> float:
    return float(pb.pivot_wavelength.value)


def _rate_through(instrument, fname, mag, band, spectrum):
    return float(counts.star_electron_rate(instrument, fname, mag, band, spectrum.teff, airmass=0.0,
                                           ebv=spectrum.ebv))


def anchored_rates(instrument: Instrument, photometry, *, teff=None, ebv=0.0, ebv_err=0.0, filters=None,
                   spectrum: StarSpectrum | None = None, law="G23", rv=3.1) -> dict:
    """Per filter, the electron rate above the atmosphere from the star's own photometry.

    Parameters
    ----------
    instrument : Instrument
    photometry : dict
        Passband key → magnitude or (magnitude, error); at least one finite.
    teff : float, optional
        Blackbody temperature, K (default: fitted by the engine to
        ``photometry``; the template if that is impossible).
    ebv, ebv_err : float
        E(B−V) and its error, mag.
    filters : list of str, optional
        Subset of the instrument's filters.
    spectrum : StarSpectrum, optional
        A shape already chosen (skips the engine).

    Returns
    -------
    dict
        Filter name → `RateSource`; ``"_spectrum"`` → the `StarSpectrum`.

    Examples
    --------
    >>> from pathlib import Path
    >>> from stelltemp.observing.instrument import load_instrument
    >>> rig = load_instrument(Path("catalogs_demo/instruments/quillmere_04m_ccd.toml"))
    >>> r = anchored_rates(rig, {"V_JC": 12.0, "Ic_JC": 11.0}, teff=5000.0)
    >>> r["V"].source, r["R"].source
    ('measured', 'interpolated')
    """
    from ..passbands import get_passband

    phot = clean_photometry(photometry)
    if not phot:
        raise StelltempError("no finite magnitude to plan from")
    spec_shape = spectrum or star_spectrum(phot, teff, ebv, ebv_err, law, rv)
    measured = sorted(((_pivot(get_passband(k)), k) for k in phot))
    out = {"_spectrum": spec_shape}
    names = list(filters) if filters else list(instrument.filters)
    for fname in names:
        fspec = instrument.filter(fname)
        std = fspec.passband
        if spec_shape.teff is None:  # template: anchored to the nearest measured band, whatever the filter
            lam = _pivot(std)
            _, k = min(measured, key=lambda p: abs(p[0] - lam))
            rate = _rate_through(instrument, fname, phot[k][0], k, spec_shape)
            kind = "measured" if k == std.key else "template"
            ct = _colour_term(instrument, fname, rate, phot[k][0]) if kind == "measured" else math.nan
            out[fname] = RateSource(rate, kind, (k,), ct, f"{k} = {phot[k][0]:.3f} through the {spec_shape.note}",
                                    phot[k][0])
            continue
        if std.key in phot:
            m = phot[std.key][0]
            rate = _rate_through(instrument, fname, m, std.key, spec_shape)
            ct = _colour_term(instrument, fname, rate, m)
            out[fname] = RateSource(rate, "measured", (std.key,), ct,
                                    f"measured {std.key} = {m:.3f}; natural-band colour term {ct:+.3f} mag "
                                    f"({spec_shape.note})", m)
            continue
        lam = _pivot(std)
        below = [p for p in measured if p[0] < lam]
        above = [p for p in measured if p[0] > lam]
        if below and above:
            (l1, k1), (l2, k2) = below[-1], above[0]
            r1 = _rate_through(instrument, fname, phot[k1][0], k1, spec_shape)
            r2 = _rate_through(instrument, fname, phot[k2][0], k2, spec_shape)
            w = (lam - l1) / (l2 - l1)
            rate = float(math.exp((1 - w) * math.log(r1) + w * math.log(r2)))
            out[fname] = RateSource(rate, "interpolated", (k1, k2), math.nan,
                                    f"interpolated between {k1} and {k2} with the {spec_shape.note}")
        else:
            _, k = below[-1] if below else above[0]
            rate = _rate_through(instrument, fname, phot[k][0], k, spec_shape)
            out[fname] = RateSource(rate, "extrapolated", (k,), math.nan,
                                    f"extrapolated from {k} with the {spec_shape.note}", phot[k][0])
    return out


def _colour_term(instrument, fname, rate, mag) -> float:
    """−2.5 log10(rate / (ZP × 10^(−0.4 m))): natural minus standard magnitude of the star, mag."""
    zp = counts.zero_point_rate(instrument, fname)
    return float(-2.5 * math.log10(rate / (zp * 10.0 ** (-0.4 * mag))))
