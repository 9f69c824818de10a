"""Electrons per second from a star, from the sky and from dark current.

Star::

    N_e = A · 10^(−0.4 k X) · ∫ F_λ λ/(hc) · τ_f S(λ) · R(λ)^m · τ_o · Q(λ) dλ

with A the unobstructed collecting area, k the filter's extinction
coefficient (mag per airmass, grey across the band), X the airmass, S the
passband's photon-counting response (peak 1), τ_f its peak transmission,
R the mirror reflectivity (m mirrors) and τ_o the other optics.  Q counts
the detector once (`FilterSpec.qe_factor`): the camera QE for a bare filter
curve; for a standard-system curve, which already contains a detector,
1 or the ratio of the camera QE to that standard detector's QE.  Magnitudes
given for stars are outside the atmosphere.

The star's spectrum is a blackbody of temperature T (Planck) scaled so that
its synthetic magnitude in a named passband equals the given magnitude, or
any tabulated spectrum.  With no temperature the shape of the CALSPEC Vega
spectrum (an A0 V star) is used as a template.  Either is reddened by the
star's E(B−V) before it is scaled (the magnitude is the observed one).

Sky: the sky surface brightness in a filter (mag arcsec⁻², as measured at the
site, so no extinction is applied) is given the spectrum of the zero-point
source of the passband's own magnitude system — the Vega spectrum for
Vega-system bands, a flat F_ν (3631 Jy) for AB bands — scaled to that
magnitude.  This is the stated convention; the true night-sky spectrum (lines,
continuum) differs, which matters mostly for broad or red bands.

The integration grid is the passband's own grid refined to ≤ 2 Å, plus the
points of the QE and reflectivity curves inside the band; curves are
interpolated linearly (the passband as the core does it, through
``Passband.photon_response_at``).
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import StelltempError
from ..photometry import band_integral, mag_offset
from ..planck import C_CGS, H_CGS, planck_lambda_cgs
from ..reference import ab_flam, st_flam, vega_spectrum
from .instrument import Curve, Instrument

__all__ = [
    "HC_ERG_ANGSTROM",
    "band_grid",
    "system_efficiency",
    "photon_integral",
    "electron_rate_spectrum",
    "scaled_blackbody",
    "template_spectrum",
    "star_electron_rate",
    "sky_electron_rate",
    "zero_point_rate",
    "sky_airmass_brightening",
    "moonlight_electron_rate",
    "MOONLIGHT_COLOUR",
    "dark_electron_rate",
    "extinction_factor",
]

#: h c in erg Å: photons per erg at wavelength λ (Å) are λ / hc
HC_ERG_ANGSTROM = H_CGS * C_CGS * 1e8

_STEP_A = 2.0


def band_grid(passband, extra=()):
    """Integration grid (Å) over the passband: its points, a ≤ 2 Å mesh and ``extra`` points inside."""
    lo, hi = passband.wave[0], passband.wave[-1]
    mesh = np.linspace(lo, hi, max(int(np.ceil((hi - lo) / _STEP_A)) + 1, 2))
    pts = [passband.wave, mesh]
    for e in extra:
        e = np.asarray(e, float)
        pts.append(e[(e > lo) & (e < hi)])
    return np.unique(np.concatenate(pts))


def _photon_response_at(pb, wave):
    """The passband's photon response at any wavelengths, as the core interpolates it."""
    at = getattr(pb, "photon_response_at", None)
    if at is not None:  # energy curves interpolated first, then divided by λ
        return at(wave)
    return np.interp(wave, pb.wave, pb.photon_response, left=0.0, right=0.0)


def _curve_points(instrument: Instrument, spec):
    pts = []
    if isinstance(instrument.telescope.reflectivity, Curve):
        pts.append(instrument.telescope.reflectivity.wave)
    if not spec.curve_includes_detector or spec.reference_qe is not None:
        pts.append(instrument.camera.qe.wave)
    if spec.reference_qe is not None:
        pts.append(spec.reference_qe.wave)
    return pts


def system_efficiency(instrument: Instrument, filter_name: str, wave):
    """Fraction of photons above the atmosphere that become electrons, at ``wave`` (Å).

    Filter (τ_f × photon response) × mirrors × other optics × the detector
    term of `FilterSpec.qe_factor` (the QE for a bare filter curve; 1 or the
    QE ratio to the standard detector for a system curve).
    """
    spec = instrument.filter(filter_name)
    pb = spec.passband
    w = np.asarray(wave, float)
    eff = spec.peak_transmission * _photon_response_at(pb, w)
    eff = eff * instrument.telescope.throughput(w)
    return eff * spec.qe_factor(instrument.camera.qe, w)


