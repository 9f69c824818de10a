"""Tests of stelltemp.extinction: dust_extinction laws applied to spectra."""

import numpy as np
import pytest
from astropy import units as u
from dust_extinction import parameter_averages as pa

from stelltemp import extinction as ext
from stelltemp import passbands as pb
from stelltemp.errors import StelltempError

OPTICAL = np.linspace(3500.0, 9000.0, 56)  # Å, inside every law's range


@pytest.mark.parametrize("law,cls,rv", [
    ("G23", pa.G23, 3.1), ("G23", pa.G23, 5.0), ("F99", pa.F99, 3.1), ("F19", pa.F19, 2.5),
    ("CCM89", pa.CCM89, 3.1), ("O94", pa.O94, 4.0),
])
def test_transmission_is_ten_to_minus_0_4_rv_e_k(law, cls, rv):
    # A(λ) = R_V E(B−V) k(λ), k = A(λ)/A(V) from dust_extinction (Gordon 2024, JOSS 9, 7023)
    x = 1e4 / OPTICAL / u.micron
    k = np.asarray(cls(Rv=rv)(x))
    np.testing.assert_allclose(ext.relative_extinction(OPTICAL, law, rv), k, rtol=1e-14)
    for ebv in (0.0, 0.3, 2.0):
        expected = 10 ** (-0.4 * rv * ebv * k)
        np.testing.assert_allclose(ext.transmission(OPTICAL, ebv, law, rv), expected, rtol=1e-12)
        # and dust_extinction's own extinguish() says the same
        np.testing.assert_allclose(ext.transmission(OPTICAL, ebv, law, rv), cls(Rv=rv).extinguish(x, Ebv=ebv),
                                   rtol=1e-12)


def test_transmission_broadcasts_reddening_against_wavelength():
    ebv = np.array([0.0, 0.5, 1.0])
    t = ext.transmission(OPTICAL, ebv)
    assert t.shape == (3, OPTICAL.size)
    np.testing.assert_array_equal(t[0], 1.0)
    np.testing.assert_allclose(t[2], t[1] ** 2, rtol=1e-12)  # optical depth is linear in E(B−V)
    assert np.all(np.diff(t[1]) > 0)  # redder light passes more easily (common practice)


def test_default_law_is_g23_milky_way_average():
    # Gordon et al. 2023, ApJ 950, 86, with the average Milky Way R_V = 3.1 (common practice)
    assert ext.DEFAULT_LAW == "G23" and ext.DEFAULT_RV == 3.1
    np.testing.assert_array_equal(ext.relative_extinction(OPTICAL), ext.relative_extinction(OPTICAL, "G23", 3.1))


@pytest.mark.parametrize("law", sorted(ext.LAWS))
def test_rv_is_the_ratio_of_total_to_selective_extinction(law):
    # Definition R_V = A_V / E(B−V) (Cardelli, Clayton & Mathis 1989, ApJ 345, 245): with the
    # monochromatic B and V at 4400 and 5500 Å, R_V (k_B − k_V) ≈ 1 and k_V ≈ 1.  Only roughly:
    # F99/F19 are normalised through broad-band B and V, not at single wavelengths (Fitzpatrick
    # 1999, PASP 111, 63), so k(5500 Å) is 0.97 there for R_V = 2.5.
    for rv in (2.5, 3.1, 5.0):
        k_b, k_v = ext.relative_extinction([4400.0, 5500.0], law, rv)
        print(f"{law} R_V={rv}: k(5500)={k_v:.4f}, R_V(k_B-k_V)={rv * (k_b - k_v):.4f}")
        assert k_v == pytest.approx(1.0, abs=0.04)
        assert rv * (k_b - k_v) == pytest.approx(1.0, abs=0.05)


def test_g23_covers_every_builtin_passband():
    # The module's reason for the default: one law from U to Ks.
    for key in pb.builtin_keys():
        lo, hi = pb.get_passband(key).wave_range
        k = ext.relative_extinction([lo, hi], "G23", 3.1)
        assert np.all(np.isfinite(k)) and np.all(k > 0)


def test_near_infrared_extinction_is_small():
    # A(Ks)/A(V) ≈ 0.11 for R_V = 3.1 (from memory; e.g. Gordon et al. 2023, ApJ 950, 86)
    assert ext.relative_extinction([21600.0], "G23", 3.1)[0] == pytest.approx(0.11, abs=0.03)


def test_unknown_law():
    with pytest.raises(StelltempError, match="unknown extinction law 'g23'") as err:
        ext.relative_extinction(OPTICAL, "g23")
    for name in ext.LAWS:
        assert name in str(err.value)


@pytest.mark.parametrize("law,rv", [("G23", 2.0), ("G23", 6.0), ("F99", 1.5), ("CCM89", 7.0), ("G23", float("nan"))])
def test_rv_outside_range(law, rv):
    with pytest.raises(StelltempError, match="R_V") as err:
        ext.transmission(OPTICAL, 0.1, law, rv)
    assert law in str(err.value) and "\n" not in str(err.value)


def test_non_numeric_rv():
    with pytest.raises(StelltempError, match="R_V"):
        ext.check_law("G23", "three")


@pytest.mark.parametrize("law,wave", [("G23", [500.0, 5000.0]), ("F99", [5000.0, 40000.0]),
                                      ("G23", [5000.0, 400000.0]), ("CCM89", [900.0])])
def test_wavelength_outside_law(law, wave):
    with pytest.raises(StelltempError, match=f"law {law} is defined from") as err:
        ext.transmission(wave, 0.5, law)
    assert "\n" not in str(err.value)


@pytest.mark.parametrize("law", sorted(ext.LAWS))
def test_rv_ranges_kept_here_match_the_package(law):
    # the ranges are kept beside the names so that checking a law needs no import of dust_extinction
    assert tuple(ext.LAWS[law][2]) == tuple(ext.law_class(law).Rv_range)


def test_a_law_model_is_built_once_per_run():
    assert ext.law_model("G23", 3.1) is ext.law_model("G23", 3.1)
