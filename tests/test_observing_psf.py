"""Seeing profiles on pixels, apertures and saturation advice."""

import math
import warnings

import numpy as np
import pytest
from scipy import integrate

from stelltemp.errors import StelltempError
from stelltemp.observing import ccd, psf


def test_gaussian_peak_pixel_closed_form():
    # centred Gaussian: fraction = erf(p / (2 sqrt(2) sigma))^2 (exact integral)
    fwhm, p = 2.5, 0.6
    sigma = fwhm / (2 * math.sqrt(2 * math.log(2)))
    expected = math.erf(p / (2 * math.sqrt(2) * sigma)) ** 2
    assert psf.peak_fraction(fwhm, p, "gaussian") == pytest.approx(expected, rel=1e-14)
    # small pixel: fraction -> peak intensity x area = p^2 / (2 pi sigma^2)
    assert psf.peak_fraction(fwhm, 0.01, "gaussian") == pytest.approx(0.01**2 / (2 * math.pi * sigma**2), rel=1e-4)


def test_moffat_pixel_against_brute_force():
    fwhm, p, beta = 2.0, 0.9, 3.0
    alpha = psf.moffat_alpha(fwhm, beta)
    assert 2 * alpha * math.sqrt(2 ** (1 / beta) - 1) == pytest.approx(fwhm)  # FWHM definition (Moffat 1969)

    def prof(y, x):
        return (beta - 1) / (math.pi * alpha**2) * (1 + (x * x + y * y) / alpha**2) ** (-beta)

    for dx, dy in ((0.0, 0.0), (0.9, 0.0), (0.45, -1.3)):
        ref, _ = integrate.dblquad(prof, dx - p / 2, dx + p / 2, dy - p / 2, dy + p / 2, epsabs=1e-13)
        assert psf.pixel_fraction(fwhm, p, dx, dy, "moffat", beta) == pytest.approx(ref, rel=1e-8)