def photon_integral(wave, flam, efficiency):
    """∫ F_λ λ/(hc) ε dλ in photons (or electrons) s⁻¹ cm⁻²; ``flam`` may be (m, n)."""
    return np.trapezoid(np.asarray(flam, float) * wave * efficiency, wave, axis=-1) / HC_ERG_ANGSTROM


def extinction_factor(k_mag_per_airmass, airmass):
    """Atmospheric transmission 10^(−0.4 k X)."""
    x = np.asarray(airmass, float)
    if np.any(~np.isfinite(x) | (x < 0)):
        raise StelltempError("airmass must be finite and >= 0 (0 = above the atmosphere)")
    return 10.0 ** (-0.4 * k_mag_per_airmass * x)


def electron_rate_spectrum(wave, flam, instrument: Instrument, filter_name: str, airmass=1.0):
    """Electrons per second from a tabulated spectrum through one filter.

    Parameters
    ----------
    wave : ndarray
        Wavelength, Å, increasing; must cover the filter's passband.
    flam : ndarray
        F_λ outside the atmosphere, erg s⁻¹ cm⁻² Å⁻¹.
    instrument : Instrument
    filter_name : str
    airmass : float
        X; 0 means above the atmosphere.

    Returns
    -------
    float
        e⁻ s⁻¹ in the whole stellar image.
    """
    spec = instrument.filter(filter_name)
    pb = spec.passband
    wave = np.asarray(wave, float)
    flam = np.asarray(flam, float)
    if wave.ndim != 1 or wave.shape != flam.shape[-1:]:
        raise StelltempError("spectrum wave and flam must be 1-D arrays of equal length")
    lo, hi = pb.wave_range
    if wave[0] > lo or wave[-1] < hi:
        raise StelltempError(f"spectrum ({wave[0]:.0f}–{wave[-1]:.0f} Å) does not cover filter "
                             f"'{filter_name}' ({lo:.0f}–{hi:.0f} Å)")
    grid = band_grid(pb, _curve_points(instrument, spec) + [wave])
    f = np.interp(grid, wave, flam)
    rate = photon_integral(grid, f, system_efficiency(instrument, filter_name, grid))
    return float(rate * instrument.telescope.collecting_area_cm2
                 * extinction_factor(spec.extinction_mag_per_airmass, airmass))


_TRANSMISSION_CACHE: dict = {}


def _transmission(wave, ebv, law, rv):
    """Dust transmission 10^(−0.4 R_V E(B−V) k(λ)), k(λ) cached per wavelength grid (the law is slow to evaluate)."""
    from ..extinction import relative_extinction

    w = np.asarray(wave, float)
    key = (law, float(rv), w.shape, hash(w.tobytes()))
    k = _TRANSMISSION_CACHE.get(key)
    if k is None:
        if len(_TRANSMISSION_CACHE) > 256:
            _TRANSMISSION_CACHE.clear()
        k = _TRANSMISSION_CACHE[key] = relative_extinction(w, law, rv)
    return 10 ** (-0.4 * float(rv) * np.multiply.outer(np.asarray(ebv, float), k))


def scaled_blackbody(teff, mag, band, ebv=0.0, law="G23", rv=3.1):
    """Evaluator of a (reddened) blackbody of ``teff`` with magnitude ``mag`` in ``band``.

    Parameters
    ----------
    teff : float or array
        Temperature, K.
    mag : float or array
        Magnitude in ``band`` (its own system), broadcast with ``teff``.
    band : Passband or str
    ebv : float or array
        E(B−V) applied to the blackbody before it is scaled (mag; law and R_V
        as in :mod:`stelltemp.extinction`), so ``mag`` is the observed,
        reddened magnitude and the colours across filters are the reddened ones.

    Returns
    -------
    callable
        ``flam(wave)`` → F_λ (erg s⁻¹ cm⁻² Å⁻¹) with shape (..., len(wave)).
    """
    from ..passbands import get_passband

    pb = get_passband(band)
    t = np.asarray(teff, float)
    m = np.asarray(mag, float)
    e = np.asarray(ebv, float)
    if np.any(~np.isfinite(t) | (t <= 0)):
        raise StelltempError("temperature must be positive and finite (K)")
    if np.any(~np.isfinite(m)):
        raise StelltempError("magnitude must be finite")
    if np.any(~np.isfinite(e)):
        raise StelltempError("E(B-V) must be finite")
    t, m, e = np.broadcast_arrays(t, m, e)
    shape = t.shape

    def reddened(wave):
        w = np.asarray(wave, float)
        return planck_lambda_cgs(t[..., None], w) * _transmission(w, e, law, rv)

    grid = band_grid(pb)
    m0 = -2.5 * np.log10(band_integral(grid, reddened(grid).reshape(-1, len(grid)), pb)) + mag_offset(pb)
    scale = (10.0 ** (-0.4 * (m.reshape(-1) - m0))).reshape(shape)

    def flam(wave):
        return scale[..., None] * reddened(wave)

    return flam


