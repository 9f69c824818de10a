"""The ``catalogue`` subcommand hooks."""

import json

import pyarrow.parquet as pq

from stelltemp.cli import build_parser, run_parsed

try:
    from test_catalog_helpers import fake_estimate
except ImportError:  # tests run as a package
    from tests.test_catalog_helpers import fake_estimate


def _parse(argv):
    return build_parser().parse_args(argv)


def run_cli(args, engine=None):
    return run_parsed(args, engine=engine)


def _input(tmp_path):
    path = tmp_path / "in.csv"
    path.write_text("star,B_JC,V_JC\ns1,11.0,10.5\ns2,x,11.0\n")
    return path


def test_json_summary_and_exit_code(tmp_path, capsys):
    inp = _input(tmp_path)
    out = tmp_path / "out.parquet"
    args = _parse(["catalogue", str(inp), "-o", str(out), "--ebv", "0.05", "--json", "--quiet"])
    assert run_cli(args, engine=fake_estimate) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["rows"] == 2 and summary["successes"] == 1 and summary["flag_counts"]["bad_input"] == 1
    assert json.loads(pq.read_schema(out).metadata[b"stelltemp"])["ebv_source"] == "0.05 mag for every row"


def test_existing_output_is_one_line_exit_2(tmp_path, capsys):
    inp = _input(tmp_path)
    out = tmp_path / "out.csv"
    assert run_cli(_parse(["catalogue", str(inp), "-o", str(out), "--quiet"]), engine=fake_estimate) == 0
    capsys.readouterr()
    assert run_cli(_parse(["catalogue", str(inp), "-o", str(out), "--quiet"]), engine=fake_estimate) == 2
    err = capsys.readouterr().err
    assert err.startswith("stelltemp: error: ") and "already exists (add --replace" in err
    assert err.count("\n") == 1
    assert run_cli(_parse(["catalogue", str(inp), "-o", str(out), "--replace"]), engine=fake_estimate) == 0
    assert "2 rows in" in capsys.readouterr().out


def test_bad_map_file_and_chunk_rows(tmp_path, capsys):
    inp = _input(tmp_path)
    args = _parse(["catalogue", str(inp), "-o", str(tmp_path / "o.csv"), "--columns", str(tmp_path / "none.toml")])
    assert run_cli(args, engine=fake_estimate) == 2
    assert "cannot read column map" in capsys.readouterr().err
    args = _parse(["catalogue", str(inp), "-o", str(tmp_path / "o.csv"), "--chunk-rows", "0"])
    assert run_cli(args, engine=fake_estimate) == 2


def test_dask_option_runs_on_dask(tmp_path, capsys):
    import pytest

    pytest.importorskip("dask.dataframe")
    inp = tmp_path / "in.parquet"
    pq.write_table(_table(), inp)
    args = _parse(["catalogue", str(inp), "-o", str(tmp_path / "o.parquet"), "--dask", "--workers", "1", "--json"])
    assert run_cli(args, engine=fake_estimate) == 0
    assert json.loads(capsys.readouterr().out)["backend"] == "dask"


def _table():
    import pyarrow as pa

    return pa.table({"B_JC": [11.0, 12.0], "V_JC": [10.5, 11.0]})


def test_cli_default_chunk_matches_the_library():
    from stelltemp.catalog import batch
    from stelltemp.cli import catalogue

    assert catalogue.DEFAULT_CHUNK_ROWS == batch.DEFAULT_CHUNK_ROWS


def test_plot_of_the_results(tmp_path, capsys):
    # real engine: two invented blackbody stars; the diagram draws both
    from stelltemp.bandgrid import blackbody_mag

    inp = tmp_path / "in.csv"
    rows = [(name, t) for name, t in (("s1", 4500.0), ("s2", 9000.0))]
    inp.write_text("star,B_JC,V_JC\n" + "".join(
        f"{n},{float(blackbody_mag('B_JC', t)):.4f},{float(blackbody_mag('V_JC', t)):.4f}\n" for n, t in rows))
    out, fig = tmp_path / "out.ecsv", tmp_path / "diagram.png"
    assert run_cli(_parse(["catalogue", str(inp), "-o", str(out), "--plot", str(fig), "--quiet"])) == 0
    assert fig.read_bytes()[:4] == b"\x89PNG"
    assert run_cli(_parse(["catalogue", str(inp), "-o", str(tmp_path / "o2.ecsv"), "--plot", str(fig), "--quiet"])) == 2
    assert "already exists" in capsys.readouterr().err
    assert not (tmp_path / "o2.ecsv").exists()  # refused before any work


