"""Chunked local runs with a stand-in engine that follows the engine contract."""

import json

import astropy.units as u
import numpy as np
import pyarrow as pa
import pyarrow.csv as pcsv
import pyarrow.parquet as pq
import pytest
from astropy.table import Table

from stelltemp.catalog import estimate_table, run_catalogue
from stelltemp.catalog.batch import RESULT_SUFFIX, compute_chunk
from stelltemp.catalog.tableio import read_table
from stelltemp.engine import flags as F
from stelltemp.errors import StelltempError

try:
    from test_catalog_helpers import ballesteros_t, boom_after, fake_estimate
except ImportError:  # tests run as a package
    from tests.test_catalog_helpers import ballesteros_t, boom_after, fake_estimate


def _catalogue(n=500, seed=3):
    """Invented catalogue: B, V with errors, per-row E(B-V), parallax."""
    rng = np.random.default_rng(seed)
    v = rng.uniform(6, 16, n)
    return pa.table({
        "id": np.arange(n, dtype=np.int64),
        "B_JC": v + rng.uniform(-0.1, 1.6, n),
        "V_JC": v,
        "V_JC_err": rng.uniform(0.01, 0.05, n),
        "ebv": rng.uniform(0.0, 0.3, n),
        "parallax": rng.uniform(0.5, 20, n),
    })


def test_ballesteros_stand_in_reproduces_the_sun():
    # Ballesteros (2012, EPL 97, 34008): the formula gives about 5780 K for the
    # solar B-V = 0.65 (solar colour: common practice)
    assert abs(ballesteros_t(0.65) - 5780) < 15


@pytest.mark.parametrize("ext", ["parquet", "csv", "ecsv", "fits", "vot"])
@pytest.mark.parametrize("src", ["parquet", "csv"])
def test_run_matches_engine_row_for_row(tmp_path, src, ext):
    cat = _catalogue()
    inp = tmp_path / f"in.{src}"
    (pq.write_table if src == "parquet" else pcsv.write_csv)(cat, inp)
    out = tmp_path / f"out.{ext}"
    summary = run_catalogue(inp, out, engine=fake_estimate, chunk_rows=128, quiet=True)
    back = read_table(out)
    expect = fake_estimate(
        {"B_JC": cat["B_JC"].to_numpy(), "V_JC": cat["V_JC"].to_numpy()},
        {"V_JC": cat["V_JC_err"].to_numpy()}, ebv=cat["ebv"].to_numpy(),
    )
    np.testing.assert_allclose(np.asarray(back["t_bb"], float), expect["t_bb"].value, rtol=1e-12)
    np.testing.assert_allclose(np.asarray(back["t_bb_err"], float), expect["t_bb_err"].value, rtol=1e-12)
    assert back["t_bb"].unit == u.K
    assert list(back["id"].astype(int)) == list(range(500))  # every input column kept, in order
    assert back.colnames[:6] == cat.column_names
    assert summary.rows == 500 and summary.chunks >= 1
    assert summary.successes == int(np.isfinite(expect["t_bb"].value).sum())


def test_bad_rows_are_flagged_and_the_run_goes_on(tmp_path):
    inp = tmp_path / "in.csv"
    inp.write_text(
        "id,B_JC,V_JC,V_JC_err,ebv\n"
        "a,11.0,10.5,0.02,0.1\n"
        "b,eleven,10.5,0.02,0.1\n"
        "c,inf,10.5,0.02,0.1\n"
        "d,99.5,10.5,0.02,0.1\n"
        "e,11.0,10.5,-0.02,0.1\n"
        "f,,,0.02,0.1\n"
        "g,11.0,10.5,0.02,\n"
        "h,11.0,10.5,0.02,0.1\n"
    )
    out = tmp_path / "out.csv"
    summary = run_catalogue(inp, out, engine=fake_estimate, quiet=True)
    back = read_table(out)
    flags = dict(zip(back["id"], back["flags"]))
    notes = dict(zip(back["id"], back["input_notes"]))
    assert flags["a"] == 0 and flags["h"] == 0
    assert flags["b"] & F.BAD_INPUT and notes["b"] == "B_JC: not a number"
    assert flags["c"] & F.BAD_INPUT and notes["c"] == "B_JC: infinite"
    assert flags["d"] & F.ABSURD_VALUE and notes["d"] == "B_JC: outside [-40, 40]"
    assert flags["e"] == F.ABSURD_VALUE and notes["e"] == "V_JC_err: outside [0, 5]"
    assert np.isfinite(back["t_bb"][4])  # default error used instead
    assert flags["f"] & F.BAD_INPUT and notes["f"] == "no usable magnitude"
    assert flags["g"] & F.BAD_INPUT and notes["g"] == "ebv: missing, no result without E(B-V)"
    assert np.isnan(back["t_bb"][6])  # never the E(B-V) = 0 result
    assert list(back["flag_names"])[1] == "bad_input"
    assert summary.rows == 8 and summary.clean_rows == 2
    # row d: its B is set aside, so the engine has no colour either
    assert summary.flag_counts["bad_input"] == 5 and summary.flag_counts["absurd_value"] == 2
    # the input text is written back exactly as read
    data = [line for line in out.read_text().splitlines() if not line.startswith("#")]  # below the ECSV header
    assert data[2].startswith("b,eleven,10.5,0.02,0.1,")


