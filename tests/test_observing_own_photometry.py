"""Count rates from each star's own photometry, the instrument model, moonlight in the sky and night plans."""

import math
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

from stelltemp.errors import StelltempError
from stelltemp.observing import anchor, counts, moon, plan
from stelltemp.observing.instrument import load_instrument, parse_instrument

DEMO = Path(__file__).resolve().parents[1] / "catalogs_demo" / "instruments"
CCD_FILE = DEMO / "quillmere_04m_ccd.toml"

_SITE = """
[site]
latitude_deg = 37.5
longitude_deg = -3.2
seeing_fwhm_arcsec = 2.0
"""


def _rig(camera_qe="1.0", kind="system", extra="", bands=("B", "V", "Rc", "Ic")):
    """An ideal 1 cm² telescope (no mirrors, no extinction) with the given camera QE and curve kind."""
    text = f"""
[telescope]
aperture_m = {math.sqrt(4 / math.pi) / 100!r}
mirrors = 0
[camera]
qe = {camera_qe}
read_noise_e = 0
gain_e_per_adu = 1
full_well_e = 1e6
pixel_scale_arcsec = 1.0
""" + _SITE
    for b in bands:
        text += (f'[[filter]]\nname = "{b}"\npassband = "{b}_JC"\ncurve_kind = "{kind}"\n{extra}\n'
                 'sky_mag_arcsec2 = 21\nextinction_mag_per_airmass = 0\n')
    return parse_instrument(text)


@pytest.fixture(scope="module")
def ccd():
    return load_instrument(CCD_FILE)


# ---------------------------------------------------------------- instrument model: each element counted once
def test_photon_flux_of_a_zero_magnitude_a0_star_against_bcp98():
    """Bessell, Castelli & Plez 1998 (A&A 333, 231), Table A2: f_λ of a zero-magnitude A0 star
    (B 632, V 363.1, Rc 217.7, Ic 112.6 × 10⁻¹¹ erg cm⁻² s⁻¹ Å⁻¹).  The paper was not at hand; these values are
    as quoted from its Table A2 in several independent public codes, which agree to the last digit, one of
    which adds that they were computed from a Kurucz A0 V model, not from a Vega spectrum.

    Our photon flux N through each band (flat QE, system curve, 1 cm²) is turned into the photon-weighted
    mean f_λ = N hc / ∫ S λ dλ.  Residual explained, not removed: all four bands are 1.9–3.4 % above BCP98,
    with a common part of +2.6 % (V).  Our zero points come from the CALSPEC STIS Vega (Bohlin 2014, AJ 147,
    127); its flux at 5556 Å, 3.47e-9 (computed below from the shipped file), is 0.9 % above the 3.44e-9 of
    Hayes (1985) to which model-based zero points of that time were normalised (from memory); the remaining
    ~1.7 % common offset and the +0.8 % of B over V (B is where the Balmer lines and jump of an A0 star lie, and
    where model and observed Vega differ most) are the differences between the measured Vega spectrum and
    the Kurucz model BCP98 integrated, which this test cannot separate further.  So V is checked to 3 %, every
    band to 3.5 % (B's +3.4 % is outside the 3 % goal for that reason), and the band-to-band pattern (each band
    over V) to 1 %, which is what colour-dependent count rates depend on.
    """
    from stelltemp.reference import vega_spectrum

    w, f = vega_spectrum()
    assert float(np.interp(5556.0, w, f)) == pytest.approx(3.47e-9, rel=0.005)
    assert float(np.interp(5556.0, w, f)) / 3.44e-9 == pytest.approx(1.009, abs=0.003)
    rig = _rig()
    bcp98 = {"B": 632e-11, "V": 363.1e-11, "Rc": 217.7e-11, "Ic": 112.6e-11}
    ratio = {}
    for b, flam in bcp98.items():
        n = counts.zero_point_rate(rig, b)  # photons s⁻¹ cm⁻² from a zero-magnitude A0 (Vega-shaped) star
        pb = rig.filter(b).passband
        g = counts.band_grid(pb)
        mean_flam = n * counts.HC_ERG_ANGSTROM / np.trapezoid(pb.photon_response_at(g) * g, g)
        ratio[b] = mean_flam / flam
        assert ratio[b] == pytest.approx(1.0, abs=0.035), b
    assert ratio["V"] == pytest.approx(1.0, abs=0.03)
    for b in ("B", "Rc", "Ic"):
        assert ratio[b] / ratio["V"] == pytest.approx(1.0, abs=0.01), b


