"""Dask runs give the same rows, notes and counts as local runs."""

import os

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from stelltemp.catalog import run_catalogue
from stelltemp.errors import StelltempError

pytest.importorskip("dask")
distributed = pytest.importorskip("distributed")

from stelltemp.catalog import scale  # noqa: E402
from stelltemp.catalog.scale import partition_plan, run_catalogue_dask  # noqa: E402

try:
    from test_catalog_helpers import fake_estimate
except ImportError:  # tests run as a package
    from tests.test_catalog_helpers import fake_estimate


def _write_input(path, n=2000, row_group_size=300):
    rng = np.random.default_rng(11)
    v = rng.uniform(6, 16, n)
    b = (v + rng.uniform(-0.1, 1.6, n)).astype(object)
    b[::97] = np.nan
    table = pa.table({
        "id": np.arange(n, dtype=np.int64),
        "name": [f"invented-{i}" for i in range(n)],
        "B_JC": pa.array(b.astype(float)),
        "V_JC": v,
        "V_JC_err": np.where(np.arange(n) % 101 == 0, -1.0, 0.02),
        "ebv": rng.uniform(0, 0.3, n),
    })
    pq.write_table(table, path, row_group_size=row_group_size)
    return table


def _same_tables(a, b):
    assert a.schema.equals(b.schema, check_metadata=False)
    assert a.num_rows == b.num_rows
    for name in a.column_names:  # NaN == NaN here; nulls must match too
        assert a[name].is_null().equals(b[name].is_null()), name
        np.testing.assert_array_equal(a[name].to_numpy(zero_copy_only=False),
                                      b[name].to_numpy(zero_copy_only=False), err_msg=name)


def _no_parts_left(folder):
    return not [p for p in os.listdir(folder) if ".parts-" in p or p.endswith(".stelltemp-part")]


def test_partitions_follow_the_engine_not_the_row_groups():
    # 4 row groups of 300 rows, chunks of 500, 2 workers: ranges of 500 rows (one chunk), not 300
    plan = partition_plan([300] * 4, 500, 2)
    assert [(a, b) for a, b, _ in plan] == [(0, 500), (500, 1000), (1000, 1200)]
    assert plan[0][2] == [0, 1] and plan[1][2] == [1, 2, 3] and plan[2][2] == [3]
    # one huge row group is split; every range a whole number of chunks, the last one shorter
    plan = partition_plan([4_000_000], 50_000, 2)
    assert len(plan) == 8 and {b - a for a, b, _ in plan} == {500_000}
    plan = partition_plan([30_000_000], 50_000, 2)
    assert max(b - a for a, b, _ in plan) == scale.MAX_PARTITION_ROWS
    assert partition_plan([], 500, 2) == [] and partition_plan([0, 0], 500, 2) == []


def test_local_dask_matches_local_loop(tmp_path):
    inp = tmp_path / "in.parquet"
    _write_input(inp)
    local = run_catalogue(inp, tmp_path / "local.parquet", engine=fake_estimate, quiet=True, chunk_rows=500)
    dsum = run_catalogue_dask(inp, tmp_path / "dask.parquet", engine=fake_estimate, quiet=True, workers=2,
                              chunk_rows=200)
    _same_tables(pq.read_table(tmp_path / "local.parquet"), pq.read_table(tmp_path / "dask.parquet"))
    assert dsum.backend == "dask" and dsum.rows == local.rows == 2000
    assert dsum.flag_counts == local.flag_counts and dsum.successes == local.successes
    assert dsum.clean_rows == local.clean_rows
    assert dsum.chunks == 10  # 2000 rows in engine chunks of 200, whatever the row groups
    assert any("partition" in n for n in dsum.notes)
    assert _no_parts_left(tmp_path)