def test_chunking_does_not_change_results(tmp_path):
    inp = tmp_path / "in.parquet"
    pq.write_table(_catalogue(1000), inp, row_group_size=100)
    a = run_catalogue(inp, tmp_path / "a.parquet", engine=fake_estimate, chunk_rows=7, quiet=True)
    b = run_catalogue(inp, tmp_path / "b.parquet", engine=fake_estimate, chunk_rows=10_000, quiet=True)
    ta, tb = pq.read_table(tmp_path / "a.parquet"), pq.read_table(tmp_path / "b.parquet")
    assert ta.drop_columns([]).equals(tb)
    assert a.chunks > b.chunks


def test_parquet_output_records_the_run(tmp_path):
    inp = tmp_path / "in.parquet"
    pq.write_table(_catalogue(10), inp)
    out = tmp_path / "out.parquet"
    run_catalogue(inp, out, engine=fake_estimate, rv=3.6, law="F99", method="colour", quiet=True)
    schema = pq.read_schema(out)
    record = json.loads(schema.metadata[b"stelltemp"])
    assert record["R_V"] == 3.6 and record["extinction_law"] == "F99" and record["method_requested"] == "colour"
    assert record["passbands"] == "B_JC,V_JC" and record["ebv_source"] == "column ebv"
    assert record["run_time_utc"].endswith("+00:00") and record["tool_version"]
    assert read_table(out)["t_bb"].unit == "K"


def test_interrupted_run_leaves_no_output(tmp_path):
    inp = tmp_path / "in.parquet"
    pq.write_table(_catalogue(1000), inp)
    for ext in ("parquet", "csv", "ecsv"):
        out = tmp_path / f"out.{ext}"
        with pytest.raises(RuntimeError, match="simulated"):
            run_catalogue(inp, out, engine=boom_after(3), chunk_rows=100, quiet=True)
        assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.parquet"]


def test_refuses_existing_output_and_bad_arguments(tmp_path):
    inp = tmp_path / "in.parquet"
    pq.write_table(_catalogue(10), inp)
    out = tmp_path / "out.parquet"
    run_catalogue(inp, out, engine=fake_estimate, quiet=True)
    with pytest.raises(StelltempError, match="already exists"):
        run_catalogue(inp, out, engine=fake_estimate, quiet=True)
    run_catalogue(inp, out, engine=fake_estimate, quiet=True, overwrite=True)
    other = tmp_path / "other.parquet"
    with pytest.raises(StelltempError, match="unknown extinction law"):
        run_catalogue(inp, other, engine=fake_estimate, law="nonsense", quiet=True)
    with pytest.raises(StelltempError, match="R_V must be"):
        run_catalogue(inp, other, engine=fake_estimate, rv=-1, quiet=True)
    with pytest.raises(StelltempError, match="column 'EBV_map'"):
        run_catalogue(inp, other, engine=fake_estimate, ebv="EBV_map", quiet=True)
    with pytest.raises(StelltempError, match=r"ebv \(E\(B-V\)\) must be a finite number in \[-0.5, 6\] mag, got 50"):
        run_catalogue(inp, other, engine=fake_estimate, ebv=50, quiet=True)
    assert not other.exists()


