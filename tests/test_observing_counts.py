"""Electron rates from stars, sky and dark current."""

import math
from pathlib import Path

import numpy as np
import pytest

from stelltemp.errors import StelltempError
from stelltemp.observing import counts
from stelltemp.observing.instrument import load_instrument, parse_instrument
from stelltemp.photometry import photon_flux, synthetic_mag
from stelltemp.planck import planck_lambda_cgs
from stelltemp.reference import vega_spectrum

DEMO = Path(__file__).resolve().parents[1] / "catalogs_demo" / "instruments"

# an ideal system: 1 cm^2, no mirrors, QE 1, filters at peak 1, no extinction
IDEAL = f"""
[telescope]
aperture_m = {math.sqrt(4 / math.pi) / 100!r}
mirrors = 0
[camera]
qe = 1.0
read_noise_e = 0
gain_e_per_adu = 1
full_well_e = 1e6
pixel_scale_arcsec = 1.0
[[filter]]
name = "V"
passband = "V_JC"
sky_mag_arcsec2 = 21
extinction_mag_per_airmass = 0.0
[[filter]]
name = "I"
passband = "Ic_JC"
sky_mag_arcsec2 = 20
extinction_mag_per_airmass = 0.0
[[filter]]
name = "g"
passband = "g_SDSS"
sky_mag_arcsec2 = 21
extinction_mag_per_airmass = 0.0
[site]
latitude_deg = 0
longitude_deg = 0
seeing_fwhm_arcsec = 2
"""


@pytest.fixture(scope="module")
def ideal():
    return parse_instrument(IDEAL, source="ideal")


@pytest.fixture(scope="module")
def rig():
    return load_instrument(DEMO / "quillmere_04m_ccd.toml")


def test_ideal_system_equals_core_photon_flux(ideal):
    assert ideal.telescope.collecting_area_cm2 == pytest.approx(1.0)
    w, f = vega_spectrum()
    for name in ("V", "I", "g"):
        pb = ideal.filter(name).passband
        got = counts.electron_rate_spectrum(w, f, ideal, name, airmass=0.0)
        assert got == pytest.approx(float(photon_flux(w, f, pb)), rel=1e-4)


def test_v0_photon_flux_against_bcp98(ideal):
    # Bessell, Castelli & Plez 1998 (A&A 333, 231) Table A2: a V = 0 star has a photon-weighted mean
    # f_lambda = 3.631e-9 erg s^-1 cm^-2 A^-1 in V; so photons per A = f_lambda * lambda_mean / hc
    pb = ideal.filter("V").passband
    n = counts.star_electron_rate(ideal, "V", 0.0, airmass=0.0)  # Vega-shaped spectrum at V = 0
    s, w = pb.photon_response, pb.wave
    per_angstrom = n / np.trapezoid(s, w)
    expected = 3.631e-9 * (np.trapezoid(s * w, w) / np.trapezoid(s, w)) / counts.HC_ERG_ANGSTROM
    assert per_angstrom == pytest.approx(expected, rel=0.03)


def test_blackbody_normalisation(ideal):
    flam = counts.scaled_blackbody([3500.0, 20000.0], 10.0, "V_JC")
    w = np.linspace(3000.0, 12000.0, 4000)
    mags = synthetic_mag(w, flam(w), "V_JC")
    np.testing.assert_allclose(mags, 10.0, atol=2e-4)
    # rates through the ideal V filter of a V = 10 star barely depend on temperature
    r = counts.star_electron_rate(ideal, "V", 10.0, "V_JC", teff=np.array([3500.0, 20000.0]), airmass=0.0)
    assert r[0] == pytest.approx(r[1], rel=0.03)


def test_cool_star_gives_far_more_i_counts_than_hot_at_same_v(rig):
    # Planck: at equal V a 3500 K star is several times brighter in I than a 20000 K star
    cool = counts.star_electron_rate(rig, "I", 10.0, "V_JC", teff=3500.0)
    hot = counts.star_electron_rate(rig, "I", 10.0, "V_JC", teff=20000.0)
    assert cool / hot > 4.0
    # consistent with the blackbody V - I colours through the same curves
    w = np.linspace(3000.0, 12000.0, 4000)
    dvi = [synthetic_mag(w, planck_lambda_cgs(t, w), "V_JC") - synthetic_mag(w, planck_lambda_cgs(t, w), "Ic_JC")
           for t in (3500.0, 20000.0)]
    assert cool / hot == pytest.approx(10 ** (0.4 * (dvi[0] - dvi[1])), rel=0.05)  # QE shape differs slightly
    # and in B the order is reversed
    assert counts.star_electron_rate(rig, "B", 10.0, "V_JC", teff=3500.0) < \
        counts.star_electron_rate(rig, "B", 10.0, "V_JC", teff=20000.0)


