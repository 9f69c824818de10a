"""Tests of stelltemp.photometry and stelltemp.reference: synthetic magnitudes in Vega, AB and ST."""

import warnings

import numpy as np
import pytest

from stelltemp import passbands as pb
from stelltemp import photometry as ph
from stelltemp import reference as ref
from stelltemp.errors import StelltempError

KEYS = pb.builtin_keys()
VEGA_KEYS = [k for k in KEYS if pb.get_passband(k).magsys == "Vega"]

# A generic wavelength grid, deliberately unrelated to any passband's nodes: 2500 Å – 3 µm.
GRID = np.geomspace(2500.0, 30000.0, 20000)


def _flat_fnu_ab(wave):
    """F_λ of a flat F_ν = 3631 Jy source, written out here, not taken from stelltemp."""
    return 3631e-23 * 2.99792458e18 / wave**2


# ------------------------------------------------------------ zero points

@pytest.mark.parametrize("key", VEGA_KEYS)
def test_vega_has_its_adopted_magnitude(key):
    # Registry zero points: Bessell, Castelli & Plez 1998, A&A 333, 231 (UBVRI); Cohen, Wheaton &
    # Megeath 2003, AJ 126, 1090 (2MASS); Riello et al. 2021, A&A 649, A3 (Gaia) — see passbands.ecsv.
    w, f = ref.vega_spectrum()
    assert ph.synthetic_mag(w, f, key) == pytest.approx(pb.get_passband(key).vega_mag, abs=1e-12)


def test_vega_spectrum_is_calspec_alpha_lyr(independent):
    # Bohlin 2014, AJ 147, 127: CALSPEC alpha_lyr_stis_011, 900 Å to 300 µm, F_λ(5556 Å) ≈ 3.44e-9
    # erg s⁻¹ cm⁻² Å⁻¹ (from memory; Hayes 1985 gives 3.44e-9 at 5556 Å)
    w, f = ref.vega_spectrum()
    rw, rf = independent.raw_vega()
    np.testing.assert_array_equal(w, rw)
    np.testing.assert_array_equal(f, rf)
    assert w[0] < 1000 and w[-1] > 2.9e6
    assert np.interp(5556.0, w, f) == pytest.approx(3.44e-9, rel=0.02)
    with pytest.raises(ValueError):
        w[0] = 1.0  # cached arrays are read-only


def test_ab_and_st_reference_flux_densities():
    # AB: 3631 Jy (Oke & Gunn 1983, ApJ 266, 713); ST: −2.5 log10 F_λ − 21.10 (STMAG, common practice)
    assert ref.AB_FNU_CGS == 3631e-23
    np.testing.assert_allclose(ref.ab_flam(GRID), _flat_fnu_ab(GRID), rtol=1e-12)
    assert ref.ST_FLAM_CGS == pytest.approx(3.6308e-9, rel=1e-4)
    # m_AB = −2.5 log10 F_ν − 48.60: the 3631 Jy source has m_AB = −6.5e-5, i.e. 0 to 1e-4 (common practice)
    assert -2.5 * np.log10(3631e-23) - 48.60 == pytest.approx(0.0, abs=1e-4)


def _flat_residuals(source, magsys):
    return {str(k): float(ph.synthetic_mag(GRID, source, k, magsys)) for k in KEYS}


def test_flat_3631_jy_source_has_ab_magnitude_zero_in_every_band(record_property):
    # AB definition (Oke & Gunn 1983, ApJ 266, 713). Before commit 9a10253 the AB/ST references were
    # integrated on the passband nodes only and this was off by up to 8.6e-4 mag (Rc_JC).
    res = _flat_residuals(_flat_fnu_ab(GRID), "AB")
    worst = max(res, key=lambda k: abs(res[k]))
    print("AB magnitude of a flat 3631 Jy source:", {k: f"{v:+.2e}" for k, v in res.items()})
    record_property("flat_ab_max_abs_mag", abs(res[worst]))
    assert abs(res[worst]) < 1e-6, f"{worst}: {res[worst]:+.2e} mag"


def test_flat_st_source_has_st_magnitude_zero_in_every_band(record_property):
    res = _flat_residuals(np.full_like(GRID, 10 ** (-0.4 * 21.10)), "ST")
    worst = max(res, key=lambda k: abs(res[k]))
    print("ST magnitude of a flat ST source:", {k: f"{v:+.2e}" for k, v in res.items()})
    record_property("flat_st_max_abs_mag", abs(res[worst]))
    assert abs(res[worst]) < 1e-6, f"{worst}: {res[worst]:+.2e} mag"


