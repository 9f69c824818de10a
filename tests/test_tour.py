"""The tour end to end on the invented demo, and the demo data themselves."""

import math
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

from stelltemp import tour
from stelltemp.errors import StelltempError

DEMO = Path(__file__).resolve().parents[1] / "catalogs_demo"
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    out = tmp_path_factory.mktemp("tour") / "out"
    summary = tour.run_tour(out, quiet=True)
    return out, summary


def _read(path):
    return Table.read(path, format="ascii.ecsv" if str(path).endswith(".ecsv") else "ascii.csv")


def _floats(col):
    return np.ma.filled(np.ma.asarray(getattr(col, "value", col), dtype=float), np.nan)


def test_every_output_exists(run):
    out, summary = run
    files = summary["files"]
    for key in ("temperatures", "plan", "catalogue_figure", "colour_figure", "fit_figure", "spectrum_figure",
                "night_figure", "snr_figure", "summary"):
        path = Path(files[key])
        assert path.parent == out and path.is_file() and path.stat().st_size > 0, key
        if path.suffix == ".png":
            assert path.read_bytes()[:8] == PNG_MAGIC, key


def test_calibrated_teff_recovers_the_generating_values(run):
    out, summary = run
    res = _read(out / "temperatures.ecsv")
    truth = {str(n): t for n, t in zip(_read(DEMO / "truth.csv")["name"], _read(DEMO / "truth.csv")["t_true"])}
    tt = np.array([truth[str(n)] for n in res["name"]])
    t, err = _floats(res["teff_cal"]), _floats(res["teff_cal_err"])
    ok = np.isfinite(t) & np.isfinite(err)
    z = np.abs(t[ok] - tt[ok]) / err[ok]
    # The demo colours come from the published relations and the Pecaut & Mamajek 2013
    # dwarf sequence (catalogs_demo/make_demo.py), with Gaussian magnitude and E(B-V)
    # noise of the quoted size, so z should be close to |N(0,1)|: 68 % below 1, 99.7 %
    # below 3. The relations disagree among themselves by up to their scatter and ~59
    # stars give a binomial scatter of about +/-6 % on the 1-sigma fraction, so we ask
    # for 55 % and 85 %: a failure means teff_cal or its error is biased, not bad luck.
    assert ok.sum() >= 55
    assert np.mean(z <= 1) >= 0.55
    assert np.mean(z <= 3) >= 0.85
    assert summary["truth"]["column"] == "teff_cal" and summary["truth"]["compared"] == ok.sum()
    # the demo spans the HR diagram: M dwarfs below 3,100 K, B stars above 10,000 K, giants
    stage = {str(n): s for n, s in zip(_read(DEMO / "truth.csv")["name"], _read(DEMO / "truth.csv")["stage"])}
    giants = np.array([stage[str(n)] == "giant" for n in res["name"]])
    assert np.any(ok & (tt < 3100)) and np.any(ok & (tt > 10000)) and np.any(ok & giants)


def test_t_bb_is_shown_as_a_blackbody_colour_temperature(run):
    out, summary = run
    res = _read(out / "temperatures.ecsv")
    truth = {str(n): t for n, t in zip(_read(DEMO / "truth.csv")["name"], _read(DEMO / "truth.csv")["t_true"])}
    tt = np.array([truth[str(n)] for n in res["name"]])
    t_bb = _floats(res["t_bb"])
    ok = np.isfinite(t_bb)
    # real stellar colours are not those of a blackbody: the colour temperature of an
    # M dwarf or a K giant is hundreds of K below its T_eff (the demo colours are stars')
    frac = np.abs(t_bb[ok] - tt[ok]) / tt[ok]
    assert np.median(frac) > 0.02
    assert summary["truth"]["t_bb_median_abs_fraction"] == pytest.approx(np.median(frac))
    assert "not an effective temperature" in summary["note"]
    # a star without log g says which class was assumed, row by row
    notes = {str(n): str(x) for n, x in zip(res["name"], res["teff_cal_note"])}
    targets = _read(DEMO / "targets.csv")
    no_logg = [str(n) for n, g in zip(targets["name"], _floats(targets["logg"])) if not np.isfinite(g)]
    assert no_logg and all("log g unknown: dwarf assumed" in notes[n] for n in no_logg)
    import io

    buf = io.StringIO()
    tour.print_summary(summary, buf)
    text = buf.getvalue()
    assert "T_bb is a blackbody colour temperature, not T_eff" in text
    assert "calibrated T_eff against the invented truth" in text