def test_flat_qe_camera_and_system_curve_give_the_zero_point_prediction(independent):
    """A system-response curve already holds a detector: a flat-QE camera adds nothing, so the counts are
    the zero point × 10^(−0.4 m) for any spectrum anchored to the same band (independent integration)."""
    rig = _rig(camera_qe="0.8")
    for b in ("V", "Ic"):
        key = f"{b}_JC"
        grid = independent.fine_grid(key)
        vw, vf = independent.raw_vega()
        s = independent.photon_response(key, grid)
        zp = np.trapezoid(np.interp(grid, vw, vf) * grid * s, grid) / (independent.H_CGS * independent.C_CGS * 1e8)
        zp *= 10 ** (0.4 * 0.03)  # Vega's adopted magnitude 0.03 (BCP98) -> a zero-magnitude star
        for teff in (3500.0, 9500.0, 30000.0):
            r = anchor.anchored_rates(rig, {key: 12.0, "B_JC": 13.0}, teff=teff, filters=[b])[b]
            assert r.source == "measured" and r.bands == (key,)
            assert r.rate == pytest.approx(zp * 10 ** (-0.4 * 12.0), rel=2e-3)
            assert r.colour_term == pytest.approx(0.0, abs=1e-5)  # integration grids differ at 1e-6 mag


def test_qe_enters_once_bare_filter_and_reference_detector():
    flat = anchor.anchored_rates(_rig("1.0"), {"V_JC": 12.0}, teff=5000.0)["V"].rate
    # a bare filter curve: the camera QE multiplies it
    assert anchor.anchored_rates(_rig("0.5", kind="filter"), {"V_JC": 12.0}, teff=5000.0)["V"].rate == \
        pytest.approx(0.5 * flat, rel=1e-9)
    # a system curve with the standard detector's QE: only the ratio camera / reference enters
    ratio = _rig("0.6", extra="reference_qe = 0.3")
    assert anchor.anchored_rates(ratio, {"V_JC": 12.0}, teff=5000.0)["V"].rate == pytest.approx(2 * flat, rel=1e-9)
    # a sloped camera QE through a system curve with a flat reference: a small, star-dependent colour term
    sloped = _rig("{ wavelength_A = [3000, 11000], value = [0.3, 0.9] }", extra="reference_qe = 0.6")
    cool = anchor.anchored_rates(sloped, {"V_JC": 12.0}, teff=3500.0)["V"].colour_term
    hot = anchor.anchored_rates(sloped, {"V_JC": 12.0}, teff=30000.0)["V"].colour_term
    assert cool < hot and abs(cool - hot) < 0.05


def test_curve_kind_checks_and_defaults():
    rig = _rig()
    assert rig.filter("V").curve_kind == "system"
    base = _rig().camera  # noqa: F841 - parse succeeded
    bad = f"""
[telescope]
aperture_m = 0.3
[camera]
qe = 0.8
read_noise_e = 1
gain_e_per_adu = 1
full_well_e = 1e5
pixel_scale_arcsec = 1.0
[[filter]]
name = "V"
passband = "V_JC"
curve_kind = "{{kind}}"
{{extra}}
sky_mag_arcsec2 = 21
extinction_mag_per_airmass = 0.2
""" + _SITE
    with pytest.raises(StelltempError, match="curve_kind must be"):
        parse_instrument(bad.format(kind="bare", extra=""))
    with pytest.raises(StelltempError, match="reference detector QE only applies"):
        parse_instrument(bad.format(kind="filter", extra="reference_qe = 0.5"))
    with pytest.raises(StelltempError, match="contradicts"):
        parse_instrument(bad.format(kind="filter", extra="curve_includes_detector = true"))
    assert parse_instrument(bad.format(kind="filter", extra="")).camera.min_exposure_s == 1.0  # the default
    # the demo instruments state their choice: standard curves with the detector in them
    for f in DEMO.glob("*.toml"):
        inst = load_instrument(f)
        assert {s.curve_kind for s in inst.filters.values()} == {"system"}
        assert "curve_kind" in f.read_text()


