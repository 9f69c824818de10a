"""Temperature engine: colour inversion, multi-band fit, uncertainties, flags, derived quantities."""

import numpy as np
import pytest
from astropy import units as u
from astropy.modeling.physical_models import BlackBody
from astropy.table import Table
from dust_extinction.parameter_averages import G23
from scipy.optimize import brentq

from stelltemp import bandgrid as bg
from stelltemp.engine import estimate, flags as fl
from stelltemp.engine.colour import colour_interval, invert_colour, rayleigh_jeans_colour
from stelltemp.errors import StelltempError
from stelltemp.photometry import synthetic_mag
from stelltemp.reference import sun_spectrum, vega_spectrum

FIVE = ["B_JC", "V_JC", "Ic_JC", "J_2MASS", "Ks_2MASS"]


def synth(keys, t, ebv, theta_mas=1.0):
    """Noise-free magnitudes of reddened blackbodies from the tables."""
    theta = np.asarray(theta_mas) * np.pi / 180 / 3600 / 1000
    return {k: bg.blackbody_mag(k, t, ebv, angular_diameter_rad=theta) for k in keys}


# --------------------------------------------------------------- inversion
def test_colour_round_trip_random_temperatures_and_reddenings():
    # Project requirement: recover T within 1e-5 relative from 2,500 to 40,000 K.
    rng = np.random.default_rng(11)
    t = np.exp(rng.uniform(np.log(2500), np.log(40000), 20000))
    e = rng.uniform(0, 3, t.size)
    for blue, red in [("B_JC", "V_JC"), ("V_JC", "Ks_2MASS"), ("BP_GDR3", "RP_GDR3"), ("g_SDSS", "i_SDSS")]:
        c = bg.colour_table(blue, red).evaluate(np.log(t), e, want_de=False)[0]
        t_back, slope, flags = invert_colour(c, blue, red, e)
        assert np.all(flags == 0)
        assert np.max(np.abs(t_back / t - 1)) < 1e-5, (blue, red)
        assert np.all(slope < 0)


def _raw_curve(key):
    """Raw speclite curve read independently of stelltemp's loader."""
    from importlib import resources

    name = {"B_JC": "bessell-B", "V_JC": "bessell-V", "Ks_2MASS": "twomass-Ks"}[key]
    with resources.as_file(resources.files("speclite") / "data" / "filters" / f"{name}.ecsv") as p:
        tab = Table.read(p, format="ascii.ecsv")
    return np.asarray(tab["wavelength"], float), np.asarray(tab["response"], float)


def _brute_force_colour(t, ebv, blue, red, energy):
    """Colour of a reddened blackbody with astropy's BlackBody and plain trapezoids.

    Zero points from the CALSPEC Vega spectrum integrated the same way.
    """
    vw, vf = vega_spectrum()
    mags = []
    for key, is_energy in ((blue, energy[0]), (red, energy[1])):
        w, r = _raw_curve(key)
        grid = np.linspace(w[0], w[-1], 20001)
        resp = np.interp(grid, w, r)
        kernel = resp if is_energy else resp * grid  # energy: ∫F R dλ; photon: ∫F λ R dλ
        flam = BlackBody(t * u.K, scale=1.0 * u.erg / (u.s * u.cm**2 * u.AA * u.sr))(grid * u.AA).value
        flam = flam * 10 ** (-0.4 * 3.1 * ebv * G23(Rv=3.1)(grid * u.AA))
        vega = np.interp(grid, vw, vf)
        vega_mag = {"B_JC": 0.03, "V_JC": 0.03, "Ks_2MASS": -0.017}[key]
        mags.append(-2.5 * np.log10(np.trapezoid(flam * kernel, grid) / np.trapezoid(vega * kernel, grid))
                    + vega_mag)
    return mags[0] - mags[1]