def test_fractions_over_a_pixel_grid_sum_to_enclosed_flux():
    fwhm, p = 2.5, 0.6
    n = 41  # 24.6 arcsec square
    xs = (np.arange(n) - n // 2) * p
    for profile in ("gaussian", "moffat"):
        total = sum(psf.pixel_fraction(fwhm, p, x, y, profile) for x in xs for y in xs)
        # all but the far wings: the Moffat (beta 4.765) wing beyond ~12 arcsec holds < 1e-4
        assert total == pytest.approx(1.0, abs=2e-4)


def test_moffat_tends_to_gaussian_for_large_beta():
    # Moffat -> Gaussian of the same FWHM as beta -> infinity (Trujillo et al. 2001)
    g = psf.peak_fraction(2.5, 0.6, "gaussian")
    assert psf.peak_fraction(2.5, 0.6, "moffat", beta=500.0) == pytest.approx(g, rel=2e-3)
    # at the same FWHM the turbulence profile puts more flux in the wings, so less in the peak pixel
    assert psf.MOFFAT_BETA_TURBULENCE == 4.765  # Trujillo et al. 2001, MNRAS 328, 977
    m = psf.peak_fraction(2.5, 0.6)
    assert m < g
    # central intensities: (beta - 1)/(pi alpha^2) against 1/(2 pi sigma^2), ratio for a tiny pixel
    a, sg = psf.moffat_alpha(2.5), psf.gaussian_sigma(2.5)
    ratio = ((psf.MOFFAT_BETA_TURBULENCE - 1) / (math.pi * a**2)) / (1 / (2 * math.pi * sg**2))
    assert psf.peak_fraction(2.5, 0.01) / psf.peak_fraction(2.5, 0.01, "gaussian") == pytest.approx(ratio, rel=1e-4)


def test_enclosed_fraction_and_apertures():
    fwhm = 2.0
    # 2-D Gaussian: enclosed 1 - exp(-r^2 / 2 sigma^2)
    sigma = psf.gaussian_sigma(fwhm)
    assert psf.enclosed_fraction(sigma, fwhm, "gaussian") == pytest.approx(1 - math.exp(-0.5))
    # Moffat: enclosed 1 - (1 + r^2/alpha^2)^(1-beta) (Moffat 1969)
    a = psf.moffat_alpha(fwhm)
    assert psf.enclosed_fraction(a, fwhm) == pytest.approx(1 - 2 ** (1 - psf.MOFFAT_BETA_TURBULENCE))
    assert psf.aperture_pixels(3.0, 0.6) == pytest.approx(math.pi * 25)
    assert psf.aperture_radius(psf.aperture_pixels(3.0, 0.6), 0.6) == pytest.approx(3.0)
    with pytest.raises(StelltempError):
        psf.peak_fraction(-1.0, 0.6)
    with pytest.raises(StelltempError):
        psf.peak_fraction(2.0, 0.6, "lorentz")


CAMERA = dict(full_well_e=100000.0, gain_e_per_adu=1.4, saturation_adu=65535.0, bias_adu=1000.0)


def test_time_to_limit_by_hand():
    rate, fwhm, pix = 2e5, 2.5, 0.6
    sky, dark = 1.0, 0.02
    t = psf.time_to_limit(rate, fwhm, pix, sky, dark, headroom=1.0, **CAMERA)
    f = psf.peak_fraction(fwhm, pix)
    per_s = rate * f + sky + dark
    expected = min(100000.0 / per_s, (65535.0 - 1000.0) * 1.4 / per_s)
    assert t == pytest.approx(expected)
    assert psf.time_to_limit(rate, fwhm, pix, sky, dark, headroom=0.8, **CAMERA) < t


def test_saturation_advice_split_reaches_same_snr():
    rate, ap_rate, fwhm, pix, sky, dark, rn, npix, nb = 3e5, 2.8e5, 2.5, 0.6, 1.0, 0.02, 9.0, 55.0, 700.0
    scint = ccd.scintillation_coefficient(0.4, 1.2, 850.0)
    t_single = float(ccd.exposure_for_snr(500.0, ap_rate, sky, dark, rn, npix, nb, 1.4, ccd.SIGMA_F_ADU, scint))
    with pytest.warns(psf.SaturationWarning, match="take"):
        adv = psf.saturation_advice(t_single, 500.0, rate, ap_rate, sky, dark, rn, npix, nb, fwhm, pix,
                                    scint_coeff=scint, **CAMERA)
    assert adv.status in ("saturated", "nonlinear") and adv.n_exposures > 1
    assert adv.exposure_s <= adv.limit_s * (1 + 1e-12)
    stacked = ccd.snr(adv.exposure_s, ap_rate, sky, dark, rn, npix, nb, 1.4, ccd.SIGMA_F_ADU, scint,
                      n_exposures=adv.n_exposures)
    assert stacked == pytest.approx(500.0, rel=1e-9)
    # one fewer frame would need a too-long exposure
    prev = ccd.stack_exposure_for_snr(500.0, adv.n_exposures - 1, ap_rate, sky, dark, rn, npix, nb, 1.4,
                                      ccd.SIGMA_F_ADU, scint)
    assert prev > adv.limit_s
    # read noise enters once per frame, so the split costs time
    assert adv.total_s >= t_single
    # a short exposure is fine and silent
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ok = psf.saturation_advice(0.01, None, rate, ap_rate, sky, dark, rn, npix, nb, fwhm, pix, **CAMERA)
    assert ok.status == "ok" and ok.message == "" and ok.n_exposures == 1


def test_binning_uses_binned_pixel_for_adc():
    rate, fwhm, pix = 1e5, 2.0, 0.3
    t1 = psf.time_to_limit(rate, fwhm, pix, 0.0, 0.0, binning=1, headroom=1.0, **CAMERA)
    t2 = psf.time_to_limit(rate, fwhm, pix, 0.0, 0.0, binning=2, headroom=1.0, **CAMERA)
    # a 2x2 binned pixel collects more of the core, so the ADC limit is reached sooner
    assert t2 < t1
    f2 = psf.peak_fraction(fwhm, 2 * pix)
    assert t2 == pytest.approx(min(1e5 / (rate * psf.peak_fraction(fwhm, pix)), 64535 * 1.4 / (rate * f2)))