# ---------------------------------------------------------------- rates anchored to the star's own photometry
def test_cool_and_hot_star_at_same_v_follow_their_measured_v_minus_i(ccd):
    """Measured B, V, R, I of a cool and a hot star at V = 12: the planned I-band rate ratio follows their
    measured V−I within 2 % (invented magnitudes, colours typical of K5 and B5 stars, common practice)."""
    cool = {"B_JC": 13.15, "V_JC": 12.0, "Rc_JC": 11.35, "Ic_JC": 10.78}
    hot = {"B_JC": 11.84, "V_JC": 12.0, "Rc_JC": 12.08, "Ic_JC": 12.17}
    pc = plan.plan_target(ccd, photometry=cool, snr=50.0, airmass=1.2)
    ph = plan.plan_target(ccd, photometry=hot, snr=50.0, airmass=1.2)
    i_c, i_h = pc[pc["filter"] == "I"][0], ph[ph["filter"] == "I"][0]
    assert i_c["rate_source"] == i_h["rate_source"] == "measured"
    expected = 10 ** (0.4 * ((cool["V_JC"] - cool["Ic_JC"]) - (hot["V_JC"] - hot["Ic_JC"])))
    assert i_c["star_rate"] / i_h["star_rate"] == pytest.approx(expected, rel=0.02)
    assert i_c["spectrum"] == "engine" and i_c["teff"] < 5000 < 10000 < i_h["teff"]


def test_reddening_is_used_never_dropped(ccd):
    # a V-only star with a given temperature: E(B-V) reddens the spectrum, so the unmeasured B is fainter
    plain = plan.plan_target(ccd, photometry={"V_JC": 12.0}, teff=6000.0, snr=50.0)
    red = plan.plan_target(ccd, photometry={"V_JC": 12.0}, teff=6000.0, ebv=0.3, snr=50.0)
    b0, b3 = plain[plain["filter"] == "B"][0], red[red["filter"] == "B"][0]
    assert b3["rate_source"] == "extrapolated" and b3["ebv"] == 0.3
    assert b3["star_rate"] / b0["star_rate"] == pytest.approx(10 ** (-0.4 * 0.3), rel=0.08)  # ~E(B-V) in B-V
    # the template fallback is reddened too (it used to ignore E(B-V))
    t0 = anchor.anchored_rates(ccd, {"V_JC": 12.0})["B"]
    t3 = anchor.anchored_rates(ccd, {"V_JC": 12.0}, ebv=0.3)["B"]
    assert t0.source == t3.source == "template" and t3.rate < 0.8 * t0.rate
    assert "template" in t3.note and "0.300" in t3.note


def test_interpolation_between_measured_bands_recovers_the_spectrum(ccd):
    """A 5,000 K blackbody measured in V and Ic only: its Rc rate interpolated from them matches the rate
    computed directly from its synthetic Rc magnitude (the same spectrum) within 1 %."""
    from stelltemp.observing.counts import scaled_blackbody
    from stelltemp.photometry import synthetic_mag

    flam = scaled_blackbody(5000.0, 12.0, "V_JC", 0.2)
    w = np.linspace(3000, 11000, 4001)
    mags = {k: float(synthetic_mag(w, flam(w), k)) for k in ("V_JC", "Ic_JC", "Rc_JC")}
    r = anchor.anchored_rates(ccd, {"V_JC": mags["V_JC"], "Ic_JC": mags["Ic_JC"]}, teff=5000.0, ebv=0.2)
    direct = anchor.anchored_rates(ccd, {"Rc_JC": mags["Rc_JC"]}, teff=5000.0, ebv=0.2)["R"]
    assert r["R"].source == "interpolated" and r["R"].bands == ("V_JC", "Ic_JC")
    assert r["R"].rate == pytest.approx(direct.rate, rel=0.01)


