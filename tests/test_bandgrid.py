"""Tests of stelltemp.bandgrid, the fast kernel of blackbody band magnitudes.

Three independent references:

* a plain-numpy integration over the raw speclite curve on a 0.5 Å grid
  (``independent`` fixture, tests/conftest.py), reddened with dust_extinction's
  G23 ``extinguish`` directly;
* synphot (``SourceSpectrum(BlackBody1D)``, ``SpectralElement(Empirical1D)``,
  ``Observation``, ``effstim``);
* ``bandgrid.blackbody_band_terms`` itself (brute force) for the
  interpolation error of the Hermite tables.
"""

import warnings

import numpy as np
import pytest
from astropy import units as u
from dust_extinction.parameter_averages import G23
from synphot import Observation, SourceSpectrum, SpectralElement
from synphot.models import BlackBody1D, Empirical1D

from stelltemp import bandgrid as bg
from stelltemp import passbands as pb
from stelltemp import photometry as ph
from stelltemp.errors import StelltempError

KEYS = pb.builtin_keys()
TEMPS = np.array([2000.0, 3500.0, 5772.0, 12000.0, 50000.0])
EBVS = np.array([0.0, 0.5, 2.0])
TOL = 1e-4  # mag, the kernel's documented accuracy target


def _g23_transmission(grid, ebv):
    """10^(−0.4 A(λ)) for G23, R_V = 3.1 (Gordon et al. 2023, ApJ 950, 86), from dust_extinction."""
    law = G23(Rv=3.1)
    x = 1e4 / grid / u.micron
    return np.stack([np.ones_like(grid) if e == 0 else law.extinguish(x, Ebv=e) for e in ebv])


# ------------------------------------------------------------ (a) independent numpy integration

@pytest.mark.parametrize("key", KEYS)
def test_blackbody_mag_matches_independent_integration(key, independent, record_property):
    grid = independent.fine_grid(key)
    b = independent.planck_lambda(TEMPS[:, None], grid[None, :])  # (nT, nλ)
    tau = _g23_transmission(grid, EBVS)  # (nE, nλ)
    ref = independent.reference_mag(key, b[:, None, :] * tau[None, :, :], grid)  # (nT, nE)
    ours = bg.blackbody_mag(key, TEMPS[:, None], EBVS[None, :])
    diff = np.abs(ours - ref)
    print(f"{key}: max |kernel − numpy| = {diff.max():.2e} mag")
    record_property("max_abs_residual_mag", float(diff.max()))
    assert diff.max() < TOL, f"{key}: max residual {diff.max():.2e} mag"


# ------------------------------------------------------------ (b) synphot

SYNPHOT_KEYS = ["U_JC", "B_JC", "V_JC", "Ic_JC", "u_SDSS", "Ks_2MASS", "BP_GDR3", "z_PS1"]
SYNPHOT_TEMPS = (2000.0, 6000.0, 20000.0, 50000.0)
SYNPHOT_EBVS = (0.0, 0.5, 2.0)
# Synphot's ABmag is −2.5 log10 F_ν − 48.60 (Oke & Gunn 1983, ApJ 266, 713); stelltemp's AB zero
# point is 3631 Jy, which is the same system rounded: the two differ by this constant (−6.5e-5 mag).
AB_4860_MINUS_3631JY = -2.5 * np.log10(3631e-23) - 48.60


@pytest.fixture(scope="module")
def synphot_vega(independent):
    w, f = independent.raw_vega()
    return SourceSpectrum(Empirical1D, points=w * u.AA, lookup_table=f * u.erg / u.s / u.cm**2 / u.AA)