@pytest.mark.parametrize("t_true,ebv", [(3500.0, 0.0), (5800.0, 0.4), (12000.0, 1.0), (30000.0, 0.2)])
def test_colour_temperature_matches_brute_force_solve(t_true, ebv):
    # Independent check: astropy BlackBody + plain integration + scipy root finding.
    cases = [("B_JC", "V_JC", (True, True)), ("V_JC", "Ks_2MASS", (True, False))]
    for blue, red, energy in cases:
        observed = _brute_force_colour(t_true, ebv, blue, red, energy)
        t_ref = brentq(lambda t: _brute_force_colour(t, ebv, blue, red, energy) - observed, 1500, 60000,
                       xtol=1e-6)
        t_ours, _, flags = invert_colour(observed, blue, red, ebv)
        assert flags == 0
        assert abs(t_ours / t_ref - 1) < 1e-4, (blue, red, t_ours, t_ref)


def test_too_blue_colour_has_no_solution_and_near_limit_is_a_lower_limit():
    rj = float(rayleigh_jeans_colour("B_JC", "V_JC"))
    t, _, flags = invert_colour([rj - 0.05, rj + 0.001], "B_JC", "V_JC")
    assert np.isnan(t[0]) and flags[0] & fl.NO_SOLUTION
    assert flags[1] & fl.AT_GRID_EDGE  # hotter than the 100,000 K grid: only a lower limit
    res = colour_interval([rj + 0.02], [0.03], "B_JC", "V_JC")
    assert np.isinf(res["t_hi"][0]) and res["flags"][0] & fl.RJ_LIMIT
    assert res["t_lo"][0] > 15000


def test_interval_is_asymmetric_and_more_so_towards_the_flat_hot_end():
    ratios = []
    for c in (0.5, 0.0, -0.2):
        res = colour_interval([c], [0.02], "B_JC", "V_JC")
        ratios.append((res["t_hi"][0] - res["t"][0]) / (res["t"][0] - res["t_lo"][0]))
    assert ratios[0] > 1.0  # the hot side of the interval is always the longer one
    assert ratios[0] < ratios[1] < ratios[2]
    assert ratios[2] > 1.2


# ------------------------------------------------------- honest uncertainties
def _colour_coverage(seed, n=2000):
    rng = np.random.default_rng(seed)
    t = np.exp(rng.uniform(np.log(3000), np.log(20000), n))
    e_true = rng.uniform(0, 0.8, n)
    mags = synth(["B_JC", "V_JC"], t, e_true)
    noisy = {k: v + rng.normal(0, 0.02, n) for k, v in mags.items()}
    e_obs = e_true + rng.normal(0, 0.03, n)
    res = estimate(noisy, {k: np.full(n, 0.02) for k in noisy}, ebv=e_obs, ebv_err=0.03)
    return np.mean((res["t_bb_lo"].value <= t) & (t <= res["t_bb_hi"].value))


def test_colour_intervals_cover_the_truth_68_percent():
    # Project requirement: with 2,000 simulated noisy stars the stated 68 % intervals
    # contain the true temperature 66–70 % of the time.  Errors: 0.02 mag per band,
    # E(B−V) known to ±0.03 mag.  One set of 2,000 has a binomial scatter of ±1.0 %,
    # so the requirement is checked on each of five independent sets and, tighter, on
    # their pooled 10,000 stars (±0.47 %).
    sets = [_colour_coverage(seed) for seed in range(5)]
    assert all(0.655 <= c <= 0.705 for c in sets), sets
    assert 0.665 <= np.mean(sets) <= 0.695, sets
    assert 0.66 <= sets[0] <= 0.70, sets


def test_multiband_fit_intervals_cover_the_truth_and_chi2_is_honest():
    rng = np.random.default_rng(7)
    n = 2000
    t = np.exp(rng.uniform(np.log(3000), np.log(25000), n))
    e_true = rng.uniform(0, 1, n)
    mags = synth(FIVE, t, e_true, theta_mas=rng.uniform(0.01, 1, n))
    noisy = {k: v + rng.normal(0, 0.02, n) for k, v in mags.items()}
    res = estimate(noisy, {k: np.full(n, 0.02) for k in FIVE}, ebv=e_true)
    covered = np.mean((res["t_bb_lo"].value <= t) & (t <= res["t_bb_hi"].value))
    assert 0.65 <= covered <= 0.71, covered
    # chi2 of a correct model: mean ≈ dof = 3, p-values uniform (≈0.1 % below 0.001)
    assert abs(np.mean(res["chi2"]) - 3) < 0.25
    assert np.mean(res["p_value"] < 0.05) == pytest.approx(0.05, abs=0.015)