def test_target_list_rows_say_where_each_rate_came_from(ccd):
    t = Table(rows=[("Invented-A", "03:00:00", "+30:00:00", 12.0, 12.9, 11.0, "", 0.1),
                    ("Invented-B", "03:10:00", "+30:00:00", 12.0, np.nan, np.nan, "", 0.0),
                    ("Invented-C", "03:20:00", "+30:00:00", 12.0, 99.999, 11.5, "", 0.0)],
              names=["name", "ra", "dec", "V_JC", "B_JC", "Ic_JC", "teff", "ebv"])
    rows = plan.parse_targets(t)
    assert rows[0]["photometry"].keys() == {"V_JC", "B_JC", "Ic_JC"}
    assert "placeholder" in rows[2]["notes"][0] and "B_JC" not in rows[2]["photometry"]
    p = plan.plan_night(ccd, rows, "2026-11-08", snr=50.0, moon=False)
    src = {(r["target"], r["filter"]): (r["rate_source"], r["spectrum"]) for r in p}
    assert src[("Invented-A", "B")] == ("measured", "engine") and src[("Invented-A", "R")][0] == "interpolated"
    assert src[("Invented-B", "I")] == ("template", "template")  # one band: the reported fallback
    assert "template" in p[(p["target"] == "Invented-B") & (p["filter"] == "I")][0]["rate_note"]
    assert len(p) == 12  # rows in = rows out, per filter


def test_readme_demo_list_is_planned_from_its_own_magnitudes(ccd):
    rows = plan.read_targets(Path(__file__).resolve().parents[1] / "catalogs_demo" / "targets.csv")
    p = plan.plan_night(ccd, rows, "2026-11-08", snr=50.0)
    ok = p[np.asarray(p["rate_source"], str) != ""]
    assert len(ok) and np.mean(np.asarray(ok["rate_source"], str) == "measured") > 0.95
    # the measured B rate of each star follows its measured B magnitude: rate x 10^(0.4 B) is one zero point
    b = ok[ok["filter"] == "B"]
    zp = np.asarray(b["star_rate"], float) / np.asarray(
        [counts.extinction_factor(0.30, x) for x in b["airmass"]]) * 10 ** (0.4 * np.asarray(b["mag"], float))
    m = np.asarray(b["rate_source"], str) == "measured"
    np.testing.assert_allclose(zp[m], counts.zero_point_rate(ccd, "B"), rtol=1e-3)
    assert set(np.round(np.asarray(ok["ebv"], float), 3)) != {0.0}  # each star's own reddening is used


