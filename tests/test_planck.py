"""Tests of stelltemp.planck: Planck radiance, Wien peaks, Stefan–Boltzmann, temperature parsing."""

import warnings

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from astropy.modeling.physical_models import BlackBody

from stelltemp import planck
from stelltemp.errors import StelltempError

# The whole physical range the module promises: 1 K–1e6 K, 10 nm–10 cm.
TEMPS = np.geomspace(1.0, 1e6, 49)
WAVES_AA = np.geomspace(100.0, 1e9, 301)  # 10 nm .. 10 cm in Å

FLAM_CGS = u.erg / u.s / u.cm**2 / u.AA / u.sr
FNU_CGS = u.erg / u.s / u.cm**2 / u.Hz / u.sr


# ------------------------------------------------------------ Planck radiance

def _astropy_table(scale_unit, spectral):
    """astropy's BlackBody evaluated on TEMPS × spectral, overflow warnings silenced."""
    out = np.empty((TEMPS.size, spectral.size))
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        for i, t in enumerate(TEMPS):
            bb = BlackBody(temperature=t * u.K, scale=1.0 * scale_unit)
            out[i] = bb(spectral).to_value(scale_unit)
    return out


def test_b_lambda_matches_astropy_blackbody_over_full_range(record_property):
    # Source: astropy.modeling.physical_models.BlackBody (Planck 1901), CODATA 2018 constants.
    ref = _astropy_table(FLAM_CGS, WAVES_AA * u.AA)
    ours = planck.planck_lambda_cgs(TEMPS[:, None], WAVES_AA[None, :])
    normal = np.isfinite(ref) & (ref > 1e-300)
    assert normal.sum() > 5000  # most of the plane is comparable
    rel = np.abs(ours[normal] / ref[normal] - 1)
    record_property("max_relative_difference", float(rel.max()))
    assert rel.max() < 1e-10, f"max relative difference {rel.max():.2e}"
    assert np.all(np.isfinite(ours)) and np.all(ours >= 0)
    # Where astropy's exp(x) overflows (x > 709) it returns 0; ours keeps the Wien
    # limit B_λ = 2hc²/λ⁵ · e^(−x) (Wien 1896), checked in log space where it is > 0.
    tail = ~normal & (ours > 1e-290)
    t2, w2 = np.broadcast_arrays(TEMPS[:, None], WAVES_AA[None, :])
    lam = w2[tail] * 1e-8
    x = const.h.cgs.value * const.c.cgs.value / (lam * const.k_B.cgs.value * t2[tail])
    log_wien = np.log(2 * const.h.cgs.value * const.c.cgs.value**2 / lam**5 * 1e-8) - x
    assert tail.any() and np.all(x > 50)
    np.testing.assert_allclose(np.log(ours[tail]), log_wien, rtol=1e-12)


def test_b_nu_matches_astropy_blackbody_over_full_range(record_property):
    # Source: astropy.modeling.physical_models.BlackBody (Planck 1901).
    freq = (const.c.cgs.value / (WAVES_AA * 1e-8))[::-1]
    ref = _astropy_table(FNU_CGS, freq * u.Hz)
    ours = planck.planck_nu_cgs(TEMPS[:, None], freq[None, :])
    normal = np.isfinite(ref) & (ref > 1e-300)
    assert normal.sum() > 5000
    rel = np.abs(ours[normal] / ref[normal] - 1)
    record_property("max_relative_difference", float(rel.max()))
    assert rel.max() < 1e-10, f"max relative difference {rel.max():.2e}"
    assert np.all(np.isfinite(ours)) and np.all(ours >= 0)


def test_no_floating_point_warnings_anywhere_in_range():
    # Module promise: no overflow/divide/invalid from 1 K to 1e6 K and 10 nm to 10 cm.
    # Underflow to 0 on the far Wien side is the correct answer, so it is not trapped.
    freq = const.c.cgs.value / (WAVES_AA * 1e-8)
    t2, w2 = TEMPS[:, None], WAVES_AA[None, :]
    with warnings.catch_warnings(), np.errstate(over="raise", divide="raise", invalid="raise"):
        warnings.simplefilter("error")
        results = [
            planck.planck_lambda_cgs(t2, w2),
            planck.planck_nu_cgs(t2, freq[None, :]),
            planck.photon_radiance_lambda_cgs(t2, w2),
            planck.dlnb_dlnt(t2, w2),
            planck.radiance_lambda(TEMPS[:, None] * u.K, WAVES_AA[None, :] * u.AA).value,
            planck.radiance_nu(TEMPS[:, None] * u.K, freq[None, :] * u.Hz).value,
            planck.photon_radiance_lambda(TEMPS[:, None] * u.K, WAVES_AA[None, :] * u.AA).value,
        ]
    for r in results:
        assert np.all(np.isfinite(r)) and np.all(r >= 0)