def test_monte_carlo_agrees_with_analytic_interval():
    rng = np.random.default_rng(3)
    mags = synth(["B_JC", "V_JC"], [6000.0], [0.2])
    errs = {k: [0.01] for k in mags}
    a = estimate(mags, errs, ebv=0.2, ebv_err=0.02)
    m = estimate(mags, errs, ebv=0.2, ebv_err=0.02, monte_carlo=4000, seed=int(rng.integers(1 << 30)))
    for col in ("t_bb_lo", "t_bb_hi"):
        assert m[col][0].value == pytest.approx(a[col][0].value, rel=0.01)
    assert m.meta["uncertainty"] == "monte_carlo:4000"


def test_reddening_error_dominates_flag():
    mags = synth(["B_JC", "V_JC"], [8000.0], [0.5])
    res = estimate(mags, {k: [0.005] for k in mags}, ebv=0.5, ebv_err=0.1)
    assert res["flags"][0] & fl.REDDENING_DOMINATES
    res = estimate(mags, {k: [0.05] for k in mags}, ebv=0.5, ebv_err=0.001)
    assert not res["flags"][0] & fl.REDDENING_DOMINATES


# ------------------------------------------------------------------ fitting
def test_fit_recovers_temperature_diameter_and_reddening_without_noise():
    t = np.array([3200.0, 5000.0, 9000.0, 20000.0])
    e = np.array([0.0, 0.3, 0.8, 1.5])
    theta = np.array([2.0, 0.5, 0.1, 0.02])
    mags = synth(FIVE, t, e, theta)
    errs = {k: np.full(4, 0.01) for k in FIVE}
    res = estimate(mags, errs, ebv=e)
    assert np.allclose(res["t_bb"].value, t, rtol=1e-8)
    assert np.allclose(res["theta"].to_value(u.mas), theta, rtol=1e-7)
    free = estimate(mags, errs, ebv=e + 0.05, fit_ebv=True)
    assert np.allclose(free["t_bb"].value, t, rtol=1e-6)
    assert np.allclose(free["ebv_used"].value, e, atol=1e-6)


def test_fit_flags_a_poor_fit():
    mags = synth(FIVE, [6000.0], [0.0])
    mags["Ic_JC"] = mags["Ic_JC"] + 0.5  # one band far off
    res = estimate(mags, {k: [0.01] for k in FIVE})
    assert res["flags"][0] & fl.POOR_FIT
    assert res["p_value"][0] < 1e-3


def test_fit_ebv_needs_three_bands():
    with pytest.raises(StelltempError, match="three bands"):
        estimate(synth(["B_JC", "V_JC"], [6000.0], [0.0]), fit_ebv=True)


# ------------------------------------------------------------- bad input
def test_bad_rows_are_flagged_and_the_rest_go_on():
    mags = synth(FIVE, np.full(6, 6000.0), np.zeros(6))
    mags["B_JC"][0] = np.nan
    mags["V_JC"][1] = np.inf
    mags["J_2MASS"][2] = 99.0
    for k in FIVE:
        mags[k][3] = np.nan
    res = estimate(mags, ebv=[0, 0, 0, 0, 9.0, 0])
    assert np.isfinite(res["t_bb"][[0, 1, 2, 5]]).all()
    assert res["flags"][2] & fl.ABSURD_VALUE
    assert np.isnan(res["t_bb"][3].value) and res["flags"][3] & fl.BAD_INPUT
    assert np.isnan(res["t_bb"][4].value) and res["flags"][4] & fl.BAD_INPUT
    assert res["flag_names"][3].startswith("bad_input")