def test_old_positional_output_still_works_with_a_note(tmp_path, capsys):
    inp = _input(tmp_path)
    out = tmp_path / "out.csv"
    assert run_cli(_parse(["catalogue", str(inp), str(out), "--quiet"]), engine=fake_estimate) == 0
    err = capsys.readouterr().err
    assert out.exists() and err.startswith("stelltemp: note:") and "-o/--output" in err


def _giant_and_dwarf(tmp_path):
    # invented stars: a K giant and a G dwarf, B V Rc Ic J H Ks, colours of GHB09 / C10 relations
    path = tmp_path / "cal.csv"
    path.write_text(
        "star,B_JC,V_JC,Rc_JC,Ic_JC,J_2MASS,H_2MASS,Ks_2MASS,ebv,ebv_err,feh,feh_sigma,logg\n"
        "g1,11.10,10.10,9.55,9.05,8.10,7.58,7.47,0.02,0.02,-0.2,0.15,2.4\n"
        "d1,10.65,10.00,9.63,9.30,8.86,8.55,8.48,0.01,0.02,0.0,0.10,4.4\n")
    return path


def test_catalogue_calibration_options_reach_the_engine(tmp_path, capsys):
    from astropy.table import Table

    from stelltemp.engine import estimate

    inp = _giant_and_dwarf(tmp_path)
    plain, rich = tmp_path / "plain.ecsv", tmp_path / "rich.ecsv"
    assert run_cli(_parse(["catalogue", str(inp), "-o", str(plain), "--quiet"])) == 0
    assert run_cli(_parse(["catalogue", str(inp), "-o", str(rich), "--quiet", "--feh-err", "feh_sigma",
                           "--cal-ebv", "--each-relation"])) == 0
    a, b = Table.read(plain), Table.read(rich)
    # [Fe/H] error from the column: a larger teff_cal error; E(B-V) from the calibrations
    assert (b["teff_cal_err"] > a["teff_cal_err"]).all()
    assert all(abs(v) < 1 for v in b["ebv_cal"].value) and not any(abs(v) < 1 for v in a["ebv_cal"].value)
    # each relation's own temperature: the giant uses GHB09, the dwarf C10
    assert 4000 < float(getattr(b["teff_ghb09_vk_giant"][0], "value", b["teff_ghb09_vk_giant"][0])) < 5200
    assert "teff_c10_vk" in b.colnames
    assert "ghb09_vk_giant" in str(b["cal_used"][0]) and "c10_vk" in str(b["cal_used"][1])
    # the same numbers as the API called directly
    mags = {k: [float(v) for v in b[k]] for k in ("B_JC", "V_JC", "Rc_JC", "Ic_JC", "J_2MASS", "H_2MASS", "Ks_2MASS")}
    direct = estimate(mags, None, ebv=[0.02, 0.01], ebv_err=[0.02, 0.02], feh=[-0.2, 0.0],
                      feh_err=[0.15, 0.10], logg=[2.4, 4.4], cal_ebv=True, cal_detail=True)
    assert abs(direct["teff_cal"].value - b["teff_cal"].value).max() < 1e-6
    assert "[Fe/H] error" not in " ".join(str(v) for v in b.meta.values())
    assert any("no [Fe/H] error given" in str(v) for v in a.meta.values())


def test_catalogue_feh_err_number_and_bad_value(tmp_path, capsys):
    from astropy.table import Table

    inp = _giant_and_dwarf(tmp_path)
    out = tmp_path / "n.ecsv"
    assert run_cli(_parse(["catalogue", str(inp), "-o", str(out), "--quiet", "--feh-err", "0.2"])) == 0
    assert (Table.read(out)["teff_cal_err"].value > 0).all()
    capsys.readouterr()
    assert run_cli(_parse(["catalogue", str(inp), "-o", str(tmp_path / "m.ecsv"), "--quiet",
                           "--feh-err", "-0.2"])) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "[Fe/H] error" in err[0] and not (tmp_path / "m.ecsv").exists()