def test_every_row_has_a_temperature_or_a_flag(run):
    out, _ = run
    res = _read(out / "temperatures.ecsv")
    t = _floats(res["t_bb"])
    flags = np.asarray(res["flags"], np.int64)
    assert np.all(np.isfinite(t) | (flags != 0))
    by_name = {str(n): i for i, n in enumerate(res["name"])}
    from stelltemp.engine import flags as fl

    lone = by_name["demo-F23"]  # measured in V only
    assert not math.isfinite(t[lone]) and flags[lone] & fl.BAD_INPUT
    sentinel = by_name["demo-F07"]  # 99.999 in B_JC: flagged, solved from the other bands
    assert math.isfinite(t[sentinel]) and flags[sentinel] & fl.ABSURD_VALUE


def test_reddening_dominates_only_where_the_reddening_error_is_large(run):
    from stelltemp.engine import flags as fl

    out, _ = run
    res = _read(out / "temperatures.ecsv")
    red = (np.asarray(res["flags"], np.int64) & fl.REDDENING_DOMINATES) > 0
    ebv_err = _floats(res["ebv_err"])
    # 0.01-mag photometry: the flag marks a minority of stars, those with the larger E(B-V) errors
    assert 0 < red.sum() < 0.4 * len(res)
    assert np.median(ebv_err[red]) > 1.5 * np.median(ebv_err[~red])


def test_night_plan_has_each_target_and_filter_with_positive_exposure(run):
    out, summary = run
    plan = _read(out / "plan.ecsv")
    targets = _read(DEMO / "targets.csv")
    filters = summary["plan"]["filters"]
    assert filters == ["B", "V", "R", "I"]  # the demo instrument's filters
    pairs = sorted(zip((str(x) for x in plan["target"]), (str(x) for x in plan["filter"])))
    assert pairs == sorted((str(n), f) for n in targets["name"] for f in filters)
    exposure = _floats(plan["exposure"])
    assert np.all(np.isfinite(exposure) & (exposure > 0))
    assert plan["exposure"].unit == "s"
    # the S/N goal is met by the planned exposure: exactly when it is the one for that goal, more when the
    # goal is reached sooner than the camera's minimum exposure (then planned at the minimum)
    snr, t_min = _floats(plan["snr"]), plan.meta["min_exposure_s"]
    at_goal = exposure > t_min * (1 + 1e-9)
    np.testing.assert_allclose(snr[at_goal], 100.0, rtol=1e-3)
    assert np.all(snr[~at_goal] >= 100.0 * (1 - 1e-3)) and np.all(exposure >= t_min * (1 - 1e-9))
    # every rate anchored to the star's own measured magnitude in that filter's band (B, V, Rc, Ic columns)
    measured = np.asarray(plan["rate_source"], str) == "measured"
    assert measured.mean() > 0.95
    assert plan.meta["date"] == "2026-11-08"


def test_summary_counts_match_the_files(run):
    out, summary = run
    res = _read(out / "temperatures.ecsv")
    assert summary["stars"] == len(res) == 60
    assert summary["solved"] == int(np.isfinite(_floats(res["t_bb"])).sum())
    assert summary["truth"]["compared"] == summary["solved"]
    assert summary["plan"]["rows"] == 240
    assert isinstance(summary["sun_warnings"], list)


