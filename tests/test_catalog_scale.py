"""Dask runs give the same rows as local runs."""

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from stelltemp.catalog import run_catalogue
from stelltemp.errors import StelltempError

pytest.importorskip("dask.dataframe")
distributed = pytest.importorskip("distributed")

from stelltemp.catalog.scale import run_catalogue_dask  # noqa: E402

try:
    from test_catalog_helpers import fake_estimate
except ImportError:  # tests run as a package
    from tests.test_catalog_helpers import fake_estimate


def _write_input(path, n=2000):
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
    pq.write_table(table, path, row_group_size=300)


def test_local_dask_matches_local_loop(tmp_path):
    inp = tmp_path / "in.parquet"
    _write_input(inp)
    local = run_catalogue(inp, tmp_path / "local.parquet", engine=fake_estimate, quiet=True, chunk_rows=500)
    dsum = run_catalogue_dask(inp, tmp_path / "dask.parquet", engine=fake_estimate, quiet=True, workers=2)
    a, b = pq.read_table(tmp_path / "local.parquet"), pq.read_table(tmp_path / "dask.parquet")
    assert a.schema.equals(b.schema, check_metadata=False)
    for name in a.column_names:  # NaN == NaN here; nulls must match too
        assert a[name].is_null().equals(b[name].is_null()), name
        np.testing.assert_array_equal(a[name].to_numpy(zero_copy_only=False),
                                      b[name].to_numpy(zero_copy_only=False), err_msg=name)
    assert dsum.backend == "dask" and dsum.rows == local.rows == 2000
    assert dsum.flag_counts == local.flag_counts and dsum.successes == local.successes
    assert dsum.chunks > 1  # really split by row groups


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


def test_dask_refuses_csv_input_and_bad_scheduler(tmp_path):
    inp = tmp_path / "in.csv"
    inp.write_text("B_JC,V_JC\n1,2\n")
    with pytest.raises(StelltempError, match="Dask runs read Parquet"):
        run_catalogue_dask(inp, tmp_path / "o.parquet", engine=fake_estimate)
    pq_in = tmp_path / "in.parquet"
    _write_input(pq_in, n=10)
    with pytest.raises(StelltempError, match="unknown local scheduler"):
        run_catalogue_dask(pq_in, tmp_path / "o.parquet", engine=fake_estimate, local="cloud")
    assert not (tmp_path / "o.parquet").exists()


def test_missing_dask_gives_one_line(monkeypatch):
    import builtins

    from stelltemp.catalog import scale

    real_import = builtins.__import__

    def no_dask(name, *args, **kwargs):
        if name == "dask" or name.startswith("dask."):
            raise ImportError("No module named 'dask'")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_dask)
    with pytest.raises(StelltempError, match=r"stelltemp\[scale\]"):
        scale.require_dask()
