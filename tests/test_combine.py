"""Calibrated T_eff with the full covariance, flags with severities, recorded assumptions."""

import numpy as np
import pytest

from stelltemp.engine import estimate
from stelltemp.engine import flags as fl
from stelltemp.engine.combine import calibrated_teff
from stelltemp.engine.notes import RowNotes

from test_coverage import EBV_ERR, FEH_ERR, simulate_calibrated


@pytest.fixture(scope="module")
def stars():
    teff, obs, errs, ebv, feh = simulate_calibrated(7)
    sel = slice(0, 100)
    return (teff[sel], {k: v[sel] for k, v in obs.items()}, {k: v[sel] for k, v in errs.items()},
            ebv[sel], feh[sel])


@pytest.mark.parametrize("kw", [dict(), dict(fit_ebv=True), dict(ebv_err=0.0, cal_ebv=True)],
                         ids=["ebv_given", "ebv_fitted_prior", "ebv_from_calibrations"])
def test_monte_carlo_agrees_with_analytic(stars, kw):
    teff, obs, errs, ebv, feh = stars
    args = dict(ebv=ebv, ebv_err=EBV_ERR, feh=feh, feh_err=FEH_ERR)
    args.update(kw)
    ana = estimate(obs, errs, **args)
    mc = estimate(obs, errs, monte_carlo=2000, seed=5, **args)
    half = (mc["teff_cal_hi"] - mc["teff_cal_lo"]).value / 2
    ratio = half / ana["teff_cal_err"].value
    ok = np.isfinite(ratio)
    assert ok.mean() > 0.95
    # 2,000 draws: the percentile half-width scatters by ~2 % about the analytic 1σ
    assert abs(np.median(ratio[ok]) - 1) < 0.02
    assert np.mean(np.abs(ratio[ok] - 1) < 0.06) > 0.9
    assert np.allclose(mc["teff_cal"], ana["teff_cal"], equal_nan=True)


def test_shared_reddening_error_is_propagated(stars):
    """Moving E(B-V) by its error moves teff_cal by about its error (the issue-11 case)."""
    teff, obs, errs, ebv, feh = stars
    row = {k: v[:1] for k, v in obs.items()}
    e1 = {k: v[:1] for k, v in errs.items()}
    res = estimate(row, e1, ebv=ebv[:1], ebv_err=0.05, feh=feh[:1])
    up = estimate(row, e1, ebv=ebv[:1] + 0.05, ebv_err=0.0, feh=feh[:1])
    down = estimate(row, e1, ebv=ebv[:1] - 0.05, ebv_err=0.0, feh=feh[:1])
    shift = (up["teff_cal"] - down["teff_cal"]).value[0] / 2
    assert shift > 50
    # the colours constrain E(B-V) a little themselves, so the error is somewhat below the
    # full shift; treating the relations as independent gave less than half of it
    assert 0.8 * shift < res["teff_cal_err"].value[0] < 1.1 * shift


def test_relations_reported_with_detail(stars):
    teff, obs, errs, ebv, feh = stars
    res = estimate(obs, errs, ebv=ebv, ebv_err=EBV_ERR, feh=feh, cal_detail=True)
    assert "c10_vk" in res["cal_used"][0].split(",")
    each = res["teff_c10_vk"].value
    assert np.all(res["teff_c10_vk_err"].value[np.isfinite(each)] > 25.0)  # at least its scatter
    # the combination is at least as precise as its best relation
    best = np.nanmin(np.column_stack([res[f"teff_{k}_err"].value for k in res["cal_used"][0].split(",")]),
                     axis=1)
    assert res["teff_cal_err"].value[0] <= best[0] + 1e-6


def test_same_relation_twice_keeps_its_scatter():
    """A relation entered twice (two copies of the same colour) is not averaged down."""
    m = np.array([[10.64, 10.0, 8.5, 8.5]])
    keys = ["B_JC", "V_JC", "Ks_2MASS", "Ks_2MASS"]
    one = calibrated_teff(m[:, :3], np.full((1, 3), 1e-4), keys[:3], np.array([5800.0]),
                          np.zeros(1), np.zeros(1))
    assert one.n_used[0] == 2
    # with negligible photometric errors the error is the scatters': 1/sqrt(1/73² + 1/25²)
    assert one.teff_err[0] == pytest.approx(1 / np.sqrt(1 / 73.0**2 + 1 / 25.0**2), rel=0.01)


def test_colours_that_disagree_are_flagged():
    m = {"B_JC": [10.64, 10.64], "V_JC": [10.0, 10.0], "Ic_JC": [9.30, 9.30], "Ks_2MASS": [8.5, 7.9]}
    res = estimate(m, {k: [0.01, 0.01] for k in m}, feh=0.0, logg=4.4)
    assert not res["flags"][0] & fl.COLOURS_DISAGREE
    assert res["flags"][1] & fl.COLOURS_DISAGREE
    assert res["severity"][1] == "warning"