def test_scalar_and_broadcast_inputs():
    scalar = planck.planck_lambda_cgs(5000.0, 5000.0)
    assert np.ndim(scalar) == 0
    grid = planck.planck_lambda_cgs([[3000.0], [6000.0]], [4000.0, 5000.0, 6000.0])
    assert grid.shape == (2, 3)
    assert grid[1, 1] == pytest.approx(planck.planck_lambda_cgs(6000.0, 5000.0), rel=1e-15)


def test_b_lambda_and_b_nu_are_the_same_energy():
    # B_λ |dλ| = B_ν |dν|  ⇒  B_λ = B_ν c / λ² (definition of spectral densities)
    w = np.geomspace(1e3, 1e6, 50)
    nu = const.c.cgs.value / (w * 1e-8)
    b_nu = planck.planck_nu_cgs(6000.0, nu)
    b_lam = planck.planck_lambda_cgs(6000.0, w)
    np.testing.assert_allclose(b_lam, b_nu * const.c.cgs.value / (w * 1e-8) ** 2 * 1e-8, rtol=1e-12)


def test_photon_radiance_is_energy_over_photon_energy():
    w = np.geomspace(1e3, 1e6, 50)
    e_photon = const.h.cgs.value * const.c.cgs.value / (w * 1e-8)
    np.testing.assert_allclose(
        planck.photon_radiance_lambda_cgs(8000.0, w), planck.planck_lambda_cgs(8000.0, w) / e_photon, rtol=1e-13)


def test_quantity_edge_units():
    q = planck.radiance_lambda(5772 * u.K, 500 * u.nm)
    assert q.unit.is_equivalent(u.W / u.m**2 / u.nm / u.sr)
    assert q.to_value(FLAM_CGS) == pytest.approx(planck.planck_lambda_cgs(5772.0, 5000.0), rel=1e-12)
    # a frequency Quantity given as a wavelength is converted spectrally
    qn = planck.radiance_nu(5772 * u.K, 500 * u.nm)
    nu = const.c.cgs.value / 500e-7
    assert qn.to_value(FNU_CGS) == pytest.approx(planck.planck_nu_cgs(5772.0, nu), rel=1e-12)


def test_dlnb_dlnt_matches_finite_difference():
    w = np.array([1e3, 5e3, 2e4, 1e6])
    t = 5000.0
    h = 1e-5
    fd = (np.log(planck.planck_lambda_cgs(t * np.exp(h), w)) - np.log(planck.planck_lambda_cgs(t * np.exp(-h), w))) / (2 * h)
    np.testing.assert_allclose(planck.dlnb_dlnt(t, w), fd, rtol=1e-8)
    # Rayleigh–Jeans limit: B ∝ T, so d ln B / d ln T → 1 (common practice)
    assert planck.dlnb_dlnt(1e5, 1e9) == pytest.approx(1.0, abs=1e-6)


def test_bad_wavelength_rejected():
    for bad in (-5 * u.nm, 0 * u.nm, np.nan * u.nm):
        with pytest.raises(StelltempError, match="wavelength"):
            planck.radiance_lambda(5000, bad)


@pytest.mark.parametrize("freq", [-5 * u.Hz, 0 * u.Hz, np.nan * u.Hz])
def test_bad_frequency_rejected(freq):
    with pytest.raises(StelltempError, match="frequenc"):
        planck.radiance_nu(5000, freq)


# ------------------------------------------------------------ constants, Wien

def test_stefan_boltzmann_constant_codata_2018():
    # CODATA 2018 (Tiesinga et al. 2021, Rev. Mod. Phys. 93, 025010): σ = 5.670374419e-8 W m⁻² K⁻⁴.
    # Ours is derived as 2π⁵k⁴/(15c²h³) from h, c, k, not copied.
    sigma = planck.sigma_sb().to_value(u.W / u.m**2 / u.K**4)
    assert sigma == pytest.approx(5.670374419e-8, rel=2e-10)