@pytest.mark.parametrize("kwargs,message", [
    ({"law": "XYZ"}, "unknown extinction law"),
    ({"rv": 9.0}, "outside the range"),
    ({"method": "guess"}, "unknown method"),
])
def test_bad_arguments_raise_one_clear_error(kwargs, message):
    with pytest.raises(StelltempError, match=message):
        estimate({"B_JC": [1.0], "V_JC": [0.5]}, **kwargs)


def test_unknown_passband_is_named():
    with pytest.raises(StelltempError, match="jc.Q"):
        estimate({"B_JC": [1.0], "jc.Q": [0.5]})


# --------------------------------------------------- the Sun, outside checks
def _sun_at_10pc():
    w, f = sun_spectrum()
    scale = (1 / (10 * 206264.806)) ** 2  # 1 AU -> 10 pc
    keys = ["B_JC", "V_JC", "Rc_JC", "Ic_JC", "J_2MASS", "H_2MASS", "Ks_2MASS", "BP_GDR3", "RP_GDR3"]
    return {k: np.array([synthetic_mag(w, f * scale, k)]) for k in keys}


def test_solar_spectrum_through_calibrations_gives_nominal_teff():
    # IAU 2015 Resolution B3: nominal solar Teff = 5772 K.  The Kurucz (1993) model
    # colours are ~0.03 mag redder in B−V than the observed Sun (Ramírez et al. 2012,
    # ApJ 752, 5), which pulls the calibrated value ~50 K cool; the requirement is 60 K.
    res = estimate(_sun_at_10pc())
    teff = res["teff_cal"][0].value
    print(f"calibrated Teff of the solar model: {teff:.0f} K (nominal 5772 K)")
    assert abs(teff - 5772) < 60
    assert res["n_cal"][0] >= 6


def test_solar_radius_and_luminosity_from_parallax():
    # IAU 2015 B3: R☉ and L☉ nominal.  A blackbody fit to a real spectrum is not exact:
    # the fitted T_bb is ~100 K below Teff and θ compensates, so R and L agree to a few %.
    res = estimate(_sun_at_10pc(), parallax=100.0, parallax_err=0.01)
    assert res["radius"][0].to_value(u.R_sun) == pytest.approx(1.0, rel=0.08)
    assert res["luminosity"][0].to_value(u.L_sun) == pytest.approx(1.0, rel=0.08)
    assert res["radius_err"][0].value > 0


def test_derived_quantities_follow_the_laws():
    mags = synth(FIVE, [5772.0], [0.0], theta_mas=[1.0])
    res = estimate(mags, {k: [0.01] for k in FIVE}, parallax=100.0, parallax_err=1.0)
    # Wien: λ_max = b / T with CODATA 2018 b = 2.897771955e-3 m K
    assert res["lambda_peak"][0].to_value(u.m) == pytest.approx(2.897771955e-3 / 5772.0, rel=1e-8)
    # Stefan–Boltzmann: F = σ T⁴ (θ/2)², CODATA 2018 σ
    theta = 1e-3 / 206264.806
    fbol = 5.670374419e-8 * 5772.0**4 * (theta / 2) ** 2  # W m^-2
    assert res["fbol"][0].to_value(u.W / u.m**2) == pytest.approx(fbol, rel=1e-6)
    # R = θ/2 · d: 1 mas at 10 pc is 0.5 · 10 pc · 4.8481e-9 rad = 1.0752 R☉ (IAU 2015 B3 R☉)
    assert res["radius"][0].to_value(u.R_sun) == pytest.approx(
        0.5 * theta * 10 * 3.0856775814913673e16 / 6.957e8, rel=1e-6)
    # σ_R/R = σ_θ/θ ⊕ σ_ϖ/ϖ (first order)
    rel = np.hypot(res["theta_err"][0].value / res["theta"][0].value, 0.01)
    assert res["radius_err"][0].to_value(u.R_sun) == pytest.approx(res["radius"][0].value * rel, rel=1e-6)


def test_blackbody_note_is_in_the_output():
    res = estimate({"B_JC": [1.0], "V_JC": [0.5]})
    assert "not an effective temperature" in res.meta["note"]