def test_calibration_ebv_recovers_the_reddening(stars):
    """E(B-V) from the calibrations alone, with its error (no prior)."""
    teff, obs, errs, ebv, feh = stars
    res = estimate(obs, errs, ebv=0.0, ebv_err=0.0, cal_ebv=True, feh=feh, feh_err=FEH_ERR)
    got = res["ebv_cal"].value
    err = res["ebv_cal_err"].value
    ok = np.isfinite(err)
    assert ok.mean() > 0.95  # stars with fewer than three usable colours get none
    got, err, ebv = got[ok], err[ok], ebv[ok]
    assert np.all((err > 0.03) & (err < 0.3))
    # compared with the given (noisy, ±0.05) values: consistent within the combined errors
    z = (got - ebv) / np.hypot(err, EBV_ERR)
    assert abs(np.mean(z)) < 0.25 and 0.7 < np.std(z) < 1.3


def test_flags_have_severities_and_rules():
    assert set(fl.SEVERITY) == set(fl.NAMES) == set(fl.RULES)
    levels = fl.row_severity([0, fl.POOR_FIT, fl.POOR_FIT | fl.RJ_LIMIT, 0], [True, True, True, False])
    assert list(fl.severity_names(levels)) == ["", "info", "warning", "unusable"]
    s = fl.summary([0, fl.POOR_FIT, fl.POOR_FIT | fl.RJ_LIMIT, 0], levels)
    assert (s["clean"], s["info"], s["warning"], s["unusable"]) == (1, 1, 1, 1)
    assert s["by_flag"] == {"rayleigh_jeans": 1, "not_blackbody": 2}


def test_assumptions_are_recorded():
    m = {"B_JC": [10.64, 10.64], "V_JC": [10.0, 10.0], "Ks_2MASS": [8.5, 8.5]}
    errs = {"B_JC": [0.02, np.nan], "V_JC": [0.02, 0.02], "Ks_2MASS": [0.02, 0.02]}
    res = estimate(m, errs, parallax=[10.0, 10.0])
    notes = list(res["assumed"])
    assert "B_JC error 0.03 mag assumed" in notes[1] and "B_JC error" not in notes[0]
    for text in ("E(B-V) = 0 assumed", "[Fe/H] = 0 assumed", "dwarf relations assumed",
                 "parallax error unknown"):
        assert all(text in n for n in notes)
        assert any(text in k for k in res.meta["assumptions"])
    given = estimate(m, errs, ebv=0.1, ebv_err=0.02, feh=0.0, logg=4.4, parallax=[10, 10],
                     parallax_err=[0.1, 0.1])
    assert given["assumed"][0] == ""


def test_negative_error_drops_the_band():
    m = {"B_JC": [10.64], "V_JC": [10.0], "Ks_2MASS": [8.5]}
    res = estimate(m, {"B_JC": [-0.02], "V_JC": [0.02], "Ks_2MASS": [0.02]}, feh=0.0, logg=4.4)
    assert res["flags"][0] & fl.ABSURD_VALUE
    assert res["n_bands"][0] == 2
    assert res["cal_used"][0] == "c10_vk"


def test_row_notes_join_per_row():
    notes = RowNotes(2)
    notes.add([True, False], "a")
    notes.add(True, "b")
    assert list(notes.texts()) == ["a; b", "b"]
    assert notes.counts() == {"a": 1, "b": 2}


def test_outside_calibration_only_for_a_colour_that_should_have_worked():
    """B-V = 2.0 for a star whose V-Ks says ~5800 K: C10 B-V covers 5800 K, so the colour is suspect."""
    m = {"B_JC": [10.64, 12.0], "V_JC": [10.0, 10.0], "Ks_2MASS": [8.5, 8.5]}
    res = estimate(m, {k: [0.01, 0.01] for k in m}, feh=0.0, logg=4.4)
    assert not res["flags"][0] & fl.OUTSIDE_CALIBRATION
    assert res["flags"][1] & fl.OUTSIDE_CALIBRATION and res["cal_used"][1] == "c10_vk"



