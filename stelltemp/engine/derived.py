"""Quantities derived from a temperature and an angular diameter.

* Wien peak λ_max = b / T (b from the root of 5(1 − e⁻ˣ) = x);
* bolometric flux at Earth F = σ T⁴ (θ/2)² for a sphere of angular
  diameter θ (Stefan–Boltzmann law);
* with a parallax ϖ: distance d = 1/ϖ, radius R = (θ/2) d and luminosity
  L = 4π d² F = 4π R² σ T⁴.

Errors are propagated to first order in logarithms, with the covariance of
ln T and ln θ from the fit; the parallax error is treated as independent.
Solar units are the IAU 2015 Resolution B3 nominal values (R☉ = 6.957e8 m,
L☉ = 3.828e26 W).  1/ϖ is a fair distance only for precise parallaxes
(ϖ/σ_ϖ ≳ 5, Bailer-Jones 2015, PASP 127, 994); below that the radius and
luminosity are left blank.
"""

import numpy as np

from ..planck import SIGMA_CGS, wien_b_lambda

R_SUN_M = 6.957e8  # IAU 2015 B3
L_SUN_W = 3.828e26  # IAU 2015 B3
PC_M = 3.0856775814913673e16
MAS_RAD = np.pi / 180 / 3600 / 1000
MIN_PARALLAX_SNR = 5.0


def angular_diameter_mas(a):
    """Angular diameter (mas) from the magnitude offset a = −2.5 log10(π θ²/4)."""
    omega = 10 ** (-0.4 * np.asarray(a, float))
    return 2 * np.sqrt(omega / np.pi) / MAS_RAD


def derived_quantities(t, lnt_err, theta_mas, lntheta_err, cov_lnt_lntheta=0.0,
                       parallax_mas=None, parallax_err_mas=None):
    """Wien peak, bolometric flux, and with a parallax radius and luminosity.

    Parameters
    ----------
    t : ndarray
        Temperature, K.
    lnt_err : ndarray
        1σ error of ln T.
    theta_mas, lntheta_err : ndarray
        Angular diameter (mas) and the 1σ error of its logarithm.
    cov_lnt_lntheta : ndarray
        Covariance of ln T and ln θ.
    parallax_mas, parallax_err_mas : ndarray, optional

    Returns
    -------
    dict of ndarrays
        ``lambda_peak_nm``, ``lambda_peak_err_nm``, ``fbol_cgs`` (erg s⁻¹ cm⁻²),
        ``fbol_err_cgs``, ``radius_rsun``, ``radius_err_rsun``, ``lum_lsun``,
        ``lum_err_lsun``.
    """
    t = np.asarray(t, float)
    lnt_err = np.asarray(lnt_err, float)
    theta = np.asarray(theta_mas, float) * MAS_RAD
    lth_err = np.asarray(lntheta_err, float)
    cov = np.asarray(cov_lnt_lntheta, float)
    out = {}
    lam = wien_b_lambda() / t * 1e9
    out["lambda_peak_nm"] = lam
    out["lambda_peak_err_nm"] = lam * lnt_err
    fbol = SIGMA_CGS * t**4 * theta**2 / 4
    # ln F = 4 ln T + 2 ln θ + const
    with np.errstate(invalid="ignore"):
        lnf_err = np.sqrt(np.maximum(16 * lnt_err**2 + 4 * lth_err**2 + 16 * cov, 0.0))
    out["fbol_cgs"] = fbol
    out["fbol_err_cgs"] = fbol * lnf_err
    n = t.shape
    nan = np.full(n, np.nan)
    out.update(radius_rsun=nan, radius_err_rsun=nan.copy(), lum_lsun=nan.copy(), lum_err_lsun=nan.copy())
    if parallax_mas is None:
        return out
    plx = np.broadcast_to(np.asarray(parallax_mas, float), n)
    plx_err = np.broadcast_to(np.asarray(0.0 if parallax_err_mas is None else parallax_err_mas, float), n)
    with np.errstate(invalid="ignore", divide="ignore"):
        good = (plx > 0) & np.isfinite(plx) & (plx_err >= 0) & (plx >= MIN_PARALLAX_SNR * plx_err)
        d_m = np.where(good, 1000.0 / plx * PC_M, np.nan)
        lnd_err = np.where(good, plx_err / plx, np.nan)
        radius = theta / 2 * d_m / R_SUN_M
        lnr_err = np.sqrt(lth_err**2 + lnd_err**2)
        lum = 4 * np.pi * (d_m * 100) ** 2 * fbol * 1e-7 / L_SUN_W
        lnl_err = np.sqrt(lnf_err**2 + 4 * lnd_err**2)
    out.update(radius_rsun=radius, radius_err_rsun=radius * lnr_err,
               lum_lsun=lum, lum_err_lsun=lum * lnl_err)
    return out