def template_spectrum(mag, band, ebv=0.0, law="G23", rv=3.1):
    """The A0 V template (CALSPEC Vega) reddened by ``ebv`` and scaled to ``mag`` in ``band``.

    Returns
    -------
    (wave, flam) : ndarray, ndarray
        Å and erg s⁻¹ cm⁻² Å⁻¹; ``flam`` has shape (..., len(wave)) for
        array ``mag``/``ebv``.
    """
    from ..passbands import get_passband

    pb = get_passband(band)
    w, f = vega_spectrum()
    keep = (w >= 1000.0) & (w <= 300000.0)  # inside every extinction law's range; covers all passbands
    w, f = w[keep], f[keep]
    e = np.asarray(ebv, float)
    if np.any(~np.isfinite(e)):
        raise StelltempError("E(B-V) must be finite")
    m, e = np.broadcast_arrays(np.asarray(mag, float), e)
    red = f * _transmission(w, e, law, rv) if np.any(e != 0) else np.broadcast_to(f, e.shape + f.shape)
    m0 = -2.5 * np.log10(band_integral(w, red.reshape(-1, len(w)), pb)).reshape(e.shape) + mag_offset(pb)
    scale = 10.0 ** (-0.4 * (m - m0))
    return w, scale[..., None] * red


def star_electron_rate(instrument: Instrument, filter_name: str, mag, band=None, teff=None, airmass=1.0, ebv=0.0):
    """Electrons per second from a star in one filter.

    Parameters
    ----------
    instrument : Instrument
    filter_name : str
        Filter of the instrument to observe through.
    mag : float or array
        Magnitude outside the atmosphere in ``band``.
    band : str or Passband, optional
        Band of ``mag`` (default: the filter's own passband).
    teff : float or array, optional
        Blackbody temperature, K; None uses the Vega (A0 V) template shape.
    airmass : float or array
        X (0 = above the atmosphere); broadcast with ``mag``/``teff``.
    ebv : float or array
        E(B−V) of the star: the blackbody (or the template) is reddened
        (G23, R_V = 3.1) and ``mag`` is its observed magnitude.

    Returns
    -------
    float or ndarray
        e⁻ s⁻¹ in the whole stellar image.
    """
    spec = instrument.filter(filter_name)
    pb = spec.passband
    band = pb if band is None else band
    grid = band_grid(pb, _curve_points(instrument, spec))
    eff = system_efficiency(instrument, filter_name, grid)
    area = instrument.telescope.collecting_area_cm2
    ext = extinction_factor(spec.extinction_mag_per_airmass, airmass)
    if teff is None:
        w, f = template_spectrum(mag, band, ebv)
        f2 = f.reshape(-1, len(w))
        flam = np.array([np.interp(grid, w, row) for row in f2]).reshape(f.shape[:-1] + grid.shape)
        rate = photon_integral(grid, flam, eff)
    else:
        flam = scaled_blackbody(teff, mag, band, ebv)(grid)
        rate = photon_integral(grid, flam, eff)
    out = rate * area * ext
    return float(out) if np.ndim(out) == 0 else out


#: zero-point rates of the recent instruments, by identity: id → (instrument, {filter: e⁻ s⁻¹}).
#: An Instrument is frozen, so its rates never change; it is kept alive by its entry (so its id
#: is not reused while the entry exists).  A night plan asks for each filter's rate hundreds of times.
_ZERO_POINTS = {}
_ZERO_POINT_INSTRUMENTS = 16