def test_reddening_share_is_the_variance_the_ebv_error_adds():
    # analytic share against the numeric one: the same stars again with E(B-V) exactly known
    m = np.array([[10.64, 10.0, 8.5], [10.64, 10.0, 8.5], [11.2, 10.0, 7.6], [11.2, 10.0, 7.6]])
    keys = ["B_JC", "V_JC", "Ks_2MASS"]
    sig = np.array([[0.005] * 3, [0.02] * 3, [0.005] * 3, [0.03] * 3])
    t_bb = np.full(4, 5800.0)
    ebv = np.array([0.0, 0.0, 0.1, 0.1])
    args = dict(feh=np.zeros(4), logg=np.full(4, 4.4))
    for ebv_err in (0.005, 0.05, 0.3):
        err = np.full(4, ebv_err)
        full = calibrated_teff(m, sig, keys, t_bb, ebv, err, **args)
        known = calibrated_teff(m, sig, keys, t_bb, ebv, np.zeros(4), **args)
        numeric = 1 - known.teff_err ** 2 / full.teff_err ** 2
        # the linearisation point moves a little with the weights: agreement to 0.01
        assert np.allclose(full.ebv_share, numeric, atol=0.01)
    # E(B-V) fitted with a prior: the share against E(B-V) held at the fitted value
    fit = calibrated_teff(m, sig, keys, t_bb, ebv, np.full(4, 0.05), fit_ebv=True, **args)
    held = calibrated_teff(m, sig, keys, t_bb, fit.ebv, np.zeros(4), **args)
    assert np.allclose(fit.ebv_share, 1 - held.teff_err ** 2 / fit.teff_err ** 2, atol=0.01)


def test_reddening_dominates_is_judged_on_the_calibrated_temperature():
    m = {"B_JC": [10.64], "V_JC": [10.0], "Ks_2MASS": [8.5]}
    e = {k: [0.005] for k in m}
    # 0.05 mag: the error grows from 25 K to 160 K (share 0.98); 0.005 mag: 25 K to 32 K (0.38)
    assert estimate(m, e, ebv=0.0, ebv_err=0.05, feh=0.0, logg=4.4)["flags"][0] & fl.REDDENING_DOMINATES
    assert not estimate(m, e, ebv=0.0, ebv_err=0.005, feh=0.0, logg=4.4)["flags"][0] & fl.REDDENING_DOMINATES


def test_a_combination_that_cycles_is_quoted_over_its_cycle_and_flagged(monkeypatch):
    """Tabulated relations have kinks: at a node the weights jump and the iteration can cycle.

    Blackbodies of 9,000 and 17,000 K (invented test stars, E(B−V) 0.1 ± 0.05) cycle through
    several values; 11,000 K settles.  A cycling star is flagged, quoted at the middle of the
    values it goes through, with half their span in its error, so that the answer hardly
    depends on how many passes are allowed; a settled star does not depend on it at all.
    """
    from stelltemp import bandgrid as bg
    from stelltemp.engine import combine

    keys = ["B_JC", "V_JC", "Ic_JC", "J_2MASS", "Ks_2MASS"]
    t = np.array([9000.0, 17000.0, 11000.0])
    e = np.full(t.size, 0.1)
    m = {k: bg.band_table(k).evaluate(np.log(t), e, want_de=False)[0] + 10.0 for k in keys}
    errs = {k: 0.02 for k in keys}

    seen = []
    real = combine._combine_pass

    def spy(*args, **kwargs):
        out = real(*args, **kwargs)
        seen.append(out[0][:, 0].copy())
        return out

    quoted = estimate(m, errs, ebv=e, ebv_err=0.05)
    monkeypatch.setattr(combine, "_ITERATIONS", 40)
    monkeypatch.setattr(combine, "_combine_pass", spy)
    monkeypatch.setenv("STELLTEMP_JIT", "0")  # the numpy passes, which the spy sees (the compiled twin: same bits)
    longer = estimate(m, errs, ebv=e, ebv_err=0.05)
    flags = np.asarray(quoted["flags"])
    assert [bool(f & fl.NOT_SETTLED) for f in flags] == [True, True, False]
    assert np.all(np.asarray(longer["flags"]) == flags)
    a, b = np.asarray(quoted["teff_cal"].value), np.asarray(longer["teff_cal"].value)
    err = np.asarray(quoted["teff_cal_err"].value)
    assert a[2] == b[2]  # settled: the same bits however many passes are allowed
    assert np.all(np.abs(a - b)[:2] < 0.25 * err[:2])
    # the cycling stars (still computed in every pass: rows 0 and 1) span tens to thousands of K
    cycle = np.array([row[:2] for row in seen[combine._SETTLING_PASSES:]])
    half = (cycle.max(axis=0) - cycle.min(axis=0)) / 2
    assert np.all(half > combine.UNSETTLED_SHARE * err[:2]) and half.max() > 1000.0
    assert np.allclose(b[:2], (cycle.max(axis=0) + cycle.min(axis=0)) / 2)
    assert np.all(np.asarray(longer["teff_cal_err"].value)[:2] >= half)