def test_wien_constants_codata_2018():
    # CODATA 2018: Wien wavelength displacement constant b = 2.897771955e-3 m K,
    # Wien frequency displacement constant b' = 5.878925757e10 Hz K⁻¹.
    # Ours come from the roots of the transcendental equations.
    assert planck.wien_b_lambda() == pytest.approx(2.897771955e-3, rel=2e-10)
    assert planck.wien_b_nu() == pytest.approx(5.878925757e10, rel=2e-10)
    # roots themselves: x₅ = 4.965114231..., x₃ = 2.821439372... (from memory), x₄ = 3.920690395 (from memory)
    assert planck.wien_root(5) == pytest.approx(4.965114231744276, rel=1e-12)
    assert planck.wien_root(3) == pytest.approx(2.821439372122079, rel=1e-12)
    assert planck.wien_root(4) == pytest.approx(3.920690394872886, rel=1e-12)
    for p in (3, 4, 5):
        x = planck.wien_root(p)
        assert p * -np.expm1(-x) - x == pytest.approx(0.0, abs=1e-14)


@pytest.mark.parametrize("temperature", [300.0, 5772.0, 40000.0])
def test_three_wien_peaks_differ_and_are_true_maxima(temperature):
    # Rybicki & Lightman 1979, Radiative Processes in Astrophysics, §1.5:
    # the peak of B_λ, of the photon rate per unit λ and of B_ν are three different places.
    lam_e = planck.peak_wavelength(temperature).to_value(u.AA)
    lam_p = planck.peak_wavelength_photons(temperature).to_value(u.AA)
    nu_max = planck.peak_frequency(temperature).to_value(u.Hz)
    lam_nu = const.c.to_value(u.AA / u.s) / nu_max
    assert lam_e < lam_p < lam_nu
    assert lam_p / lam_e == pytest.approx(planck.wien_root(5) / planck.wien_root(4), rel=1e-12)
    assert lam_nu / lam_e > 1.7  # the B_ν peak lies 76 % redward of the B_λ peak

    # dense numerical maximisation, ±3 % around each peak on 300,001 points
    def argmax_on(grid, values):
        i = int(np.argmax(values))
        assert 0 < i < grid.size - 1, "maximum at the edge of the search window"
        return grid[i], grid[1] - grid[0]

    grid = np.linspace(0.97 * lam_e, 1.03 * lam_e, 300001)
    found, step = argmax_on(grid, planck.planck_lambda_cgs(temperature, grid))
    assert abs(found - lam_e) <= 2 * step

    grid = np.linspace(0.97 * lam_p, 1.03 * lam_p, 300001)
    found, step = argmax_on(grid, planck.photon_radiance_lambda_cgs(temperature, grid))
    assert abs(found - lam_p) <= 2 * step

    grid = np.linspace(0.97 * nu_max, 1.03 * nu_max, 300001)
    found, step = argmax_on(grid, planck.planck_nu_cgs(temperature, grid))
    assert abs(found - nu_max) <= 2 * step

    # and the B_λ peak is *not* the maximum of the other two curves
    assert planck.photon_radiance_lambda_cgs(temperature, lam_p) > planck.photon_radiance_lambda_cgs(temperature, lam_e)
    nu_e = const.c.to_value(u.AA / u.s) / lam_e
    assert planck.planck_nu_cgs(temperature, nu_max) > planck.planck_nu_cgs(temperature, nu_e)


def test_peaks_facts_of_the_trade():
    # common practice: a body near human skin temperature (310 K) peaks near 9.3–9.4 µm
    assert 9.3 <= planck.peak_wavelength(310 * u.K).to_value(u.um) <= 9.4
    # common practice: a Sun-like 5800 K surface peaks near 500 nm
    assert planck.peak_wavelength(5800 * u.K).to_value(u.nm) == pytest.approx(500, abs=2)
    # common practice: the 2.725 K cosmic background peaks near 1.06 mm in B_λ
    assert planck.peak_wavelength(2.725 * u.K).to_value(u.mm) == pytest.approx(1.06, abs=0.01)
    # common practice: ... and near 160 GHz in B_ν
    assert planck.peak_frequency(2.725 * u.K).to_value(u.GHz) == pytest.approx(160.2, abs=0.5)


# ------------------------------------------------------------ Stefan–Boltzmann

def test_nominal_solar_luminosity_iau_2015_b3():
    # IAU 2015 Resolution B3 (Prša et al. 2016, AJ 152, 41): nominal R = 6.957e8 m,
    # Teff = 5772 K, L = 3.828e26 W; 4πR²σT⁴ reproduces L to within 0.05 %.
    lum = planck.luminosity(6.957e8 * u.m, 5772 * u.K)
    assert lum.to_value(u.W) == pytest.approx(3.828e26, rel=5e-4)