def zero_point_rate(instrument: Instrument, filter_name: str):
    """Electrons per second from a 0-mag source with the band's zero-point spectrum, above the atmosphere.

    Vega-system bands: the Vega spectrum scaled to magnitude 0 (Vega itself
    has the passband's adopted magnitude).  AB and ST bands: F_ν = 3631 Jy
    or F_λ = 3.63×10⁻⁹ erg s⁻¹ cm⁻² Å⁻¹ exactly (magnitude 0 by definition).
    Computed once per instrument and filter.
    """
    entry = _ZERO_POINTS.get(id(instrument))
    if entry is None or entry[0] is not instrument:
        while len(_ZERO_POINTS) >= _ZERO_POINT_INSTRUMENTS:
            _ZERO_POINTS.pop(next(iter(_ZERO_POINTS)), None)
        entry = _ZERO_POINTS[id(instrument)] = (instrument, {})
    rates = entry[1]
    if filter_name not in rates:
        rates[filter_name] = _zero_point_rate(instrument, filter_name)
    return rates[filter_name]


def _zero_point_rate(instrument, filter_name):
    spec = instrument.filter(filter_name)
    pb = spec.passband
    if pb.magsys == "Vega":
        return star_electron_rate(instrument, filter_name, 0.0, airmass=0.0)
    grid = band_grid(pb, _curve_points(instrument, spec))
    zp = ab_flam(grid) if pb.magsys == "AB" else st_flam(grid)
    return float(photon_integral(grid, zp, system_efficiency(instrument, filter_name, grid))
                 * instrument.telescope.collecting_area_cm2)


def sky_electron_rate(instrument: Instrument, filter_name: str, sky_mag=None):
    """Sky electrons per second per read-out (binned) pixel.

    Parameters
    ----------
    sky_mag : float or array, optional
        Sky surface brightness, mag arcsec⁻² (default: the filter's value in
        the instrument file).  The sky gets the spectrum of the band's
        zero-point source (Vega or flat F_ν), see the module docstring.
    """
    spec = instrument.filter(filter_name)
    mu = spec.sky_mag_arcsec2 if sky_mag is None else np.asarray(sky_mag, float)
    out = zero_point_rate(instrument, filter_name) * 10.0 ** (-0.4 * mu) * instrument.camera.binned_scale_arcsec**2
    return float(out) if np.ndim(out) == 0 else out


#: colour assumption for moonlight: the Sun's spectrum (the lunar albedo and the scattering taken as grey)
MOONLIGHT_COLOUR = ("scattered moonlight given the solar spectrum (Kurucz 1993), scaled to its V surface "
                    "brightness: lunar albedo and atmospheric scattering taken as grey (real moonlit skies "
                    "are somewhat bluer, Krisciunas & Schaefer 1991)")


def moonlight_electron_rate(instrument: Instrument, filter_name: str, moon_v_arcsec2):
    """Sky electrons per second per read-out pixel from scattered moonlight.

    Parameters
    ----------
    moon_v_arcsec2 : float
        V surface brightness of the moonlight alone at the target (mag
        arcsec⁻², e.g. from `stelltemp.observing.moon.moonlight_vmag`);
        ``inf`` or NaN-free large values give 0.

    Notes
    -----
    The conversion to other filters follows `MOONLIGHT_COLOUR`: the solar
    spectrum is scaled to ``moon_v_arcsec2`` in Johnson V and integrated
    through the filter's natural band (no extinction: the brightness is the
    one seen from the ground).
    """
    from ..reference import sun_spectrum

    mu = float(moon_v_arcsec2)
    if not math.isfinite(mu) and mu > 0:
        return 0.0
    if not math.isfinite(mu):
        raise StelltempError("moonlight surface brightness must be a number (mag/arcsec2)")
    w, f = sun_spectrum()
    from ..passbands import get_passband

    v = get_passband("V_JC")
    m0 = -2.5 * np.log10(band_integral(w, f, v)) + mag_offset(v)
    per_arcsec2 = electron_rate_spectrum(w, f * 10.0 ** (-0.4 * (mu - m0)), instrument, filter_name, airmass=0.0)
    return per_arcsec2 * instrument.camera.binned_scale_arcsec**2


def sky_airmass_brightening(airmass, k_mag_per_airmass):
    """Change (mag) of the moonless sky away from the zenith, Krisciunas & Schaefer 1991 eq. 1.

    B(X) = B_zenith · 10^(−0.4 k (X − 1)) · X, so Δm = −2.5 log10(X) + k (X − 1)
    (negative: brighter).  Add it to the zenith sky magnitude.
    """
    x = np.asarray(airmass, float)
    return -2.5 * np.log10(x) + k_mag_per_airmass * (x - 1.0)


def dark_electron_rate(instrument: Instrument):
    """Dark electrons per second per read-out pixel (binning² physical pixels)."""
    return instrument.camera.binned_dark_e_per_s