@pytest.mark.parametrize("keys", [["B_JC", "V_JC"], FIVE])
def test_empty_input_gives_an_empty_table(keys):
    res = estimate({k: np.array([]) for k in keys})
    assert len(res) == 0 and "t_bb" in res.colnames


def test_quantities_are_accepted_at_the_edge():
    mags = synth(FIVE, [5772.0], [0.0], theta_mas=[1.0])
    plain = estimate(mags, parallax=100.0, parallax_err=1.0)
    quant = estimate({k: v * u.mag for k, v in mags.items()}, ebv=0.0 * u.mag,
                     parallax=0.1 * u.arcsec, parallax_err=1.0 * u.mas)
    assert quant["radius"][0].value == pytest.approx(plain["radius"][0].value, rel=1e-12)
    with pytest.raises(StelltempError, match="parallax"):
        estimate(mags, parallax=3 * u.K)


def test_astropy_tables_go_through_the_catalogue_layer():
    from astropy.table import Table

    from stelltemp.catalog import estimate_table

    mags = synth(["B_JC", "V_JC", "Ks_2MASS"], [4500.0, 9000.0], [0.1, 0.1])
    table = Table({**{k: v for k, v in mags.items()}, "ebv": [0.1, 0.1]})
    out = estimate_table(table)
    assert np.allclose(out["t_bb"].to_value(u.K), [4500.0, 9000.0], rtol=1e-6)
    assert "B_JC" in out.colnames  # input columns kept
    # one table type for the API: estimate_table returns what estimate returns
    direct = estimate(mags, ebv=[0.1, 0.1])
    assert type(out) is type(direct)
    assert out["t_bb"].unit == direct["t_bb"].unit == u.K


def test_only_scalars_broadcast_across_stars():
    with pytest.raises(StelltempError, match=r"magnitudes in V_JC has 1 value for 2 stars"):
        estimate({"B_JC": [10.0, 11.0], "V_JC": [9.5]})
    with pytest.raises(StelltempError, match=r"E\(B-V\) has 1 value for 2 stars"):
        estimate({"B_JC": [10.0, 11.0], "V_JC": [9.5, 10.4]}, ebv=[0.1])
    # a scalar still applies to every star, and one star may come as length-1 arrays
    both = estimate({"B_JC": [10.0, 11.0], "V_JC": [9.5, 10.4]}, ebv=0.1)
    assert len(both) == 2 and np.all(both["ebv_used"].to_value(u.mag) == 0.1)
    assert len(estimate({"B_JC": [10.0], "V_JC": [9.5]}, ebv=[0.1])) == 1


def test_av_is_converted_with_rv():
    mags = synth(["B_JC", "V_JC"], [7000.0], [0.4])
    by_ebv = estimate(mags, ebv=0.4, ebv_err=0.02, rv=3.1)
    by_av = estimate(mags, av=1.24, av_err=0.062, rv=3.1)
    assert by_av["t_bb"][0].value == pytest.approx(by_ebv["t_bb"][0].value, rel=1e-10)
    assert by_av["ebv_used_err"][0].value == pytest.approx(0.02)
    with pytest.raises(StelltempError, match="not both"):
        estimate(mags, ebv=0.4, av=1.24)


def test_a_user_passband_file_works_like_a_built_in(tmp_path):
    # an invented Gaussian filter, AB system, photon-counting
    w = np.arange(4000.0, 7001.0, 50.0)
    np.savetxt(tmp_path / "demo_filter.txt", np.c_[w, np.exp(-0.5 * ((w - 5500) / 400) ** 2)],
               header="unit: Angstrom")
    user = str(tmp_path / "demo_filter.txt")
    lam = np.linspace(900.0, 40000.0, 40000)
    from stelltemp.planck import planck_lambda_cgs

    flam = planck_lambda_cgs(6500.0, lam) * 1e-20
    mags = {k: [float(synthetic_mag(lam, flam, k))] for k in ("B_JC", user, "Ks_2MASS")}
    res = estimate(mags, {k: [0.01] for k in mags})
    assert res["t_bb"][0].value == pytest.approx(6500.0, rel=1e-4)
    assert "file:demo_filter" in res.meta["passbands"]