def test_csv_input_through_dask_keeps_the_readers_row_notes(tmp_path):
    lines = ["id,B_JC,V_JC,ebv"] + [f"{i},{10 + i % 7 * 0.1:.2f},{9.5 + i % 5 * 0.1:.2f},0.05" for i in range(60)]
    lines[7] = "6,10.1,9.6"  # a malformed line: too few fields, kept as a flagged row
    lines[20] = "19,abc,9.6,0.05"  # text where a number belongs
    inp = tmp_path / "in.csv"
    inp.write_text("\n".join(lines) + "\n")
    for out in ("parquet", "csv"):
        local = run_catalogue(inp, tmp_path / f"local.{out}", engine=fake_estimate, quiet=True, chunk_rows=16)
        dsum = run_catalogue_dask(inp, tmp_path / f"dask.{out}", engine=fake_estimate, quiet=True, chunk_rows=16,
                                  workers=2, local="threads", window=2)
        assert dsum.rows == local.rows == 60 and dsum.flag_counts == local.flag_counts
        assert [n for n in local.notes if n in dsum.notes] == local.notes  # the reader's notes too
        assert any("wrong number of fields" in n for n in dsum.notes)
    _same_tables(pq.read_table(tmp_path / "local.parquet"), pq.read_table(tmp_path / "dask.parquet"))
    notes = pq.read_table(tmp_path / "dask.parquet")["input_notes"].to_pylist()
    assert "line 8" in notes[6] and "B_JC" in notes[19]

    def rows(name):  # the header records the run's start time, which may differ by a second
        return [x for x in (tmp_path / name).read_text().splitlines() if "run_time_utc" not in x]

    assert rows("local.csv") == rows("dask.csv")


def test_vector_columns_and_earlier_results_judged_as_locally(tmp_path):
    inp = tmp_path / "vec.parquet"
    pq.write_table(pa.table({"B_JC": pa.array([[1.0, 2.0]]), "V_JC": [1.0]}), inp)
    with pytest.raises(StelltempError) as local_err:
        run_catalogue(inp, tmp_path / "a.parquet", engine=fake_estimate)
    with pytest.raises(StelltempError) as dask_err:
        run_catalogue_dask(inp, tmp_path / "b.parquet", engine=fake_estimate, local="synchronous")
    assert str(dask_err.value) == str(local_err.value) and "vector column" in str(dask_err.value)

    src = _write_input(tmp_path / "in.parquet", n=50)
    for name in ("t_bb", "t_bb_lo", "t_bb_hi", "flag_names", "flags"):  # an earlier run's columns
        src = src.append_column(name, pa.array(np.zeros(50)) if name != "flag_names" else pa.array([""] * 50))
    pq.write_table(src, tmp_path / "first.parquet")
    with pytest.raises(StelltempError, match="already holds stelltemp results"):
        run_catalogue_dask(tmp_path / "first.parquet", tmp_path / "c.parquet", engine=fake_estimate)
    run_catalogue(tmp_path / "first.parquet", tmp_path / "l2.parquet", engine=fake_estimate, quiet=True,
                  renew_results=True)
    run_catalogue_dask(tmp_path / "first.parquet", tmp_path / "d2.parquet", engine=fake_estimate, quiet=True,
                       renew_results=True, local="synchronous")
    _same_tables(pq.read_table(tmp_path / "l2.parquet"), pq.read_table(tmp_path / "d2.parquet"))
    assert not (tmp_path / "b.parquet").exists() and not (tmp_path / "c.parquet").exists()


def test_other_formats_run_locally_with_a_note(tmp_path):
    from astropy.table import Table

    inp = tmp_path / "in.ecsv"
    Table({"B_JC": [10.5, 11.0], "V_JC": [10.0, 10.2]}).write(inp)
    s = run_catalogue_dask(inp, tmp_path / "o.parquet", engine=fake_estimate, quiet=True)
    assert s.backend == "local" and s.rows == 2 and "not on Dask" in s.notes[0]


def test_failure_leaves_no_output_and_no_parts(tmp_path):
    inp = tmp_path / "in.parquet"
    _write_input(inp, n=600)

    def broken(mags, *args, **kwargs):
        if len(next(iter(mags.values()))) > 1:
            raise RuntimeError("engine failed")
        return fake_estimate(mags, *args, **kwargs)

    with pytest.raises(RuntimeError, match="engine failed"):
        run_catalogue_dask(inp, tmp_path / "o.parquet", engine=broken, quiet=True, local="synchronous")
    assert not (tmp_path / "o.parquet").exists() and _no_parts_left(tmp_path)


