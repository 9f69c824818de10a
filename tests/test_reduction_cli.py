"""``stelltemp standardise`` on the invented demo night (catalogs_demo/night_*)."""

import json
import tomllib
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

from stelltemp.cli import main

DEMO = Path(__file__).resolve().parents[1] / "catalogs_demo"
BASE = ["standardise", str(DEMO / "night_observations.csv"), "--standards", str(DEMO / "night_standards.csv"),
        "--instrument", str(DEMO / "instruments" / "quillmere_04m_ccd.toml"), "--second-order", "B"]


@pytest.fixture(scope="module")
def night(tmp_path_factory):
    d = tmp_path_factory.mktemp("night")
    import contextlib
    import io

    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        code = main(BASE + ["-o", str(d / "fit.toml"), "--targets", str(d / "targets.ecsv"),
                            "--temperatures", str(d / "temps.ecsv"), "--plot", str(d / "fit.png"), "--json"])
    assert code == 0
    return d, json.loads(buf.getvalue())


def test_demo_night_recovers_the_generating_coefficients(night):
    # The generator's coefficients are those of the linearised equation fitted to the same synthetic
    # photometry (night_coefficients.toml); the fit of the noisy night must find them within 3 sigma
    # (plus the linearisation's own departure, a few mmag).
    _, s = night
    truth = {f["name"]: f for f in tomllib.loads((DEMO / "night_coefficients.toml").read_text())["filter"]}
    for f in s["transformation"]["filters"]:
        t = truth[f["filter"]]
        assert f["rejected"] == []
        for name, value in f["coefficients"].items():
            tol = 3 * f["errors"][name] + (t["nonlinearity_max_mag"] if name == "zero_point" else 0.0)
            assert abs(value - t[name]) < tol, (f["filter"], name, value, t[name])
    assert s["comparison_with_prediction"]
    assert all(abs(r["difference_sigma"]) < 3 for r in s["comparison_with_prediction"])


def test_demo_targets_two_visits_agree_and_match_truth(night):
    d, s = night
    t = Table.read(d / "targets.ecsv")
    truth = Table.read(DEMO / "night_truth.csv")
    assert s["targets"]["rows"] == len(t) == 20 and np.all(np.ma.filled(t["note"], "") == "")
    for band in ("B_JC", "V_JC", "Rc_JC", "Ic_JC"):
        true = {r["star"]: r[f"{band}_true"] for r in truth}
        z = (t[band] - [true[n] for n in t["star"]]) / t[f"{band}_err"]
        assert np.all(np.abs(z) < 4), (band, z)
    v1, v2 = t[t["visit"] == "v1"], t[t["visit"] == "v2"]
    assert list(v1["star"]) == list(v2["star"])
    diff = v1["V_JC"] - v2["V_JC"]
    assert np.all(np.abs(diff) < 4 * np.hypot(v1["V_JC_err"], v2["V_JC_err"]))
    assert t["cov"].shape == (20, 4, 4)
    temps = Table.read(d / "temps.ecsv")
    assert len(temps) == 20 and "t_bb" in temps.colnames
    assert (d / "fit.png").stat().st_size > 10_000


def test_transformation_file_has_provenance(night):
    d, _ = night
    data = tomllib.loads((d / "fit.toml").read_text())
    prov = data["provenance"]
    assert data["format"] == "stelltemp transformation 1"
    for key in ("written_utc", "tool_version", "observations_sha256", "standards_sha256", "instrument_sha256"):
        assert prov[key]
    assert [f["name"] for f in data["filter"]] == ["B", "V", "R", "I"]


def test_refusals_before_any_work(tmp_path, capsys):
    fit = tmp_path / "fit.toml"
    fit.write_text("keep me")
    targets = tmp_path / "t.ecsv"
    assert main(BASE + ["-o", str(fit), "--targets", str(targets)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("stelltemp: error:") and "--replace" in err and err.count("\n") == 1
    assert fit.read_text() == "keep me" and not targets.exists()
    assert main(BASE + ["-o", str(tmp_path / "a.toml"), "--targets", str(tmp_path / "a.toml")]) == 2
    assert "given both" in capsys.readouterr().err
    bad = list(BASE)
    bad[bad.index("--standards") + 1] = str(tmp_path / "missing.csv")
    assert main(bad + ["-o", str(tmp_path / "b.toml")]) == 2
    assert "no such file" in capsys.readouterr().err
    assert main(BASE[:-2] + ["--second-order", "Z", "-o", str(tmp_path / "c.toml")]) == 2
    assert "not observed" in capsys.readouterr().err
    assert not list(tmp_path.glob("*.part")) and not (tmp_path / "c.toml").exists()


def test_fallback_to_predicted_colour_term_with_few_standards(tmp_path, capsys):
    # one standard only (three visits): no filter's colour term can be fitted, the prediction steps in
    obs = Table.read(DEMO / "night_observations.csv")
    keep = [s.startswith("demo-N") or s == "std-A1" for s in obs["star"]]
    few = tmp_path / "few.csv"
    obs[keep].write(few, format="ascii.csv")
    args = ["standardise", str(few), "--standards", str(DEMO / "night_standards.csv"), "--instrument",
            str(DEMO / "instruments" / "quillmere_04m_ccd.toml"), "--json"]
    code = main(args + ["-o", str(tmp_path / "a.toml")])
    err = capsys.readouterr().err
    assert code == 2 and "usable standard measurements, need at least 4" in err
    assert main(args + ["-o", str(tmp_path / "b.toml"), "--predicted", "fallback"]) == 0
    s = json.loads(capsys.readouterr().out)
    for f in s["transformation"]["filters"]:
        assert any("fallback priors on colour_term" in n for n in f["notes"])
        assert f["priors"]["colour_term"][0] == s["predicted"][f["filter"]]["coefficients"]["colour_term"]
        assert f["n_used"] == 3


def test_stored_transformation_applied_to_another_night(night, tmp_path, capsys):
    # the night's own fit, written to a file, gives every star (standards too) from --use-fit;
    # the targets agree with the first run exactly
    d, _ = night
    args = ["standardise", str(DEMO / "night_observations.csv"), "--instrument",
            str(DEMO / "instruments" / "quillmere_04m_ccd.toml"), "--use-fit", str(d / "fit.toml")]
    assert main(args + ["--targets", str(tmp_path / "all.ecsv"), "--json"]) == 0
    s = json.loads(capsys.readouterr().out)
    assert s["targets"]["rows"] == 20 + 24 * 3  # targets' two visits and standards' three
    first = Table.read(d / "targets.ecsv")
    again = Table.read(tmp_path / "all.ecsv")
    again = again[[str(n).startswith("demo-N") for n in again["star"]]]
    assert np.allclose(first["V_JC"], again["V_JC"]) and np.allclose(first["V_JC_err"], again["V_JC_err"])
    assert main(args + ["--targets", str(tmp_path / "x.ecsv"), "--standards", "s.csv"]) == 2
    assert "belong(s) to a fit" in capsys.readouterr().err
    assert main(args) == 2
    assert "nothing to write" in capsys.readouterr().err
    assert main(args[:-2] + ["--targets", str(tmp_path / "y.ecsv")]) == 2
    assert "needs --standards" in capsys.readouterr().err