def test_map_file_and_single_ebv_value(tmp_path):
    inp = tmp_path / "in.csv"
    inp.write_text("star,Bmag,Vmag,e_V\ns1,11.0,10.5,0.02\ns2,12.0,11.0,0.03\n")
    cmap = tmp_path / "map.toml"
    cmap.write_text('[bands]\n"B_JC" = "Bmag"\n"V_JC" = { mag = "Vmag", err = "e_V" }\n[values]\nebv = 0.1\n')
    out = tmp_path / "out.ecsv"
    run_catalogue(inp, out, cmap, engine=fake_estimate, quiet=True)
    back = read_table(out)
    np.testing.assert_allclose(back["t_bb"].value, ballesteros_t(np.array([0.4, 0.9])), rtol=1e-12)
    assert back.meta["ebv_source"] == "0.1 mag for every row"
    # a number on the command line overrides the map
    run_catalogue(inp, out, cmap, ebv=0.0, overwrite=True, engine=fake_estimate, quiet=True)
    np.testing.assert_allclose(read_table(out)["t_bb"].value, ballesteros_t(np.array([0.5, 1.0])))


def test_empty_table_gives_empty_output_with_result_columns(tmp_path):
    inp = tmp_path / "in.csv"
    inp.write_text("B_JC,V_JC\n")
    out = tmp_path / "out.parquet"
    summary = run_catalogue(inp, out, engine=fake_estimate, quiet=True)
    back = pq.read_table(out)
    assert back.num_rows == 0 and "t_bb" in back.column_names and summary.rows == 0


def test_result_names_do_not_clobber_input_columns(tmp_path):
    t = Table({"B_JC": [11.0], "V_JC": [10.5], "t_bb": ["observer's note"]})
    out = estimate_table(t, engine=fake_estimate)
    assert out["t_bb"][0] == "observer's note"
    assert np.isfinite(out["t_bb" + RESULT_SUFFIX][0])


def test_summary_json_and_text(tmp_path):
    inp = tmp_path / "in.parquet"
    pq.write_table(_catalogue(20), inp)
    summary = run_catalogue(inp, tmp_path / "o.parquet", engine=fake_estimate, quiet=True)
    d = json.loads(summary.to_json())
    assert d["rows"] == 20 and set(F.NAMES.values()) == set(d["flag_counts"])
    assert d["wall_time_s"] > 0 and "20 rows" in str(summary)


def test_compute_chunk_rejects_an_engine_that_loses_rows():
    t = Table({"B_JC": [11.0, 12.0], "V_JC": [10.5, 11.0]})

    def short(mags, errs=None, **kw):
        return fake_estimate(mags, errs, **kw)[:1]

    from stelltemp.catalog.batch import RunOptions, resolve_mapping
    with pytest.raises(StelltempError, match="returned 1 rows for 2"):
        compute_chunk(t, resolve_mapping(t.colnames), RunOptions(), short)


def test_flag_names_match_describe():
    masks = np.array([0, 3, F.ABSURD_VALUE, 3, 0], dtype=np.int64)
    assert list(F.describe_all(masks)) == [F.describe(m) for m in masks]


@pytest.mark.parametrize("ext", ["fits", "vot", "ecsv"])
def test_astropy_format_inputs_with_masked_cells(tmp_path, ext):
    from astropy.table import MaskedColumn

    t = Table()
    t["name"] = ["invented-a", "invented-b", "invented-c"]
    t["B_JC"] = MaskedColumn([11.0, 12.0, 13.0], mask=[False, True, False])
    t["V_JC"] = [10.5, 11.0, 12.0]
    t["V_JC_err"] = [0.02, 0.02, -0.5]
    inp = tmp_path / f"in.{ext}"
    t.write(inp, format={"fits": "fits", "vot": "votable", "ecsv": "ascii.ecsv"}[ext])
    out = tmp_path / "out.parquet"
    summary = run_catalogue(inp, out, engine=fake_estimate, quiet=True)
    back = pq.read_table(out)
    flags = back["flags"].to_pylist()
    assert flags[0] == 0 and flags[1] & F.BAD_INPUT and flags[2] & F.ABSURD_VALUE
    assert back["name"].to_pylist() == ["invented-a", "invented-b", "invented-c"]
    assert summary.successes == 2


def test_progress_bar_hidden_when_quiet_or_not_a_terminal():
    from stelltemp.catalog.batch import progress_bar as _progress

    with _progress(10, quiet=True) as bar:
        assert bar.disable
    with _progress(10, quiet=False) as bar:  # pytest captures stderr: not a terminal
        assert bar.disable


def test_table_without_usable_columns_is_one_clear_error(tmp_path):
    inp = tmp_path / "in.csv"
    inp.write_text("ra,dec\n10.1,-5.2\n")
    with pytest.raises(StelltempError, match="no magnitude columns"):
        run_catalogue(inp, tmp_path / "out.csv", engine=fake_estimate, quiet=True)
    assert not (tmp_path / "out.csv").exists()