def test_empty_input_gives_empty_output(tmp_path):
    inp = tmp_path / "in.parquet"
    pq.write_table(_write_input(tmp_path / "x.parquet", n=5).slice(0, 0), inp)
    run_catalogue(inp, tmp_path / "l.parquet", engine=fake_estimate, quiet=True)
    s = run_catalogue_dask(inp, tmp_path / "d.parquet", engine=fake_estimate, quiet=True, local="synchronous")
    assert s.rows == 0
    _same_tables(pq.read_table(tmp_path / "l.parquet"), pq.read_table(tmp_path / "d.parquet"))


@pytest.mark.cluster
def test_process_cluster_with_the_real_engine_matches_local(tmp_path):
    """2 process workers, the real engine, 5 bands + E(B-V): identical to the local engine (a few seconds)."""
    rng = np.random.default_rng(3)
    n = 1500
    t = rng.uniform(3500, 12000, n)
    cols = {"id": np.arange(n)}
    for j, key in enumerate(["B_JC", "V_JC", "Ic_JC", "J_2MASS", "Ks_2MASS"]):
        # invented stars: magnitudes falling with temperature, not a real calibration
        cols[key] = 12.0 - j * (0.3 + 0.5 * (6000.0 / t - 0.5)) + rng.normal(0, 0.02, n)
        cols[key + "_err"] = np.full(n, 0.02)
    cols["ebv"] = rng.uniform(0, 0.4, n)
    cols["B_JC"][::50] = np.nan
    inp = tmp_path / "in.parquet"
    pq.write_table(pa.table(cols), inp, row_group_size=1000)
    # the same engine chunks as the local run (the engine's sums may differ in the last bit
    # between chunk sizes; partitions are whole chunks, so the chunks themselves are the same)
    local = run_catalogue(inp, tmp_path / "local.parquet", quiet=True, ebv="ebv", chunk_rows=250)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        dsum = run_catalogue_dask(inp, tmp_path / "dask.parquet", quiet=True, ebv="ebv", chunk_rows=250,
                                  scheduler=cluster.scheduler_address)
    _same_tables(pq.read_table(tmp_path / "local.parquet"), pq.read_table(tmp_path / "dask.parquet"))
    assert dsum.rows == local.rows == n and dsum.flag_counts == local.flag_counts
    assert dsum.successes == local.successes > 0 and dsum.chunks == 6


def test_distributed_cluster_matches_local_loop(tmp_path):
    inp = tmp_path / "in.parquet"
    _write_input(inp, n=900)
    run_catalogue(inp, tmp_path / "local.csv", engine=fake_estimate, quiet=True)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=None) as cluster:
        run_catalogue_dask(inp, tmp_path / "dask.csv", engine=fake_estimate, quiet=True,
                           scheduler=cluster.scheduler_address)

    def rows(name):  # the header records the run's start time, which may differ by a second
        return [x for x in (tmp_path / name).read_text().splitlines() if "run_time_utc" not in x]

    assert rows("local.csv") == rows("dask.csv")


def test_bad_scheduler_options(tmp_path):
    pq_in = tmp_path / "in.parquet"
    _write_input(pq_in, n=10)
    with pytest.raises(StelltempError, match="unknown local scheduler"):
        run_catalogue_dask(pq_in, tmp_path / "o.parquet", engine=fake_estimate, local="cloud")
    assert not (tmp_path / "o.parquet").exists()


def test_missing_dask_gives_one_line(monkeypatch):
    import builtins

    real_import = builtins.__import__

    def no_dask(name, *args, **kwargs):
        if name == "dask" or name.startswith("dask."):
            raise ImportError("No module named 'dask'")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_dask)
    with pytest.raises(StelltempError, match=r"stelltemp\[scale\]"):
        scale.require_dask()


def test_command_runs_csv_on_dask(tmp_path, capsys):
    import json

    from stelltemp.cli import build_parser, run_parsed

    inp = tmp_path / "in.csv"
    inp.write_text("B_JC,V_JC\n11.0,10.5\n12.0,11.0\n")
    out = tmp_path / "o.parquet"
    args = build_parser().parse_args(["catalogue", str(inp), "-o", str(out), "--dask", "--workers", "1", "--json"])
    assert run_parsed(args, engine=fake_estimate) == 0
    assert json.loads(capsys.readouterr().out)["backend"] == "dask"