def test_area_obstruction_and_extinction(rig):
    r1 = counts.star_electron_rate(rig, "V", 12.0, airmass=1.0)
    r2 = counts.star_electron_rate(rig, "V", 12.0, airmass=2.0)
    assert r2 / r1 == pytest.approx(10 ** (-0.4 * 0.18))  # 10^(-0.4 k dX), k = 0.18 in the demo file
    assert counts.star_electron_rate(rig, "V", 13.0, airmass=1.0) / r1 == pytest.approx(10**-0.4)
    text = (DEMO / "quillmere_04m_ccd.toml").read_text().replace("obstruction_m = 0.16", "obstruction_m = 0.0")
    open_tube = parse_instrument(text)
    ratio = counts.star_electron_rate(open_tube, "V", 12.0) / r1
    assert ratio == pytest.approx(0.40**2 / (0.40**2 - 0.16**2))
    with pytest.raises(StelltempError):
        counts.star_electron_rate(rig, "V", 12.0, airmass=-1.0)


def test_sky_rate(rig, ideal):
    s21 = counts.sky_electron_rate(rig, "V")
    assert counts.sky_electron_rate(rig, "V", 22.0) == pytest.approx(s21 * 10**-0.4)
    # the sky per arcsec^2 equals the rate of a star of the same magnitude with the zero-point spectrum
    star = counts.star_electron_rate(rig, "V", 21.0, airmass=0.0)
    assert s21 / rig.camera.binned_scale_arcsec**2 == pytest.approx(star, rel=1e-6)
    # AB band: the sky gets a flat f_nu spectrum; 3631 Jy at 0 mag (Oke & Gunn 1983)
    w = np.linspace(3000.0, 6000.0, 3001)
    flat = 3631e-23 * 2.99792458e18 / w**2 * 10 ** (-0.4 * 21.0)
    assert counts.sky_electron_rate(ideal, "g") == pytest.approx(
        counts.electron_rate_spectrum(w, flat, ideal, "g", airmass=0.0), rel=1e-3)


def test_sky_airmass_brightening_and_dark(rig):
    # Krisciunas & Schaefer 1991 eq. 1: B(X) = B_zen 10^(-0.4 k) X
    assert counts.sky_airmass_brightening(1.0, 0.2) == pytest.approx(0.0)
    dm = counts.sky_airmass_brightening(2.0, 0.2)
    assert 10 ** (-0.4 * dm) == pytest.approx(10 ** (-0.4 * 0.2) * 2.0)
    assert counts.dark_electron_rate(rig) == pytest.approx(0.02)


def test_spectrum_must_cover_filter(rig):
    w = np.linspace(5000.0, 6000.0, 10)
    with pytest.raises(StelltempError, match="does not cover"):
        counts.electron_rate_spectrum(w, np.ones_like(w), rig, "V")


def test_ab_zero_point_photon_rate_is_exact(ideal):
    # AB definition (Oke & Gunn 1983, ApJ 266, 713): F_ν = 3631 Jy.  Photons per second per cm²
    # through a photon response S are ∫ F_ν S / (h ν) dν = (3631 Jy / h) ∫ S(λ) dλ / λ, exactly;
    # evaluated here on the response's own integration grid, independently of counts.py.
    h_cgs = 6.62607015e-27  # erg s, exact in the SI since 2019
    pb = ideal.filter("g").passband
    grid = pb.integration_grid
    expected = 3631e-23 / h_cgs * np.trapezoid(pb.photon_response_at(grid) / grid, grid)
    got = counts.zero_point_rate(ideal, "g") / ideal.telescope.collecting_area_cm2
    assert got == pytest.approx(expected, rel=1e-9)


def test_zero_point_rate_computed_once_per_instrument_and_filter(rig, monkeypatch):
    calls = []
    real = counts._zero_point_rate
    monkeypatch.setattr(counts, "_zero_point_rate", lambda inst, f: calls.append(f) or real(inst, f))
    monkeypatch.setattr(counts, "_ZERO_POINTS", {})
    first = counts.zero_point_rate(rig, "V")
    assert counts.zero_point_rate(rig, "V") == first == real(rig, "V")
    assert calls == ["V"]  # the second call read the stored rate
    other = load_instrument(DEMO / "quillmere_04m_ccd.toml")  # another object: its own entry
    assert counts.zero_point_rate(other, "V") == first and calls == ["V", "V"]


def test_reddening_moves_counts_to_the_red_as_the_colours_say(rig):
    # At the same observed V, a reddened star is redder: more electrons in I, fewer in B.
    # The I ratio follows the reddened blackbody V−Ic excess through the same curves
    # (G23, R_V = 3.1; the camera's QE shape makes the match approximate).
    from stelltemp.bandgrid import blackbody_mag

    plain = counts.star_electron_rate(rig, "I", 12.0, "V_JC", teff=6000.0)
    red = counts.star_electron_rate(rig, "I", 12.0, "V_JC", teff=6000.0, ebv=0.5)
    excess = [blackbody_mag("V_JC", 6000.0, e) - blackbody_mag("Ic_JC", 6000.0, e) for e in (0.0, 0.5)]
    assert red / plain == pytest.approx(10 ** (0.4 * (excess[1] - excess[0])), rel=0.05)
    assert counts.star_electron_rate(rig, "B", 12.0, "V_JC", teff=6000.0, ebv=0.5) < \
        counts.star_electron_rate(rig, "B", 12.0, "V_JC", teff=6000.0)
    # the V rate itself is pinned by the observed V magnitude
    assert counts.star_electron_rate(rig, "V", 12.0, "V_JC", teff=6000.0, ebv=0.5) == pytest.approx(
        counts.star_electron_rate(rig, "V", 12.0, "V_JC", teff=6000.0), rel=0.02)
