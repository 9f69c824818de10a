"""Catalogue runs on Dask: Parquet partitions through the same per-chunk function.

``dask.dataframe.read_parquet`` splits the input by row groups;
``map_partitions`` applies :func:`stelltemp.catalog.batch.compute_chunk` (via
`process_partition`) to each; the partitions are computed a few at a time, in
order, and written through the same atomic sinks as local runs.  Because the
engine works row by row, the output is identical to a local run row for row.

Dask is an optional extra (``pip install 'stelltemp[scale]'``); it is
imported only here and only when a Dask run starts.
"""

from __future__ import annotations

import os
import time

import pyarrow as pa

from stelltemp.catalog import tableio
from stelltemp.catalog.batch import (
    RunOptions,
    RunSummary,
    check_old_results,
    progress_bar,
    compute_chunk,
    default_engine,
    merge_arrow,
    resolve_mapping,
    result_names,
    run_record,
)
from stelltemp.catalog.describe import input_units
from stelltemp.errors import StelltempError

LOCAL_SCHEDULERS = ("threads", "processes", "synchronous")


def require_dask():
    """Import dask.dataframe or raise a one-line `StelltempError` naming the extra."""
    try:
        import dask  # noqa: F401
        import dask.dataframe as dd
    except ImportError:
        raise StelltempError("Dask runs need the optional extra: pip install 'stelltemp[scale]'") from None
    return dd


def process_partition(df, in_schema, cmap, opts, engine, names):
    """One pandas partition -> pandas frame of input plus result columns.

    Partitions hold Arrow-backed pandas columns (``dtype_backend="pyarrow"``),
    so nulls and NaN survive the trip and the per-chunk work sees exactly
    what a local run sees.
    """
    import pandas as pd

    chunk = pa.Table.from_pandas(df, schema=in_schema, preserve_index=False)
    res = compute_chunk(chunk, cmap, opts, engine)
    return merge_arrow(chunk, res, names).to_pandas(types_mapper=pd.ArrowDtype)