def test_a_non_empty_output_folder_is_refused(run, capsys):
    out, _ = run
    with pytest.raises(StelltempError, match="--replace"):
        tour.run_tour(out, quiet=True)
    from stelltemp.cli import main

    assert main(["tour", "--output", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "not empty" in err[0]


def test_missing_demo_data_is_one_clear_error(tmp_path):
    with pytest.raises(StelltempError, match="demo data not found"):
        tour.run_tour(tmp_path / "out", demo_dir=tmp_path / "nowhere", quiet=True)
    assert not (tmp_path / "out").exists()  # nothing created before the check


def test_text_summary_names_the_files_and_the_check(run):
    import io

    _, summary = run
    buf = io.StringIO()
    tour.print_summary(summary, buf)
    text = buf.getvalue()
    assert "60 stars read" in text and "within 1 sigma" in text and "plan.ecsv" in text
    assert "invented" in text


# ------------------------------------------------------------- the demo data
def test_demo_values_lie_in_the_stated_ranges():
    targets, truth = _read(DEMO / "targets.csv"), _read(DEMO / "truth.csv")
    assert list(targets["name"]) == list(truth["name"])
    assert set(targets["provenance"]) == {"invented"} == set(truth["provenance"])
    field = truth["group"] == "field"
    assert field.sum() == 40 and (~field).sum() == 20
    assert truth["t_true"].min() >= 2900 and truth["t_true"].max() <= 25000
    assert 0 <= truth["ebv_true"][field].min() and truth["ebv_true"][field].max() <= 0.3
    assert abs(np.mean(truth["ebv_true"][~field]) - 0.25) < 0.02
    assert np.std(truth["ebv_true"][~field]) < 0.03
    errs = np.concatenate([_floats(targets[c]) for c in targets.colnames if c.endswith("_err")
                           and c not in ("ebv_err", "parallax_err")])
    errs = errs[np.isfinite(errs) & (errs < 1)]  # the 9.999 sentinel is deliberate
    assert errs.min() >= 0.01 and errs.max() <= 0.05


def test_demo_truth_colours_are_the_dwarf_sequence_reddened_through_the_passbands():
    # the README's claim: a dwarf's noise-free colours are the Pecaut & Mamajek 2013
    # (ApJS 208, 9, Table 5, online version) mean colours at its T_eff, interpolated
    # linearly in T_eff between subtypes, plus the reddening of a blackbody at that T_eff
    # through the two passbands (G23, R_V = 3.1)
    from stelltemp.bandgrid import blackbody_mag
    from stelltemp.calibrations import CALIBRATION_DIR

    seq = Table.read(CALIBRATION_DIR / "pecaut2013_table5.ecsv", format="ascii.ecsv")
    order = np.argsort(_floats(seq["teff"]))
    truth = _read(DEMO / "truth.csv")
    dwarf = np.asarray(truth["stage"]) == "dwarf"
    t, ebv = _floats(truth["t_true"])[dwarf], _floats(truth["ebv_true"])[dwarf]
    for blue, red, col in (("B_JC", "V_JC", "B-V"), ("V_JC", "Ic_JC", "V-Ic"), ("V_JC", "Ks_2MASS", "V-Ks")):
        expect = np.interp(t, _floats(seq["teff"])[order], _floats(seq[col])[order])
        excess = (blackbody_mag(blue, t, ebv, "G23", 3.1) - blackbody_mag(blue, t, 0.0, "G23", 3.1)
                  - blackbody_mag(red, t, ebv, "G23", 3.1) + blackbody_mag(red, t, 0.0, "G23", 3.1))
        got = _floats(truth[blue + "_true"])[dwarf] - _floats(truth[red + "_true"])[dwarf] - excess
        # 0.001 mag covers the rounding of the stored magnitudes
        assert np.nanmax(np.abs(got - expect)) < 1e-3, col


def test_demo_found_from_any_directory(tmp_path, monkeypatch):
    # away from the clone the demo comes from the installed package (a wheel carries a copy made
    # by setup.py) or, in a source checkout / editable install, from the top-level folder
    monkeypatch.chdir(tmp_path)
    found = tour.find_demo_dir()
    assert (found / tour.SCENARIO_FILE).is_file()
    package = Path(tour.__file__).resolve().parent
    assert found in (package / tour.PACKAGED_DEMO, DEMO)
    # the shipped copy is the same scenario: every file of catalogs_demo is there, byte for byte
    if found != DEMO:
        for f in DEMO.rglob("*"):
            if f.is_file() and "__pycache__" not in f.parts:
                assert (found / f.relative_to(DEMO)).read_bytes() == f.read_bytes(), f


def test_tour_reduces_the_invented_night(run):
    # the night's targets come out on the standard system within their errors (invented truth)
    out, summary = run
    red = summary["reduction"]
    assert red is not None and red["targets"] == 20
    assert [f["filter"] for f in red["filters"]] == ["B", "V", "R", "I"]
    assert red["truth"]["within_3sigma"] > 0.95 and 0.5 < red["truth"]["within_1sigma"] <= 1.0
    for f in red["filters"]:
        assert abs(f["colour_term"] - f["colour_term_predicted"]) < 3 * f["colour_term_err"]
    for key in ("transformation", "night_targets", "residual_figure"):
        assert Path(summary["files"][key]).is_file()
