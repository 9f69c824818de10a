"""The CCD equation, scintillation noise and exposure time for a target S/N.

CCD equation (Merline & Howell 1995, Exp. Astron. 6, 163; Howell 2006,
*Handbook of CCD Astronomy*, 2nd ed., §4.4)::

    S/N = N* / sqrt( N* + n_pix (1 + n_pix/n_B) (N_S + N_D + N_R² + G² σ_f²) + σ_scint² N*² )

with N* the source electrons in the aperture, n_pix the aperture pixels,
n_B the background pixels used to estimate the sky, N_S and N_D the sky and
dark electrons per pixel, N_R the read noise (e⁻ per pixel per read), G the
gain (e⁻/ADU) and σ_f ≈ 0.289 ADU the digitisation noise of a uniform
rounding error (1/√12).

Scintillation (Young 1967, AJ 72, 747) in the form of Osborn et al. 2015
(MNRAS 452, 1707, their eqs. 7–8)::

    σ_scint² = 10×10⁻⁶ C_Y² D^(−4/3) t⁻¹ (cos z)⁻³ exp(−2 h / H)

D in m, t in s, h the site altitude in m, H = 8000 m.  Osborn et al. found
Young's approximation underestimates the median scintillation at the
observatories they studied; their empirical factors C_Y lie between about
1.3 and 1.7 (site medians), and 1.5 is used here as a typical value.

Because σ_scint ∝ t^(−1/2), the scintillation variance σ_scint² N*² = c² S² t
grows linearly with t, like shot noise (Osborn et al. 2015 make this point):
with a source rate S, per-pixel rates B (sky) and D (dark) the variance is
``a t + b`` with ``a = S + n_eff (B + D) + c² S²`` and
``b = n_eff (N_R² + G² σ_f²)``, ``n_eff = n_pix (1 + n_pix/n_B)``.
So (S t)² = R² (a t + b) is a quadratic in t with one positive root.

All functions take plain floats or arrays (rates in e⁻ s⁻¹, times in s) and
broadcast.
"""

from __future__ import annotations

import numpy as np

from ..errors import StelltempError

__all__ = [
    "SIGMA_F_ADU",
    "effective_pixels",
    "noise_variance",
    "snr",
    "exposure_for_snr",
    "stack_exposure_for_snr",
    "scintillation_sigma",
    "scintillation_coefficient",
    "young1967_sigma",
]

#: digitisation noise of the ADC, ADU rms: a uniform rounding error of 1 ADU
#: has σ = 1/√12 ≈ 0.289 (Merline & Howell 1995)
SIGMA_F_ADU = 1.0 / np.sqrt(12.0)

#: scale height of the turbulence for the scintillation formula, m (Osborn et al. 2015)
SCINT_SCALE_HEIGHT_M = 8000.0

#: typical empirical correction factor C_Y to Young's approximation (Osborn et al. 2015)
C_Y_TYPICAL = 1.5


def _check_positive(name, value, allow_zero=True, allow_inf=False):
    v = np.asarray(value, dtype=float)
    finite_ok = ~np.isnan(v) & (np.isfinite(v) | (allow_inf & (v > 0)))
    bad = ~finite_ok | ((v < 0) if allow_zero else (v <= 0))
    if np.any(bad):
        raise StelltempError(f"{name} must be {'non-negative' if allow_zero else 'positive'} and "
                             f"{'not NaN' if allow_inf else 'finite'}")
    return v


def effective_pixels(n_pix, n_background=np.inf):
    """n_pix (1 + n_pix / n_B): aperture pixels inflated by the sky-estimate error.

    Parameters
    ----------
    n_pix : float or array
        Pixels in the measuring aperture.
    n_background : float or array
        Pixels used to estimate the background (``inf`` for a perfectly known sky).
    """
    n_pix = _check_positive("n_pix", n_pix, allow_zero=False)
    n_b = _check_positive("n_background", n_background, allow_zero=False, allow_inf=True)
    return n_pix * (1.0 + n_pix / n_b)


def _per_read_variance(read_noise_e, gain_e_per_adu, sigma_f_adu):
    rn = _check_positive("read noise", read_noise_e)
    g = _check_positive("gain", gain_e_per_adu, allow_zero=False)
    return rn**2 + (g * sigma_f_adu) ** 2