def test_ab_minus_st_for_flat_fnu_source_follows_pivot():
    # For F_ν = 3631 Jy: m_ST = −2.5 log10(F_ν c / λ_p²) − 21.10 exactly (Tokunaga & Vacca 2005,
    # PASP 117, 421), with λ_p from Passband.pivot_wavelength.
    for key in KEYS:
        lp = pb.get_passband(key).pivot_wavelength.value
        expected = -2.5 * np.log10(3631e-23 * 2.99792458e18 / lp**2) - 21.10
        assert ph.synthetic_mag(GRID, _flat_fnu_ab(GRID), key, "ST") == pytest.approx(expected, abs=1e-5)


def test_vega_magnitude_in_an_ab_band_is_defined_or_refused():
    w, f = ref.vega_spectrum()
    try:
        m = ph.synthetic_mag(w, f, "g_SDSS", magsys="Vega")
    except StelltempError:
        return
    assert np.isfinite(m)


def test_unknown_magnitude_system():
    with pytest.raises(StelltempError, match="magnitude system"):
        ph.synthetic_mag(GRID, _flat_fnu_ab(GRID), "V_JC", magsys="Johnson")


# ------------------------------------------------------------ arbitrary spectra

@pytest.mark.parametrize("key", KEYS)
def test_blackbody_spectrum_matches_independent_integration(key, independent):
    # Independent reference: speclite curve read with astropy Table, 0.5 Å trapezoid, raw CALSPEC
    # Vega (Bohlin 2014, AJ 147, 127) or 3631 Jy (Oke & Gunn 1983) — see conftest.py.
    wave = np.arange(2500.0, 30000.0, 1.0)
    grid = independent.fine_grid(key)
    for t in (3000.0, 9000.0):
        ours = ph.synthetic_mag(wave, independent.planck_lambda(t, wave), key)
        theirs = independent.reference_mag(key, independent.planck_lambda(t, grid), grid)
        assert ours == pytest.approx(theirs, abs=1e-4)


def test_magnitudes_scale_and_stack():
    wave = np.arange(2500.0, 30000.0, 2.0)
    flam = np.stack([1e-12 * (wave / 5000.0) ** -2, 1e-10 * (wave / 5000.0) ** -2, 1e-13 * np.ones_like(wave)])
    m = ph.synthetic_mag(wave, flam, "V_JC")
    assert m.shape == (3,)
    assert m[0] - m[1] == pytest.approx(5.0, abs=1e-12)  # 100× the flux is 5 mag brighter (Pogson)
    assert m[2] == pytest.approx(ph.synthetic_mag(wave, flam[2], "V_JC"), abs=1e-12)
    colour = ph.synthetic_colour(wave, flam[0], "B_JC", "V_JC")
    assert colour == pytest.approx(ph.synthetic_mag(wave, flam[0], "B_JC") - m[0], abs=1e-12)


def test_photon_flux(independent):
    # photons s⁻¹ cm⁻² = ∫ F_λ λ/(hc) S dλ; flat F_λ here, integral by our own fine trapezoid
    key = "G_GDR3"
    f0 = 1e-13
    wave = np.arange(3000.0, 11000.0, 1.0)
    grid = independent.fine_grid(key)
    expected = f0 * np.trapezoid(grid * independent.photon_response(key, grid), grid) * 1e-8 / (
        independent.H_CGS * independent.C_CGS)
    assert ph.photon_flux(wave, np.full_like(wave, f0), key) == pytest.approx(expected, rel=1e-6)


def test_unsorted_spectrum_is_refused_or_handled():
    wave = np.arange(4000.0, 8000.0, 1.0)
    flam = (wave / 5000.0) ** -3
    good = float(ph.synthetic_mag(wave, flam, "V_JC"))
    rng = np.random.default_rng(7)
    order = np.concatenate([[0], 1 + rng.permutation(wave.size - 2), [wave.size - 1]])
    try:
        shuffled = float(ph.synthetic_mag(wave[order], flam[order], "V_JC"))
    except StelltempError as err:
        assert "increas" in str(err) or "order" in str(err)
        return
    assert shuffled == pytest.approx(good, abs=1e-9)