# ---------------------------------------------------------------- moonlight
def test_krisciunas_schaefer_values():
    """Krisciunas & Schaefer 1991 (PASP 103, 1033).  The paper itself could not be read here; its equations
    are checked against two independent public transcriptions of it (a pyephem-based ``KS91Moon`` class,
    2015, and a Python port of the ``lunskybright`` routine by A. Price-Whelan, 2011), which agree with each
    other and with us on: the illuminance I*(α) = 10^(−0.4 (3.84 + 0.026|α| + 4e-9 α⁴)) (eq. 20, and
    eq. 8's I* = 10^(−0.4 (m + 16.57)), so a full Moon of V = −12.73); the Rayleigh term
    2.29e5 (1.06 + cos² ρ) = 10^5.36 (…) (eq. 21's first term; one copy rounds it to 2.3e5); the Mie term
    10^(6.15 − ρ/40) for ρ > 10° (eq. 21); the scattering airmass (1 − 0.96 sin² Z)^(−1/2) (eq. 3); B_moon
    = f(ρ) I* 10^(−0.4 k X(Z_m)) [1 − 10^(−0.4 k X(Z))] (eq. 15); and the conversion V = 22.50 − 1.08574
    ln(B/34.08) (eq. 1; ours is written (20.7233 − ln(B/34.08)) / 0.92104).  The worked value: a Python
    implementation of the same equations documents 19.855 mag/arcsec² of moonlight for Z = 20°, Z_moon = 70°,
    ρ = 50°, α = 45°, k = 0.15 (not the paper's own example, which we could not read)."""
    # I*(α) (eq. 20) and the full Moon's V magnitude through eq. 8
    assert moon.moon_illuminance(0.0) == pytest.approx(10 ** (-0.4 * (-12.73 + 16.57)))
    assert moon.moon_illuminance(90.0) / moon.moon_illuminance(0.0) == pytest.approx(
        10 ** (-0.4 * (0.026 * 90 + 4e-9 * 90**4)))
    # f(ρ) (eq. 21) with the transcriptions' Rayleigh constant 229087 and Mie term
    for rho in (15.0, 60.0, 90.0, 150.0):
        assert moon.scattering_function(rho) == pytest.approx(
            229087.0 * (1.06 + math.cos(math.radians(rho)) ** 2) + 10 ** (6.15 - rho / 40), rel=3e-6)
    # eq. 1, both directions, in the transcriptions' form
    for b in (50.0, 79.0, 1000.0):
        assert float(moon.vmag_from_nl(b)) == pytest.approx(22.50 - 1.08574 * math.log(b / 34.08), abs=5e-4)  # rounded constants
    assert moon.nl_from_vmag(21.587) == pytest.approx(79.0, rel=2e-3)
    # eq. 15 written out as the transcriptions do, at an arbitrary geometry
    a, rho, z, zm, k = 30.0, 40.0, 35.0, 50.0, 0.18
    x = lambda zd: 1 / math.sqrt(1 - 0.96 * math.sin(math.radians(zd)) ** 2)  # noqa: E731
    b = (229087.0 * (1.06 + math.cos(math.radians(rho)) ** 2) + 10 ** (6.15 - rho / 40)) \
        * 10 ** (-0.4 * (3.84 + 0.026 * a + 4e-9 * a**4)) * 10 ** (-0.4 * k * x(zm)) * (1 - 10 ** (-0.4 * k * x(z)))
    assert float(moon.moon_sky_brightness_nl(a, rho, z, zm, k)) == pytest.approx(b, rel=3e-6)
    # the documented worked value
    assert float(moon.moonlight_vmag(45.0, 50.0, 20.0, 70.0, 0.15)) == pytest.approx(19.855, abs=0.001)
    # a full Moon 60 deg from the target, both high: the V sky brightens by 2-4 mag (common practice)
    _, dv = moon.moon_sky_vmag(21.5, 5.0, 60.0, 20.0, 30.0, 0.15)
    assert -4.0 < float(dv) < -2.0
    assert float(moon.moonlight_vmag(5.0, 60.0, 20.0, 100.0, 0.15)) == math.inf  # Moon below the horizon
    assert math.isnan(float(moon.moonlight_vmag(5.0, 5.0, 20.0, 30.0, 0.15)))  # too close: not modelled


def test_full_moon_lengthens_a_faint_star_exposure(ccd):
    mu = float(moon.moonlight_vmag(5.0, 60.0, 20.0, 30.0, 0.15))
    dark = plan.plan_target(ccd, 18.0, "V", teff=5000.0, snr=30.0)
    bright = plan.plan_target(ccd, 18.0, "V", teff=5000.0, snr=30.0, moon_v_arcsec2=mu)
    assert np.all(bright["moon_sky_rate"] > 0) and np.all(dark["moon_sky_rate"] == 0)
    assert np.all(bright["exposure"] > 2 * dark["exposure"])  # sky-limited: t grows with the sky (CCD equation)
    assert np.all(bright["sky_mag"] < dark["sky_mag"] - 1.0)
    # the colour assumption (solar spectrum) makes moonlight redder than the dark sky's A0 assumption
    assert bright.meta["moonlight"].startswith("Krisciunas & Schaefer 1991")


def test_night_plan_near_full_moon_and_no_moon(ccd):
    t = Table(rows=[("Invented-M", "08:00:00", "+20:00:00", 17.5, "V_JC", 5000.0)],
              names=["name", "ra", "dec", "mag", "band", "teff"])
    lit = plan.plan_night(ccd, t, "2026-11-24", snr=30.0)
    dark = plan.plan_night(ccd, t, "2026-11-24", snr=30.0, moon=False)
    assert lit["moon_illuminated"][0] > 0.95 and lit["moon_delta_v"][0] < -1.0
    assert np.all(lit["exposure"] > dark["exposure"]) and np.all(dark["moon_sky_rate"] == 0)


