"""Colour terms predicted from the instrument's passbands (stelltemp.reduction.predict)."""

from pathlib import Path

import numpy as np
import pytest

from stelltemp.errors import StelltempError
from stelltemp.observing.instrument import load_instrument, parse_instrument
from stelltemp.reduction import Observations, default_setups, fit_filter
from stelltemp.reduction.atmosphere import Atmosphere, rayleigh_optical_depth
from stelltemp.reduction.predict import compare_with_prediction, natural_magnitudes, predict_colour_terms

DEMO = Path(__file__).resolve().parents[1] / "catalogs_demo" / "instruments"


def demo_ccd():
    return load_instrument(DEMO / "quillmere_04m_ccd.toml")


def setups_of(instrument, second_order=True):
    return default_setups({n: f.passband.key for n, f in instrument.filters.items()}, second_order=second_order)


MATCHED = """
[telescope]
aperture_m = 0.5
mirrors = 2
mirror_reflectivity = 0.9
[camera]
qe = 0.8
read_noise_e = 5
gain_e_per_adu = 1
full_well_e = 50000
pixel_scale_arcsec = 1
[[filter]]
name = "B"
passband = "B_JC"
curve_includes_detector = true
sky_mag_arcsec2 = 22
extinction_mag_per_airmass = 0.3
[[filter]]
name = "V"
passband = "V_JC"
curve_includes_detector = true
sky_mag_arcsec2 = 21
extinction_mag_per_airmass = 0.2
[site]
latitude_deg = 0
longitude_deg = 0
seeing_fwhm_arcsec = 2
"""


def test_matched_passbands_have_no_colour_term():
    # a natural system identical in shape to the standard one: above the atmosphere m − M is a constant
    inst = parse_instrument(MATCHED)
    pred = predict_colour_terms(inst, setups_of(inst, second_order=False), airmasses=[0.0])
    for p in pred.values():
        assert abs(p.coefficients["colour_term"]) < 1e-6
        assert p.nonlinearity_max < 1e-6


def glass_on_ccd():
    """The demo CCD with its filters taken as bare glass transmissions (curve_kind = "filter").

    Each filter's transmission has the shape of Bessell's response and is multiplied by the demo's
    typical front-illuminated CCD QE: a typical CCD + glass filter set, whose QE slope across each band
    makes the natural system differ from the standard one.
    """
    text = (DEMO / "quillmere_04m_ccd.toml").read_text(encoding="utf-8")
    assert text.count('curve_kind = "system"') == 4
    return parse_instrument(text.replace('curve_kind = "system"', 'curve_kind = "filter"'), base_dir=DEMO)


def test_typical_ccd_with_glass_filters_has_colour_terms_of_a_few_hundredths():
    # Common practice: for a CCD with glass UBVRI-type filters the V colour term in B−V is a few
    # hundredths of a magnitude per magnitude, the B term (in B−V) a few hundredths to ~0.1, and the
    # R and I terms (in V−R, R−I) a few hundredths.
    inst = glass_on_ccd()
    pred = predict_colour_terms(inst, setups_of(inst))
    v, b = pred["V"], pred["B"]
    assert v.setup.colour == ("B_JC", "V_JC")
    assert 0.005 < abs(v.coefficients["colour_term"]) < 0.06
    assert 0.01 < abs(b.coefficients["colour_term"]) < 0.15
    for f in ("R", "I"):
        assert 0.005 < abs(pred[f].coefficients["colour_term"]) < 0.08
    # the QE rises towards the red across V (0.52 at 500 nm, 0.60 at 600 nm): red stars look
    # brighter in the natural V than in standard V, so the term is negative in this equation's sign
    assert v.coefficients["colour_term"] < 0
    for p in pred.values():
        assert p.nonlinearity_max < 0.01


