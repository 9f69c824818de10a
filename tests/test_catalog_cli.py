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