# ---------------------------------------------------------------- the plan reads as a plan
def test_windows_follow_twilight_and_summary_has_one_row_per_target(ccd):
    t = Table(rows=[("Invented-N", "23:00:00", "+60:00:00", 11.0, "V_JC"), ("Invented-S", "03:00:00", "+10:00:00",
                                                                           12.0, "V_JC")],
              names=["name", "ra", "dec", "mag", "band"])
    p = plan.plan_night(ccd, t, "2026-11-08", snr=50.0, moon=False, step_min=20.0)
    n = p[p["target"] == "Invented-N"][0]
    assert n["window_start"] == p.meta["dark_start"]  # a circumpolar star: the window opens at twilight itself
    s = plan.night_summary(p)
    assert list(s["target"]) == ["Invented-N", "Invented-S"]
    assert s["best_time_local"][0][11:13] == f"{(int(s['best_time'][0][11:13]) + 1) % 24:02d}"  # UTC+1 site
    assert len(s["window_local"][0]) == 11 and s["rate_sources"][0].count(":") == 4
    assert np.all(np.asarray(s["total_time"], float) > 0)


def test_twilight_windows_are_flagged(ccd):
    t = Table(rows=[("Invented-W", "15:00:00", "0", 9.0, "V_JC")], names=["name", "ra", "dec", "mag", "band"])
    p = plan.plan_night(ccd, t, "2026-11-08", snr=50.0, sun_limit="civil", min_alt_deg=5.0, moon=False)
    # an evening target seen only in twilight: its best time is in twilight, and the flag says the sky is not modelled
    assert "best time is in twilight" in p["flags"][0] and "not modelled" in p["flags"][0]
    assert p["window_start"][0] == p.meta["dark_start"] == p.meta["twilight"]["civil_evening"]
    assert p.meta["twilight_sky"].startswith("not modelled")
    # the default (astronomical darkness) leaves twilight out of every window
    d = plan.plan_night(ccd, t, "2026-11-08", snr=50.0, min_alt_deg=5.0, moon=False)
    assert "twilight" not in d["flags"][0] and d.meta["twilight_sky"].startswith("not needed")
    code, out, _, _ = _cli("nightplan", str(_write(t)), "--date", "2026-11-08", "--instrument", str(CCD_FILE),
                           "--snr", "50", "--dark", "civil", "--min-alt", "5", "--no-moon")
    assert code == 0 and "twilight sky not modelled" in out.splitlines()[0]


def _write(t):
    import tempfile

    path = Path(tempfile.mkdtemp()) / "targets.csv"
    t.write(path, format="ascii.csv")
    return path


def test_plan_target_needs_the_band_of_its_magnitude(ccd):
    with pytest.raises(StelltempError, match="passband of the magnitude"):
        plan.plan_target(ccd, 12.0, snr=10)
    with pytest.raises(StelltempError, match="not both"):
        plan.plan_target(ccd, 12.0, "V", photometry={"V_JC": 12.0}, snr=10)


# ---------------------------------------------------------------- command line
def _cli(*argv):
    import contextlib
    import io
    import json

    from stelltemp.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(list(argv))
    return code, out.getvalue(), err.getvalue(), (json.loads(out.getvalue()) if "--json" in argv and code == 0
                                                  else None)


def test_cli_exposure_needs_bands_and_takes_several():
    code, _, err, _ = _cli("exposure", "--instrument", str(CCD_FILE), "--mag", "12", "--snr", "50")
    assert code == 2 and "--mag BAND=MAG" in err and "Traceback" not in err
    code, _, _, doc = _cli("exposure", "--instrument", str(CCD_FILE), "--mag", "V=12.0,0.02", "--mag", "Ic_JC=10.9",
                           "--snr", "50", "--json")
    assert code == 0
    src = {r["filter"]: r["rate_source"] for r in doc["rows"]}
    assert src == {"B": "extrapolated", "V": "measured", "R": "interpolated", "I": "measured"}
    assert doc["rows"][0]["spectrum"] == "engine"