def test_demo_instrument_with_system_curves():
    # Demo instrument: its B, V, R, I use Bessell's standard-system responses, which already contain a
    # detector (curve_kind = "system", the camera QE not applied again), so its natural bands are the
    # standard ones times the atmosphere: no colour term above the atmosphere, only the second-order
    # extinction.  Common practice: that is about −0.03 per airmass per magnitude of B−V in B (Hardie 1962,
    # in Astronomical Techniques, ch. 8 — value from memory), much smaller in V and redder bands.
    pred = predict_colour_terms(demo_ccd(), setups_of(demo_ccd()))
    v, b = pred["V"], pred["B"]
    assert v.setup.colour == ("B_JC", "V_JC")
    assert abs(v.coefficients["colour_term"]) < 0.005
    assert abs(b.coefficients["colour_term"]) < 0.005
    assert -0.05 < b.coefficients["colour_extinction"] < -0.015
    assert abs(v.coefficients["colour_extinction"]) < 0.015
    for p in pred.values():  # all nearly linear for smooth spectra: below 1 % over the range
        assert p.nonlinearity_max < 0.01
    # first-order extinction of the model atmosphere at 850 m: typical V and B values at a low site
    # (common practice: k_V ≈ 0.1–0.25, k_B ≈ 0.2–0.4 mag per airmass)
    assert 0.10 < v.coefficients["extinction"] < 0.25
    assert 0.20 < b.coefficients["extinction"] < 0.40


def test_rayleigh_optical_depth():
    # Bucholtz (1995, Applied Optics 34, 2765), sea-level Rayleigh optical depth at 0.55 um ≈ 0.097
    # and the λ^-4.08-like steepening in the blue (values from memory)
    assert rayleigh_optical_depth(5500.0) == pytest.approx(0.097, abs=0.002)
    assert rayleigh_optical_depth(4000.0) == pytest.approx(0.36, abs=0.01)
    assert rayleigh_optical_depth(5500.0, 8000.0) == pytest.approx(0.097 / np.e, abs=0.002)
    with pytest.raises(StelltempError):
        Atmosphere(elevation_m=20000)


def test_natural_magnitude_matches_the_count_rate_code():
    # the natural magnitude is −2.5 log10 of the electron rate computed by the exposure code
    from stelltemp.observing.counts import electron_rate_spectrum
    from stelltemp.planck import planck_lambda_cgs

    inst = demo_ccd()
    w = np.linspace(3000, 11000, 8001)
    rate = electron_rate_spectrum(w, planck_lambda_cgs(6000.0, w), inst, "V", airmass=0.0)
    m = natural_magnitudes(inst, "V", [6000.0], [0.0], [0.0])
    assert m[0, 0, 0] == pytest.approx(-2.5 * np.log10(rate), abs=2e-4)


def test_prediction_as_prior_with_few_standards():
    # three standards only: the colour term comes from the prediction, within its prior width
    inst = demo_ccd()
    pred = predict_colour_terms(inst, setups_of(inst, second_order=False))
    setup = pred["V"].setup
    c_pred, sigma = pred["V"].prior()
    assert sigma >= 0.01
    stds = {"p": {"V_JC": (10.0, 0.01), "B_JC": (10.6, 0.01)}, "q": {"V_JC": (11.0, 0.01), "B_JC": (11.65, 0.01)},
            "r": {"V_JC": (12.0, 0.01), "B_JC": (12.7, 0.01)}}
    rows = [(s, x) for s in stds for x in (1.1, 1.9)]
    mag = [stds[s]["V_JC"][0] + 1.0 + 0.15 * x + c_pred * (stds[s]["B_JC"][0] - stds[s]["V_JC"][0]) for s, x in rows]
    obs = Observations.from_arrays([r[0] for r in rows], "V", mag, 0.01, [r[1] for r in rows])
    with pytest.raises(StelltempError, match="prior on the colour term"):
        fit_filter(obs, stds, setup)
    fit = fit_filter(obs, stds, setup, priors={"colour_term": (c_pred, sigma)})
    assert fit.coefficient("colour_term") == pytest.approx(c_pred, abs=sigma)

    class T:  # the comparison helper reads only .fits
        fits = {"V": fit}

    rows = compare_with_prediction(T, pred)
    assert rows[0]["coefficient"] == "colour_term" and abs(rows[0]["difference_sigma"]) < 1