def run_catalogue_dask(
    input_path,
    output_path,
    mapping=None,
    *,
    ebv=None,
    ebv_err=None,
    rv=3.1,
    law="G23",
    method="auto",
    fit_ebv=False,
    feh_err=None,
    cal_ebv=False,
    cal_detail=False,
    overwrite=False,
    quiet=False,
    engine=None,
    scheduler=None,
    workers=None,
    local="threads",
    window=None,
):
    """Run the temperature engine over a Parquet file with Dask.

    Parameters
    ----------
    input_path : path-like
        Parquet file (or folder of Parquet files).
    output_path : path-like
        Output table; any format of :mod:`stelltemp.catalog.tableio`
        (Parquet or CSV keep memory bounded).
    scheduler : str, distributed.Client or None
        Address of a running dask.distributed scheduler (``tcp://host:8786``)
        or a Client; None computes locally with the `local` scheduler.
    workers : int or None
        Local worker count (threads or processes); default the CPU count.
    local : {"threads", "processes", "synchronous"}
        Local scheduler when no `scheduler` is given.
    window : int or None
        Partitions computed at once (memory bound); default twice the workers.
    Other parameters
        As :func:`stelltemp.catalog.batch.run_catalogue`.

    Returns
    -------
    RunSummary
        With ``backend`` ``"dask"``.
    """
    t0 = time.perf_counter()
    dd = require_dask()
    import dask

    if tableio.table_format(input_path) != "parquet" and not os.path.isdir(input_path):
        raise StelltempError(f"{input_path}: Dask runs read Parquet input (run CSV and others locally)")
    if local not in LOCAL_SCHEDULERS:
        raise StelltempError(f"unknown local scheduler '{local}' (use {', '.join(LOCAL_SCHEDULERS)})")
    opts = RunOptions(rv=float(rv), law=law, method=method, fit_ebv=bool(fit_ebv), cal_ebv=bool(cal_ebv),
                      cal_detail=bool(cal_detail))
    opts.check()
    tableio.check_output(output_path, overwrite, input_path)
    reader = tableio.ChunkReader(input_path) if not os.path.isdir(input_path) else None
    try:
        ddf = dd.read_parquet(str(input_path), split_row_groups=True, dtype_backend="pyarrow")
    except Exception as exc:  # dask wraps pyarrow's many error types
        raise StelltempError(f"{input_path}: not a readable Parquet input ({tableio._first_line(exc)})") from None
    in_schema = reader.schema if reader is not None else pa.Schema.from_pandas(ddf._meta, preserve_index=False)
    if len(set(in_schema.names)) != len(in_schema.names):
        raise StelltempError(f"{input_path}: repeated column names; run locally (it renames them)")
    check_old_results(input_path, in_schema.names, renew=False)  # a result table: renew it locally
    cmap = resolve_mapping(in_schema.names, mapping, ebv, ebv_err, feh_err=feh_err)
    engine = engine or default_engine()

    empty = in_schema.empty_table()
    probe = compute_chunk(empty, cmap, opts, engine)
    names = result_names(in_schema.names, probe.colnames)
    # units and descriptions ride on the output schema every partition is cast to
    out_schema = merge_arrow(empty, probe, names, input_info=input_units(in_schema.names, cmap)).schema
    import pandas as pd  # comes with dask.dataframe

    meta = out_schema.empty_table().to_pandas(types_mapper=pd.ArrowDtype)
    out = ddf.map_partitions(process_partition, in_schema, cmap, opts, engine, names, meta=meta)
    parts = out.to_delayed()

    client, own_client = _client(scheduler)
    nworkers = workers or _worker_count(client) or os.cpu_count() or 1
    window = max(1, int(window or 2 * nworkers))
    compute_kw = {} if client is not None else {"scheduler": local, "num_workers": nworkers}
    if local == "synchronous" and client is None:
        compute_kw.pop("num_workers")

    summary = RunSummary(input=str(input_path), output=str(output_path), backend="dask")
    result_out = [names[c] for c in probe.colnames]
    try:
        with tableio.open_sink(output_path, run_record(cmap, opts), overwrite) as sink, progress_bar(
            reader.num_rows if reader is not None else None, quiet
        ) as bar:
            for start in range(0, len(parts), window):
                if client is not None:
                    frames = client.gather(client.compute(parts[start : start + window]))
                else:
                    frames = dask.compute(*parts[start : start + window], **compute_kw)
                for frame in frames:
                    table = pa.Table.from_pandas(frame, schema=out_schema, preserve_index=False)
                    _count(summary, table, result_out, probe.colnames)
                    sink.write(table if sink.kind == "arrow" else tableio.arrow_to_astropy(table))
                    bar.update(table.num_rows)
            if summary.chunks == 0:
                sink.write(out_schema.empty_table() if sink.kind == "arrow"
                           else tableio.arrow_to_astropy(out_schema.empty_table()))
    finally:
        if own_client:
            client.close()
    summary.wall_time_s = time.perf_counter() - t0
    return summary


def _count(summary, table, out_names, result_names_):
    res = tableio.arrow_to_astropy(table.select(out_names))
    res.rename_columns(out_names, result_names_)
    summary.add(res)


def _client(scheduler):
    """(client, created_here) for a scheduler address or Client; (None, False) for local."""
    if scheduler is None:
        return None, False
    if hasattr(scheduler, "compute") and hasattr(scheduler, "gather"):
        return scheduler, False
    try:
        from distributed import Client
    except ImportError:
        raise StelltempError("a scheduler address needs dask.distributed: pip install 'stelltemp[scale]'") from None
    try:
        return Client(str(scheduler), timeout="10s", set_as_default=False), True
    except OSError as exc:
        raise StelltempError(f"cannot reach the Dask scheduler at {scheduler} ({tableio._first_line(exc)})") from None


def _worker_count(client):
    if client is None:
        return None
    try:
        return sum(w.get("nthreads", 1) for w in client.scheduler_info()["workers"].values()) or None
    except Exception:  # information only; fall back to the CPU count
        return None