def test_cli_exposure_moon_at_a_time_and_no_moon():
    base = ("exposure", "--instrument", str(CCD_FILE), "--mag", "V=17", "--snr", "50", "--time", "2026-11-24T23:00",
            "--ra", "08:00:00", "--dec", "20", "--json")
    _, _, _, lit = _cli(*base)
    _, _, _, dark = _cli(*base, "--no-moon")
    assert lit["meta"]["moon"]["moon_illuminated"] > 0.95
    for a, b in zip(lit["rows"], dark["rows"]):
        assert a["moon_sky_rate"] > 0 == b["moon_sky_rate"] and a["exposure"] > b["exposure"]
    code, _, err, _ = _cli(*base[:-1], "--time", "2026-11-25T05:50")  # morning, Sun between -18 and -12 deg
    assert code == 0 and "TWILIGHT" in err


def test_cli_nightplan_prints_a_summary_then_the_filters(tmp_path):
    p = tmp_path / "t.csv"
    p.write_text("name,ra,dec,B_JC,V_JC,Ic_JC,ebv\nInvented-1,03:00:00,+20:00:00,12.9,12.0,11.0,0.1\n"
                 "Invented-2,05:00:00,+10:00:00,,13.0,,\n")
    code, out, _, _ = _cli("nightplan", str(p), "--date", "2026-11-08", "--instrument", str(CCD_FILE), "--snr", "50")
    assert code == 0
    lines = out.splitlines()
    assert "local time = UTC+1 h" in lines[0]
    assert lines[1].startswith("target") and "best_time_local" in lines[1] and "window_local" in lines[1]
    assert lines[2].startswith("Invented-1") and lines[3].startswith("Invented-2") and lines[4] == ""
    assert "rate_source" in lines[5]
    code, _, _, doc = _cli("nightplan", str(p), "--date", "2026-11-08", "--instrument", str(CCD_FILE), "--snr", "50",
                           "--json")
    assert [r["target"] for r in doc["summary"]["rows"]] == ["Invented-1", "Invented-2"]
    assert len(doc["rows"]) == 8


# ---------------------------------------------------------------- one engine call for a whole list
def test_one_engine_call_for_a_list_equals_one_call_per_star(ccd, monkeypatch):
    """The night plan fits all its stars' temperatures in one engine call; each star's spectrum is the one a
    call of its own gives (rows differ in their measured bands: two bands, five bands, a placeholder, one band,
    a given teff)."""
    from stelltemp import engine

    rows = plan.read_targets(Path(__file__).resolve().parents[1] / "catalogs_demo" / "targets.csv")
    picked = [rows[i] for i in (0, 1, 6, 22)]
    phots = [anchor.clean_photometry(plan.target_photometry(ccd, t)) for t in picked]
    phots += [{"B_JC": (12.9, 0.02), "V_JC": (12.0, math.nan)}, {"V_JC": (12.0, 0.01)},
              {"V_JC": (12.0, 0.01), "Ic_JC": (11.0, 0.01)}]
    teffs = [None] * 6 + [5200.0]
    ebvs, errs = [t["ebv"] for t in picked] + [0.1, 0.0, 0.2], [t["ebv_err"] for t in picked] + [0.0, 0.0, 0.0]
    calls = []
    real = engine.estimate
    monkeypatch.setattr(engine, "estimate", lambda *a, **k: calls.append(1) or real(*a, **k))
    joint = anchor.star_spectra(phots, teffs, ebvs, errs)
    assert len(calls) == 1
    single = [anchor.star_spectrum(p, t, e, de) for p, t, e, de in zip(phots, teffs, ebvs, errs)]
    assert joint == single  # teff, E(B-V), origin and note, exactly
    assert [s.origin for s in joint][-3:] == ["engine", "template", "given"]
    # and the plan: rates from the joint spectra equal rates computed star by star
    got = plan._targets_rates(ccd, picked)
    for t, g in zip(picked, got):
        one = anchor.anchored_rates(ccd, plan.target_photometry(ccd, t), teff=t["teff"], ebv=t["ebv"],
                                    ebv_err=t["ebv_err"])
        assert {f: g[f].rate for f in ccd.filters} == {f: one[f].rate for f in ccd.filters}


def test_no_moonlight_is_zero_not_minus_zero():
    _, dv = moon.moon_sky_vmag(21.5, 5.0, 60.0, 20.0, 100.0, 0.15)  # Moon below the horizon
    assert float(dv) == 0.0 and math.copysign(1.0, float(dv)) == 1.0