def noise_variance(t, source_rate, sky_rate, dark_rate, read_noise_e, n_pix, n_background=np.inf,
                   gain_e_per_adu=1.0, sigma_f_adu=SIGMA_F_ADU, scint_coeff=0.0):
    """Total variance (e⁻²) of the aperture sum in one exposure.

    Parameters
    ----------
    t : float or array
        Exposure time, s.
    source_rate : float or array
        Source electrons per second inside the aperture, e⁻ s⁻¹.
    sky_rate, dark_rate : float or array
        Sky and dark electrons per pixel per second, e⁻ s⁻¹ pixel⁻¹.
    read_noise_e : float
        Read noise, e⁻ rms per pixel.
    n_pix, n_background : float
        Aperture and background pixel counts.
    gain_e_per_adu : float
        Gain, e⁻/ADU (enters the digitisation term G² σ_f²).
    sigma_f_adu : float
        Digitisation noise in ADU (default 1/√12 ≈ 0.289).
    scint_coeff : float
        Relative scintillation noise for a 1 s exposure (see
        `scintillation_coefficient`); 0 to ignore scintillation.

    Returns
    -------
    ndarray
        Variance in e⁻².
    """
    t = _check_positive("exposure time", t)
    s = _check_positive("source rate", source_rate)
    n_eff = effective_pixels(n_pix, n_background)
    per_read = _per_read_variance(read_noise_e, gain_e_per_adu, sigma_f_adu)
    c = _check_positive("scintillation coefficient", scint_coeff)
    b = _check_positive("sky rate", sky_rate)
    d = _check_positive("dark rate", dark_rate)
    return s * t + n_eff * ((b + d) * t + per_read) + (c * s) ** 2 * t