def _synphot_mags(key, temperatures, ebvs, vega, independent):
    """Synphot magnitudes of unit-solid-angle blackbodies, shape (len(temperatures), len(ebvs))."""
    grid = independent.fine_grid(key)
    wave = grid * u.AA
    # synphot counts photons, so it gets the photon response: R/λ for the Bessell energy curves
    # (Bessell & Murphy 2012, PASP 124, 140), sampled on the 0.5 Å grid.
    band = SpectralElement(Empirical1D, points=wave, lookup_table=independent.photon_response(key, grid))
    # G23 dust as a tabulated transmission (also at E = 0, where it is 1: this gives the product
    # spectrum a sample set covering the band, as BlackBody1D's own default set stops at 11 λ_max)
    dust = [SpectralElement(Empirical1D, points=wave, lookup_table=tr) for tr in _g23_transmission(grid, ebvs)]
    row = independent.raw_curve(key)[2]
    out = np.empty((len(temperatures), len(ebvs)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # synphot's notes about sample sets
        for i, t in enumerate(temperatures):
            source = SourceSpectrum(BlackBody1D, temperature=t)  # PHOTLAM per sr: unit solid angle
            for j, d in enumerate(dust):
                obs = Observation(source * d, band, binset=wave)
                if row["magsys"] == "Vega":
                    out[i, j] = obs.effstim("vegamag", vegaspec=vega, wavelengths=wave).value + float(row["vega_mag"])
                else:
                    out[i, j] = obs.effstim(u.ABmag, wavelengths=wave).value - AB_4860_MINUS_3631JY
    return out


@pytest.mark.parametrize("key", SYNPHOT_KEYS)
def test_blackbody_mag_matches_synphot(key, synphot_vega, independent, record_property):
    theirs = _synphot_mags(key, SYNPHOT_TEMPS, SYNPHOT_EBVS, synphot_vega, independent)
    ours = bg.blackbody_mag(key, np.array(SYNPHOT_TEMPS)[:, None], np.array(SYNPHOT_EBVS)[None, :])
    worst = np.abs(ours - theirs).max()
    print(f"{key}: max |kernel − synphot| = {worst:.2e} mag")
    record_property("max_abs_residual_mag", float(worst))
    assert worst < TOL, f"{key}: max residual {worst:.2e} mag"


def test_colours_match_synphot(synphot_vega, independent):
    t, e = (2500.0, 9000.0, 40000.0), (0.0, 2.0)
    for blue, red in (("B_JC", "V_JC"), ("g_SDSS", "Ks_2MASS")):
        theirs = (_synphot_mags(blue, t, e, synphot_vega, independent)
                  - _synphot_mags(red, t, e, synphot_vega, independent))
        ours, _, _ = bg.colour_table(blue, red).evaluate(np.log(t)[:, None], np.array(e)[None, :])
        assert np.abs(ours - theirs).max() < TOL, (blue, red)


# ------------------------------------------------------------ Hermite interpolation error

def test_hermite_interpolation_error_off_grid_all_bands(record_property):
    # Brute force (blackbody_band_terms) at random (T, E) off the nodes, over the whole grid.
    rng = np.random.default_rng(20260401)
    t = np.exp(rng.uniform(np.log(bg.T_MIN), np.log(bg.T_MAX), 40))
    e = rng.uniform(bg.E_MIN, bg.E_MAX, 16)
    worst, worst_key = 0.0, None
    worst_dlnt = worst_de = 0.0
    for key in KEYS:
        m, m_t, m_e, _ = bg.blackbody_band_terms(key, t, e)
        value, d_lnt, d_e = bg.band_table(key).evaluate(np.log(t)[:, None], e[None, :])
        err = np.abs(value - m).max()
        if err > worst:
            worst, worst_key = err, key
        worst_dlnt = max(worst_dlnt, np.abs(d_lnt - m_t).max())
        worst_de = max(worst_de, np.abs(d_e - m_e).max())
    print(f"Hermite table: max |error| {worst:.2e} mag ({worst_key}); "
          f"∂/∂lnT {worst_dlnt:.2e} mag; ∂/∂E {worst_de:.2e} mag per unit E(B−V)")
    record_property("hermite_max_error_mag", float(worst))
    assert worst < 1e-4, f"max interpolation error {worst:.2e} mag in {worst_key}"
    assert worst_dlnt < 1e-2 and worst_de < 1e-3


def test_tables_reproduce_nodes_exactly():
    table = bg.band_table("V_JC")
    lnt, e = table.nodes()
    idx_t, idx_e = np.array([0, 17, 240]), np.array([0, 5, 65])  # includes both ends of both axes
    m, m_t, m_e, _ = bg.blackbody_band_terms("V_JC", np.exp(lnt[idx_t]), e[idx_e])
    value, d_lnt, d_e = table.evaluate(lnt[idx_t][:, None], e[idx_e][None, :])
    np.testing.assert_allclose(value, m, atol=1e-12)
    np.testing.assert_allclose(d_lnt, m_t, atol=1e-10)
    np.testing.assert_allclose(d_e, m_e, atol=1e-10)


def test_band_terms_derivatives_match_finite_differences():
    t, e, h = 7300.0, 0.8, 1e-4
    m, m_t, m_e, m_te = (x[0, 0] for x in bg.blackbody_band_terms("BP_GDR3", t, e))
    f = lambda tt, ee: bg.blackbody_band_terms("BP_GDR3", tt, ee)[0][0, 0]  # noqa: E731
    assert m_t == pytest.approx((f(t * np.exp(h), e) - f(t * np.exp(-h), e)) / (2 * h), rel=1e-6)
    assert m_e == pytest.approx((f(t, e + h) - f(t, e - h)) / (2 * h), rel=1e-6)
    cross = (f(t * np.exp(h), e + h) - f(t * np.exp(h), e - h) - f(t * np.exp(-h), e + h)
             + f(t * np.exp(-h), e - h)) / (4 * h * h)
    assert m_te == pytest.approx(cross, rel=1e-4, abs=1e-7)


# ------------------------------------------------------------ design checks

def test_band_integrated_excess_depends_on_the_spectrum(record_property):
    # Project design check (issue requirement): for the same nominal E(B−V) = 1 (G23, R_V = 3.1),
    # the B−V excess of a 3,500 K and a 30,000 K blackbody differ by about 0.1 mag, so reddening
    # must be applied to the spectrum, not as a constant per-band coefficient.
    excess = {}
    for t in (3500.0, 30000.0):
        c0 = bg.blackbody_mag("B_JC", t, 0.0) - bg.blackbody_mag("V_JC", t, 0.0)
        c1 = bg.blackbody_mag("B_JC", t, 1.0) - bg.blackbody_mag("V_JC", t, 1.0)
        excess[t] = float(c1 - c0)
    diff = excess[30000.0] - excess[3500.0]
    print(f"B-V excess for E(B-V)=1: 3500 K {excess[3500.0]:.3f}, 30000 K {excess[30000.0]:.3f}, "
          f"difference {diff:.3f} mag")
    record_property("bv_excess_difference_mag", diff)
    assert 0.07 < diff < 0.14
    assert excess[3500.0] < excess[30000.0] < 1.0


def test_colour_table_is_difference_of_band_tables():
    t = np.array([2500.0, 6100.0, 33000.0])
    e = np.array([0.0, 0.7, 3.3])
    colour, _, _ = bg.colour_table("V_JC", "Ks_2MASS").evaluate(np.log(t), e)
    np.testing.assert_allclose(colour, bg.blackbody_mag("V_JC", t, e) - bg.blackbody_mag("Ks_2MASS", t, e),
                               atol=1e-12)


def test_angular_diameter_scaling(independent):
    # A uniform disc of angular diameter θ subtends π θ²/4 sr: F_λ = B_λ π θ²/4 (common practice).
    theta = 2 * 6.957e8 / 1.495978707e11  # the nominal solar disc at 1 au (IAU 2015 B3; IAU 2012 B2)
    m = float(bg.blackbody_mag("V_JC", 5772.0, 0.0, angular_diameter_rad=theta))
    grid = independent.fine_grid("V_JC")
    ref = independent.reference_mag("V_JC", independent.planck_lambda(5772.0, grid) * np.pi * theta**2 / 4, grid)
    assert m == pytest.approx(float(ref), abs=TOL)
    assert m - float(bg.blackbody_mag("V_JC", 5772.0)) == pytest.approx(-2.5 * np.log10(np.pi * theta**2 / 4))


def test_constant_coefficient():
    k_v = bg.constant_coefficient("V_JC")
    h = 1e-3
    fd = (bg.blackbody_mag("V_JC", 10000.0, h) - bg.blackbody_mag("V_JC", 10000.0, -h)) / (2 * h)
    assert k_v == pytest.approx(float(fd), rel=1e-6)
    # A_V / E(B−V) through the V band is close to R_V = 3.1 for a hot star (common practice)
    assert k_v == pytest.approx(3.1, abs=0.15)
    with pytest.raises(StelltempError, match="reference temperature"):
        bg.constant_coefficient("V_JC", reference_temperature=500.0)


def test_inside_and_out_of_grid_values():
    assert bool(bg.inside(5000.0, 0.0)) and bool(bg.inside(bg.T_MIN, bg.E_MAX))
    np.testing.assert_array_equal(bg.inside([500.0, 5000.0, 2e5, 5000.0], [0.0, -0.6, 0.0, 6.1]),
                                  [False, False, False, False])
    m = bg.blackbody_mag("V_JC", np.array([np.nan, 5000.0]), 0.0)
    assert np.isnan(m[0]) and np.isfinite(m[1])


def test_bad_law_and_rv_are_refused():
    with pytest.raises(StelltempError, match="unknown extinction law"):
        bg.band_table("V_JC", law="nope")
    with pytest.raises(StelltempError, match="R_V"):
        bg.blackbody_mag("V_JC", 5000.0, 0.1, rv=9.0)


def test_other_law_and_rv_give_other_tables():
    a = bg.blackbody_mag("B_JC", 6000.0, 1.0)
    b = bg.blackbody_mag("B_JC", 6000.0, 1.0, rv=5.0)
    c = bg.blackbody_mag("B_JC", 6000.0, 1.0, law="F99")
    assert abs(a - b) > 0.5 and abs(a - c) > 1e-3
    assert float(bg.blackbody_mag("B_JC", 6000.0, 0.0, rv=5.0)) == pytest.approx(
        float(bg.blackbody_mag("B_JC", 6000.0, 0.0)), abs=1e-9)


def test_user_passband_tables(tmp_path, independent):
    # Two user curves under the same key must not share a cached table.
    a, b = tmp_path / "a.txt", tmp_path / "b.txt"
    a.write_text("# unit: nm\n500 0\n510 1\n520 1\n530 0\n")
    b.write_text("# unit: nm\n800 0\n810 1\n820 1\n830 0\n")
    pa = pb.load_passband_file(a, key="mine")
    pbb = pb.load_passband_file(b, key="mine")
    ma = float(bg.blackbody_mag(pa, 4000.0, 0.0))
    mb = float(bg.blackbody_mag(pbb, 4000.0, 0.0))
    assert abs(ma - mb) > 0.5  # a 4000 K body is much brighter at 815 nm than at 515 nm in AB
    # and the user table agrees with synthetic photometry of the spectrum itself
    wave = np.arange(4900.0, 5400.0, 0.25)
    direct = float(ph.synthetic_mag(wave, independent.planck_lambda(4000.0, wave), pa))
    assert ma == pytest.approx(direct, abs=TOL)