def test_negative_band_flux_gives_nan_without_warning():
    wave = np.arange(4000.0, 8000.0, 1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        try:
            m = ph.synthetic_mag(wave, -np.ones_like(wave) * 1e-15, "V_JC")
        except StelltempError:
            return
    assert np.isnan(m)


def test_zero_flux_is_infinitely_faint():
    wave = np.arange(4000.0, 8000.0, 1.0)
    assert ph.synthetic_mag(wave, np.zeros_like(wave), "V_JC") == np.inf


def test_spectrum_must_cover_the_passband():
    wave = np.arange(4000.0, 6000.0, 1.0)
    with pytest.raises(StelltempError, match="does not cover passband B_JC") as err:
        ph.synthetic_mag(wave, np.ones_like(wave), "B_JC")
    assert "extrapolate" in str(err.value) and "\n" not in str(err.value)
    # a spectrum that covers the non-zero part (4800–6900 Å of V with its zero end nodes) works
    assert np.isfinite(ph.synthetic_mag(np.arange(4700.0, 7000.5, 1.0), np.ones(2301), "V_JC"))


def test_user_passband_zero_points_are_not_shared(tmp_path):
    # Two user files may carry the same key; their zero points must come from their own curves.
    a, b = tmp_path / "a.txt", tmp_path / "b.txt"
    a.write_text("# unit: nm\n500 0\n510 1\n520 1\n530 0\n")
    b.write_text("# unit: nm\n800 0\n810 1\n820 1\n830 0\n")
    pa = pb.load_passband_file(a, key="same")
    pbb = pb.load_passband_file(b, key="same")
    assert ph.zero_point_integral(pa, "AB") != pytest.approx(ph.zero_point_integral(pbb, "AB"), rel=1e-3)


# ------------------------------------------------------------ the Sun

def test_solar_model_colours_against_published_solar_colours(record_property):
    # A model solar spectrum is not the Sun: the Kurucz (1993) model's line blanketing in the blue
    # and its continuum are approximations, so its synthetic colours differ from the measured solar
    # colours by a few hundredths of a magnitude.  We check agreement within 0.04 mag and print
    # the residual.
    w, f = ref.sun_spectrum()
    bv = float(ph.synthetic_colour(w, f, "B_JC", "V_JC"))
    vks = float(ph.synthetic_colour(w, f, "V_JC", "Ks_2MASS"))
    # Ramírez et al. 2012, ApJ 752, 5: solar B−V = 0.653 ± 0.003
    res_bv = bv - 0.653
    # Casagrande et al. 2012, ApJ 761, 16: solar V−Ks = 1.560 ± 0.008
    res_vks = vks - 1.560
    print(f"Kurucz 1993 Sun: B-V = {bv:.4f} (residual {res_bv:+.4f}), V-Ks = {vks:.4f} (residual {res_vks:+.4f})")
    record_property("sun_model_bv_residual_mag", res_bv)
    record_property("sun_model_vks_residual_mag", res_vks)
    assert abs(res_bv) < 0.04
    assert abs(res_vks) < 0.04


def test_solar_model_bolometric_flux_is_the_solar_constant():
    # Total solar irradiance at 1 AU ≈ 1361 W m⁻² (Kopp & Lean 2011, GRL 38, L01706); the model
    # holds all but a negligible part of the flux.  Only the finite part is integrated here (see
    # the NaN test below).
    w, f = ref.sun_spectrum()
    ok = np.isfinite(f)
    tsi = np.trapezoid(f[ok], w[ok]) * 1e-3  # erg s⁻¹ cm⁻² → W m⁻²
    assert tsi == pytest.approx(1361.0, rel=0.005)


def test_solar_model_v_magnitude():
    # Apparent V of the Sun −26.76 (Willmer 2018, ApJS 236, 47; from memory); a model is not the
    # Sun, so 0.05 mag.
    w, f = ref.sun_spectrum()
    v = float(ph.synthetic_mag(w, f, "V_JC"))
    print(f"Kurucz 1993 Sun: V = {v:.3f}")
    assert v == pytest.approx(-26.76, abs=0.05)


def test_solar_model_spectrum_is_finite():
    w, f = ref.sun_spectrum()
    assert np.all(np.isfinite(f))