def test_radius_and_temperature_inverses():
    r = 6.957e8 * u.m
    for t in (3000.0, 5772.0, 25000.0):
        lum = planck.luminosity(r, t)
        assert planck.radius_from_luminosity(lum, t).to_value(u.m) == pytest.approx(6.957e8, rel=1e-12)
        flux = planck.surface_flux(t)
        assert planck.temperature_from_flux(flux).to_value(u.K) == pytest.approx(t, rel=1e-12)
    # radius in solar radii is converted
    lum_rsun = planck.luminosity(2 * u.R_sun, 5772)
    assert lum_rsun.to_value(u.W) == pytest.approx(4 * planck.luminosity(const.R_sun, 5772).to_value(u.W), rel=1e-12)


def test_surface_flux_scales_as_t4():
    f1, f2 = planck.surface_flux(5000), planck.surface_flux(10000)
    assert (f2 / f1).to_value(u.one) == pytest.approx(16.0, rel=1e-14)


@pytest.mark.parametrize("func,arg", [
    (lambda x: planck.luminosity(x, 5000), -1 * u.m),
    (lambda x: planck.luminosity(x, 5000), np.nan * u.m),
    (lambda x: planck.radius_from_luminosity(x, 5000), 0 * u.W),
    (lambda x: planck.temperature_from_flux(x), -3 * u.W / u.m**2),
])
def test_stefan_boltzmann_bad_values(func, arg):
    with pytest.raises(StelltempError):
        func(arg)


@pytest.mark.parametrize("func,arg", [
    (lambda x: planck.luminosity(x, 5000), 5 * u.s),
    (lambda x: planck.radius_from_luminosity(x, 5000), 5 * u.m),
    (lambda x: planck.temperature_from_flux(x), 5 * u.K),
])
def test_stefan_boltzmann_wrong_units_give_stelltemp_error(func, arg):
    with pytest.raises(StelltempError):
        func(arg)


# ------------------------------------------------------------ temperature parsing

def test_temperatures_in_kelvin_celsius_fahrenheit():
    t_k = 5772.0
    t_c = t_k - 273.15
    t_f = t_c * 9 / 5 + 32
    for q in (t_k * u.K, t_c * u.deg_C, t_f * u.imperial.deg_F, t_k):
        assert float(planck.as_kelvin(q)) == pytest.approx(t_k, rel=1e-12)
        assert planck.peak_wavelength(q).to_value(u.nm) == pytest.approx(2.897771955e6 / t_k, rel=1e-9)
    # body temperature: 37 °C = 98.6 °F = 310.15 K (common practice)
    assert float(planck.as_kelvin(98.6 * u.imperial.deg_F)) == pytest.approx(310.15, abs=1e-9)
    np.testing.assert_allclose(planck.as_kelvin([0, 100] * u.deg_C), [273.15, 373.15])


@pytest.mark.parametrize("value,shown", [
    (0.0, "0"),
    (-5.0, "-5"),
    (np.nan, "nan"),
    (np.inf, "inf"),
    (-300 * u.deg_C, "-26.85"),    # −300 °C is −26.85 K
    (-500 * u.imperial.deg_F, "-22.4"),  # −500 °F is −22.4 K
])
def test_unphysical_temperatures_raise_naming_the_value(value, shown):
    with pytest.raises(StelltempError, match="temperature") as err:
        planck.as_kelvin(value)
    assert shown in str(err.value)
    assert "\n" not in str(err.value)


def test_non_temperatures_rejected():
    for bad in (5 * u.m, "hot", [1.0, "x"]):
        with pytest.raises(StelltempError, match="not a temperature"):
            planck.as_kelvin(bad)


def test_bad_temperature_in_array_message_is_plain():
    with pytest.raises(StelltempError) as err:
        planck.as_kelvin([5000.0, -1.0])
    assert "np.float64" not in str(err.value) and "-1" in str(err.value)


def test_none_is_not_a_temperature():
    with pytest.raises(StelltempError, match="not a temperature"):
        planck.as_kelvin(None)


def test_functions_reject_bad_temperatures():
    for f in (planck.surface_flux, planck.peak_wavelength, planck.peak_frequency,
              lambda t: planck.radiance_lambda(t, 500 * u.nm)):
        with pytest.raises(StelltempError):
            f(-1 * u.K)
