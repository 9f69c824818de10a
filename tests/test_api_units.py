"""Quantities at the public edges: the same number whatever unit it is given in.

Unit conversions themselves are astropy's (Astropy Collaboration 2022, ApJ
935, 167); 0 °C = 273.15 K and 1 µm = 1000 nm = 10⁴ Å are SI definitions.
"""

import numpy as np
import pytest
from astropy import units as u

from stelltemp import bandgrid as bg
from stelltemp import photometry as ph
from stelltemp import planck
from stelltemp.errors import StelltempError

FLAM = u.erg / u.s / u.cm**2 / u.AA


def test_radiance_lambda_plain_numbers_are_nm_like_the_result():
    plain = planck.radiance_lambda(5772, 500)
    assert plain.unit == u.W / u.m**2 / u.nm / u.sr
    for wave in (500 * u.nm, 5000 * u.AA, 0.5 * u.um, (500 * u.nm).to(u.THz, equivalencies=u.spectral())):
        assert planck.radiance_lambda(5772, wave).value == pytest.approx(plain.value, rel=1e-12)
    assert planck.radiance_lambda(5498.85 * u.deg_C, 0.5 * u.um).value == pytest.approx(plain.value, rel=1e-12)
    # the cgs kernel takes Å and returns per Å: the same radiance once converted
    cgs = planck.planck_lambda_cgs(5772.0, 5000.0) * FLAM / u.sr
    assert cgs.to_value(plain.unit) == pytest.approx(plain.value, rel=1e-12)


def test_photon_radiance_plain_nm():
    assert planck.photon_radiance_lambda(6000, 700).value == pytest.approx(
        planck.photon_radiance_lambda(6000 * u.K, 0.7 * u.um).value, rel=1e-12)


def _flat_spectrum():
    w = np.linspace(3000.0, 30000.0, 13501)
    return w, 1e-13 * (w / 5000.0) ** -2


@pytest.mark.parametrize("key", ["V_JC", "g_PS1", "J_2MASS"])
def test_photometry_accepts_quantities(key):
    w, f = _flat_spectrum()
    plain = ph.synthetic_mag(w, f, key)
    assert ph.synthetic_mag((w * u.AA).to(u.nm), f * FLAM, key) == pytest.approx(plain, abs=1e-10)
    assert ph.synthetic_mag((w * u.AA).to(u.um), (f * FLAM).to(u.W / u.m**2 / u.um), key) == pytest.approx(plain, abs=1e-10)
    fnu = (f * FLAM).to(u.mJy, equivalencies=u.spectral_density(w * u.AA))
    assert ph.synthetic_mag(w * u.AA, fnu, key) == pytest.approx(plain, abs=1e-9)
    q = ph.band_integral(w * u.AA, f * FLAM, key)
    assert q.to_value(ph.INTEGRAL_UNIT) == pytest.approx(ph.band_integral(w, f, key), rel=1e-12)
    n = ph.photon_flux((w * u.AA).to(u.nm), f * FLAM, key)
    assert n.unit.is_equivalent(1 / u.s / u.cm**2)
    assert n.value == pytest.approx(ph.photon_flux(w, f, key), rel=1e-12)
    assert ph.synthetic_colour(w * u.AA, f * FLAM, "B_JC", key) == pytest.approx(
        ph.synthetic_colour(w, f, "B_JC", key), abs=1e-10)


def test_photometry_refuses_wrong_units():
    w, f = _flat_spectrum()
    with pytest.raises(StelltempError, match="wavelengths"):
        ph.synthetic_mag(w * u.kg, f, "V_JC")
    with pytest.raises(StelltempError, match="flux density"):
        ph.synthetic_mag(w, f * u.kg, "V_JC")


def test_bandgrid_accepts_quantities():
    plain = bg.blackbody_mag("V_JC", 5772.0, 0.2, angular_diameter_rad=1e-9)
    assert bg.blackbody_mag("V_JC", 5498.85 * u.deg_C, 0.2 * u.mag,
                            angular_diameter_rad=(1e-9 * u.rad).to(u.mas)) == pytest.approx(plain, abs=1e-9)
    assert bg.blackbody_mag("V_JC", 5.772 * u.kK, 0.2) == pytest.approx(plain + 2.5 * np.log10(np.pi * 1e-18 / 4), abs=1e-9)
    assert bg.constant_coefficient("V_JC", reference_temperature=9726.85 * u.deg_C) == pytest.approx(
        bg.constant_coefficient("V_JC"), abs=1e-9)
    assert bg.inside(np.array([5, 50]) * u.kK, 0.0).tolist() == [True, True]
    m1 = bg.blackbody_band_terms("V_JC", [5000.0], [0.1])[0]
    m2 = bg.blackbody_band_terms("V_JC", [5 * u.kK.to(u.K)] * u.K, [0.1] * u.mag)[0]
    np.testing.assert_allclose(m1, m2, atol=1e-12)
    with pytest.raises(StelltempError, match="temperature"):
        bg.blackbody_mag("V_JC", 5772 * u.m)