def snr(t, source_rate, sky_rate, dark_rate, read_noise_e, n_pix, n_background=np.inf,
        gain_e_per_adu=1.0, sigma_f_adu=SIGMA_F_ADU, scint_coeff=0.0, n_exposures=1):
    """Signal-to-noise of ``n_exposures`` co-added exposures of ``t`` seconds each.

    Parameters are those of `noise_variance`; ``n_exposures`` independent
    exposures add signal and variance (read noise enters once per exposure).

    Returns
    -------
    ndarray
        S/N (dimensionless); 0 where the signal is 0.

    Examples
    --------
    Star 1000 e⁻/s, sky 50 e⁻/s/pixel, dark 0.1 e⁻/s/pixel, read noise 5 e⁻, 30 pixels, 60 s:

    >>> round(float(snr(60.0, 1000.0, 50.0, 0.1, 5.0, 30)), 1)
    154.4

    """
    n = _check_positive("number of exposures", n_exposures, allow_zero=False)
    var = n * noise_variance(t, source_rate, sky_rate, dark_rate, read_noise_e, n_pix, n_background,
                             gain_e_per_adu, sigma_f_adu, scint_coeff)
    signal = n * np.asarray(source_rate, float) * np.asarray(t, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(var > 0, signal / np.sqrt(np.where(var > 0, var, 1.0)), 0.0)
    return out


def _quadratic_time(target_snr, source_rate, a, b, n_exposures):
    # n S² t² − R² a t − R² b = 0, the positive root; both terms of the
    # numerator are non-negative so there is no cancellation.
    r2 = np.asarray(target_snr, float) ** 2
    s = np.asarray(source_rate, float)
    return (r2 * a + np.sqrt((r2 * a) ** 2 + 4.0 * n_exposures * s**2 * r2 * b)) / (2.0 * n_exposures * s**2)


def _coefficients(source_rate, sky_rate, dark_rate, read_noise_e, n_pix, n_background, gain_e_per_adu,
                  sigma_f_adu, scint_coeff):
    s = _check_positive("source rate", source_rate)
    if np.any(s <= 0):
        raise StelltempError("source rate must be positive to reach a target S/N")
    n_eff = effective_pixels(n_pix, n_background)
    per_read = _per_read_variance(read_noise_e, gain_e_per_adu, sigma_f_adu)
    c = _check_positive("scintillation coefficient", scint_coeff)
    a = s + n_eff * (_check_positive("sky rate", sky_rate) + _check_positive("dark rate", dark_rate)) + (c * s) ** 2
    b = n_eff * per_read
    return s, a, b


def exposure_for_snr(target_snr, source_rate, sky_rate, dark_rate, read_noise_e, n_pix, n_background=np.inf,
                     gain_e_per_adu=1.0, sigma_f_adu=SIGMA_F_ADU, scint_coeff=0.0):
    """Exposure time (s) that reaches ``target_snr`` in one exposure, solved exactly.

    The CCD equation squared, (S t)² = R² (a t + b), is a quadratic in t (see
    the module docstring; scintillation adds c² S² to ``a``).

    Returns
    -------
    ndarray
        Exposure time in s.

    Examples
    --------
    >>> t = exposure_for_snr(100.0, 1000.0, 50.0, 0.1, 5.0, 30)
    >>> round(float(t), 2), round(float(snr(t, 1000.0, 50.0, 0.1, 5.0, 30)), 6)
    (25.33, 100.0)

    """
    return stack_exposure_for_snr(target_snr, 1, source_rate, sky_rate, dark_rate, read_noise_e, n_pix,
                                  n_background, gain_e_per_adu, sigma_f_adu, scint_coeff)


def stack_exposure_for_snr(target_snr, n_exposures, source_rate, sky_rate, dark_rate, read_noise_e, n_pix,
                           n_background=np.inf, gain_e_per_adu=1.0, sigma_f_adu=SIGMA_F_ADU, scint_coeff=0.0):
    """Per-exposure time (s) so that ``n_exposures`` co-added frames reach ``target_snr``.

    The stack has signal n S t and variance n (a t + b), so
    (n S t)² = R² n (a t + b), i.e. n S² t² − R² a t − R² b = 0.

    Returns
    -------
    ndarray
        Time of each exposure in s (total = n × this).
    """
    r = _check_positive("target S/N", target_snr, allow_zero=False)
    n = _check_positive("number of exposures", n_exposures, allow_zero=False)
    s, a, b = _coefficients(source_rate, sky_rate, dark_rate, read_noise_e, n_pix, n_background, gain_e_per_adu,
                            sigma_f_adu, scint_coeff)
    return _quadratic_time(r, s, a, b, n)


def scintillation_sigma(aperture_m, airmass, altitude_m, exposure_s, c_y=C_Y_TYPICAL):
    """Relative scintillation noise σ_scint (fraction of the flux).

    Young (1967, AJ 72, 747) in the form of Osborn et al. (2015, MNRAS 452,
    1707, eq. 7) with their empirical correction C_Y (eq. 8)::

        σ² = 10e-6 C_Y² D^(−4/3) t⁻¹ X³ exp(−2h/8000 m)

    where X = sec z.  Valid for exposures much longer than the time the wind
    takes to cross the aperture (a few ms for small telescopes).

    Parameters
    ----------
    aperture_m : float
        Telescope diameter D, m.
    airmass : float or array
        X = sec z (≥ 1).
    altitude_m : float
        Site altitude h, m.
    exposure_s : float or array
        Exposure time t, s.
    c_y : float
        Empirical correction factor (Osborn et al. 2015 site medians ≈ 1.3–1.7).
    """
    d = _check_positive("aperture", aperture_m, allow_zero=False)
    t = _check_positive("exposure time", exposure_s, allow_zero=False)
    x = np.asarray(airmass, float)
    if np.any(~np.isfinite(x) | (x < 1)):
        raise StelltempError("airmass must be >= 1")
    var = 10e-6 * c_y**2 * d ** (-4.0 / 3.0) / t * x**3 * np.exp(-2.0 * np.asarray(altitude_m, float)
                                                                 / SCINT_SCALE_HEIGHT_M)
    return np.sqrt(var)


def scintillation_coefficient(aperture_m, airmass, altitude_m, c_y=C_Y_TYPICAL):
    """σ_scint for a 1 s exposure: σ_scint(t) = coefficient / √t (see `scintillation_sigma`)."""
    return scintillation_sigma(aperture_m, airmass, altitude_m, 1.0, c_y)


def young1967_sigma(aperture_m, airmass, altitude_m, exposure_s):
    """Young's (1967, AJ 72, 747) original approximation, for comparison.

    σ = 0.09 D_cm^(−2/3) X^1.75 exp(−h/8000 m) (2t)^(−1/2), D in cm.
    The airmass exponent 1.75 is Young's; Osborn et al. (2015) use X^1.5 in σ.
    """
    d_cm = _check_positive("aperture", aperture_m, allow_zero=False) * 100.0
    t = _check_positive("exposure time", exposure_s, allow_zero=False)
    x = np.asarray(airmass, float)
    return 0.09 * d_cm ** (-2.0 / 3.0) * x**1.75 * np.exp(-np.asarray(altitude_m, float)
                                                          / SCINT_SCALE_HEIGHT_M) / np.sqrt(2.0 * t)
