"""Catalogue runs on Dask: row ranges sized for the engine, worked and written by the workers.

How a run goes
--------------
* The driver opens the input with the local reader
  (:class:`stelltemp.catalog.tableio.ChunkReader`), so column renaming, the
  vector-column check, earlier results and the column map are judged by the
  same code as a local run.
* **Parquet**: the rows are cut into *partitions* sized for the engine
  (`partition_plan`: a few per worker, each a whole number of engine chunks,
  never fewer rows than one chunk), not into the file's row groups.  Each
  worker reads its own row range with pyarrow, runs
  :func:`stelltemp.catalog.batch.compute_chunk` and
  :func:`~stelltemp.catalog.batch.merge_arrow` chunk by chunk (the very code
  of a local run, hygiene and notes included), writes the result rows to a
  part file (Arrow IPC) and returns only its counts.
* **CSV**: the driver streams the text with the local reader (its malformed
  line notes need the lines in order) and hands each chunk, with the
  reader's row notes, to the workers, a bounded number at a time.
* ECSV, FITS and VOTable inputs are read whole by astropy anyway: they run
  through the local engine in this process, and the summary says so.
* Counts (rows, successes, clean rows, flags) are reduced on the workers; the
  driver adds the small per-partition summaries and appends the part files,
  in row order, to the output through the same atomic sinks as a local run
  (a temporary file renamed into place; the part folder is removed at the
  end, also after a failure).

Because the engine works row by row, the output is identical to a local run
row for row.  Dask is an optional extra (``pip install 'stelltemp[scale]'``);
it is imported only here and only when a Dask run starts.
"""

from __future__ import annotations

import os
import shutil
import tempfile
import time
from dataclasses import dataclass, fields
from pathlib import Path

from stelltemp.catalog import tableio
from stelltemp.catalog.batch import (
    DEFAULT_CHUNK_ROWS,
    RunOptions,
    RunSummary,
    compute_chunk,
    merge_arrow,
    progress_bar,
    result_names,
    run_catalogue,
    set_up_run,
)
from stelltemp.catalog.heap import engine_heap
from stelltemp.errors import StelltempError
from stelltemp.threads import in_order, single_thread

LOCAL_SCHEDULERS = ("threads", "processes", "synchronous")
#: partitions per worker a Parquet run aims at (enough to balance uneven rows, few enough to keep
#: the per-task cost small)
PARTITIONS_PER_WORKER = 4
#: most rows in one partition (its part file and the driver's copy while appending it)
MAX_PARTITION_ROWS = 1_000_000


def require_dask():
    """Import dask or raise a one-line `StelltempError` naming the extra."""
    try:
        import dask
    except ImportError:
        raise StelltempError("Dask runs need the optional extra: pip install 'stelltemp[scale]'") from None
    return dask


@dataclass(frozen=True)
class PartContext:
    """What every partition needs (sent once per task; all of it small)."""

    colnames: tuple  # input names after the reader's renaming
    old: tuple  # result columns of an earlier run to drop
    cmap: object
    opts: RunOptions
    engine: object
    names: dict  # result column -> output name
    types: object  # CSV text -> arrow types for typed outputs, or None
    input_info: dict
    out_schema: object
    chunk_rows: int
    part_dir: str


def partition_plan(row_groups, chunk_rows, workers):
    """Row ranges of a Parquet file's partitions.

    Parameters
    ----------
    row_groups : list of int
        Rows of each row group, in file order.
    chunk_rows : int
        Rows per engine chunk.
    workers : int
        Workers of the run.

    Returns
    -------
    list of (int, int, list of int)
        ``(start, stop, groups)``: global row range and the row groups it
        touches.  Ranges are whole multiples of `chunk_rows` (the last one
        shorter), about `PARTITIONS_PER_WORKER` per worker, at most
        `MAX_PARTITION_ROWS`, independent of how the file was written.

    Examples
    --------
    >>> partition_plan([300_000, 300_000], 50_000, 2)
    [(0, 100000, [0]), (100000, 200000, [0]), (200000, 300000, [0]), (300000, 400000, [1]), (400000, 500000, [1]), (500000, 600000, [1])]
    >>> partition_plan([10], 50_000, 2)
    [(0, 10, [0])]
    """
    total = sum(row_groups)
    if total == 0:
        return []
    chunk_rows = max(1, int(chunk_rows))
    want = -(-total // max(1, PARTITIONS_PER_WORKER * int(workers)))
    size = min(max(chunk_rows, -(-want // chunk_rows) * chunk_rows), max(chunk_rows, MAX_PARTITION_ROWS))
    bounds, at = [], 0
    for n in row_groups:
        bounds.append((at, at + n))
        at += n
    plan = []
    for start in range(0, total, size):
        stop = min(total, start + size)
        groups = [i for i, (a, b) in enumerate(bounds) if a < stop and b > start and b > a]
        plan.append((start, stop, groups))
    return plan


def _read_range(path, start, stop, groups, offsets, chunk_rows):
    """Arrow tables of at most `chunk_rows` rows covering global rows [start, stop)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    pf = pq.ParquetFile(path)
    first = offsets[groups[0]]
    at = first
    pending = []
    for batch in pf.iter_batches(batch_size=chunk_rows, row_groups=groups, use_threads=False):
        lo, hi = max(start, at), min(stop, at + batch.num_rows)
        if hi > lo:
            pending.append(batch.slice(lo - at, hi - lo))
        at += batch.num_rows
        rows = sum(b.num_rows for b in pending)
        while rows >= chunk_rows:  # re-cut so every chunk the engine sees is a full one
            table = pa.Table.from_batches(pending)
            yield table.slice(0, chunk_rows)
            rest = table.slice(chunk_rows)
            pending = rest.to_batches() if rest.num_rows else []
            rows = rest.num_rows
        if at >= stop:
            break
    if pending and sum(b.num_rows for b in pending):
        yield pa.Table.from_batches(pending)


def _work(chunks, ctx, tag):
    """Engine over (chunk, row_notes) pairs -> one part file; returns (path, RunSummary)."""
    import pyarrow as pa

    summary = RunSummary(backend="dask")
    path = os.path.join(ctx.part_dir, f"part-{tag:08d}.arrow")
    # one worker per core already: the engine starts no threads of its own here
    with single_thread(), engine_heap(), pa.OSFile(path, "wb") as fh, pa.ipc.new_file(fh, ctx.out_schema) as writer:
        for chunk, notes in chunks:
            chunk = chunk.rename_columns(list(ctx.colnames))
            if ctx.old:  # an earlier run's result columns, recomputed (--renew-results)
                chunk = chunk.drop_columns(list(ctx.old))
            res = compute_chunk(chunk, ctx.cmap, ctx.opts, ctx.engine, notes)
            summary.add(res)
            table = merge_arrow(chunk, res, ctx.names, ctx.types, ctx.input_info)
            writer.write_table(table.cast(ctx.out_schema))
    return path, summary


def parquet_partition(path, start, stop, groups, offsets, ctx, tag):
    """Worker task: read rows [start, stop) of a Parquet file, run them, write a part file."""
    chunks = ((t, ()) for t in _read_range(path, start, stop, groups, offsets, ctx.chunk_rows))
    return _work(chunks, ctx, tag)


def text_partition(chunk, row_notes, ctx, tag):
    """Worker task: one CSV chunk (as the local reader read it, with its row notes)."""
    return _work([(chunk, row_notes)], ctx, tag)


def add_summary(total, part):
    """Add a partition's `RunSummary` counts into `total` (the reduction of the workers' counts)."""
    for f in fields(RunSummary):
        value = getattr(part, f.name)
        if f.name == "flag_counts":
            for name, k in value.items():
                total.flag_counts[name] = total.flag_counts.get(name, 0) + k
        elif f.name in ("rows", "successes", "clean_rows", "chunks"):
            setattr(total, f.name, getattr(total, f.name) + value)


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
    renew_results=False,
    chunk_rows=DEFAULT_CHUNK_ROWS,
    quiet=False,
    engine=None,
    scheduler=None,
    workers=None,
    local="threads",
    window=None,
):
    """Run the temperature engine over a Parquet or CSV file with Dask.

    Parameters
    ----------
    input_path : path-like
        Parquet or CSV file (ECSV, FITS and VOTable run locally, with a note).
    output_path : path-like
        Output table; any format of :mod:`stelltemp.catalog.tableio`
        (Parquet or CSV keep memory bounded).
    chunk_rows : int
        Rows per engine call (as in a local run); partitions are whole
        multiples of it (`partition_plan`).
    scheduler : str, distributed.Client or None
        Address of a running dask.distributed scheduler (``tcp://host:8786``)
        or a Client; None computes locally with the `local` scheduler.
        Workers must see the input and the output's folder (part files
        are written there).
    workers : int or None
        Local worker count (threads or processes); default the CPU count.
    local : {"threads", "processes", "synchronous"}
        Local scheduler when no `scheduler` is given.
    window : int or None
        CSV chunks in flight at once (memory bound); default twice the workers.
    Other parameters
        As :func:`stelltemp.catalog.batch.run_catalogue`.

    Returns
    -------
    RunSummary
        With ``backend`` ``"dask"`` (``"local"`` for formats read whole).
    """
    t0 = time.perf_counter()
    if local not in LOCAL_SCHEDULERS:
        raise StelltempError(f"unknown local scheduler '{local}' (use {', '.join(LOCAL_SCHEDULERS)})")
    fmt = tableio.table_format(input_path)
    common = dict(ebv=ebv, ebv_err=ebv_err, rv=rv, law=law, method=method, fit_ebv=fit_ebv,
                  feh_err=feh_err, cal_ebv=cal_ebv, cal_detail=cal_detail,
                  overwrite=overwrite, renew_results=renew_results, chunk_rows=chunk_rows, quiet=quiet,
                  engine=engine)
    if fmt not in ("parquet", "csv"):
        summary = run_catalogue(input_path, output_path, mapping, **common)
        summary.notes.insert(0, f"{fmt.upper()} input is read whole, so it ran on the local engine in this "
                                "process, not on Dask (Dask reads Parquet and CSV)")
        return summary
    require_dask()
    chunk_rows = max(1, int(chunk_rows))
    run = set_up_run(input_path, output_path, mapping, ebv=ebv, ebv_err=ebv_err, feh_err=feh_err, rv=rv, law=law,
                     method=method, fit_ebv=fit_ebv, cal_ebv=cal_ebv, cal_detail=cal_detail, overwrite=overwrite,
                     renew_results=renew_results, chunk_rows=chunk_rows, engine=engine)
    reader, old, colnames, cmap, opts, engine = run.reader, run.old, run.colnames, run.cmap, run.opts, run.engine
    types, input_info = run.types, run.input_info

    empty = reader.empty_chunk().drop_columns(list(old))
    probe = compute_chunk(empty, cmap, opts, engine)
    names = result_names(colnames, probe.colnames)
    out_schema = merge_arrow(empty, probe, names, types, input_info).schema

    client, own_client = _client(scheduler)
    summary = RunSummary(input=str(input_path), output=str(output_path), backend="dask")
    out_dir = Path(output_path).parent if str(Path(output_path).parent) else Path(".")
    part_dir = tempfile.mkdtemp(prefix=f".{Path(output_path).name[:80]}.parts-", dir=out_dir)
    try:
        nworkers = workers or _worker_count(client) or os.cpu_count() or 1
        ctx = PartContext(tuple(reader.colnames), tuple(old), cmap, opts, engine, names, types, input_info,
                          out_schema, chunk_rows, part_dir)
        if reader.fmt == "parquet":
            import pyarrow.parquet as pq

            meta = pq.ParquetFile(input_path).metadata
            sizes = [meta.row_group(i).num_rows for i in range(meta.num_row_groups)]
            offsets = [sum(sizes[:i]) for i in range(len(sizes))]
            plan = partition_plan(sizes, chunk_rows, nworkers)
            tasks = ((parquet_partition, (str(input_path), a, b, g, offsets, ctx, k)) for k, (a, b, g) in enumerate(plan))
            ahead = len(plan)  # tasks are small: all may be in flight
            summary.notes.append(f"Dask: {len(plan)} partition(s) of up to {plan[0][1] - plan[0][0] if plan else 0} "
                                 f"rows on {nworkers} worker(s)")
        else:
            tasks = ((text_partition, (chunk, list(reader.row_notes), ctx, k)) for k, chunk in enumerate(reader))
            ahead = max(1, int(window or 2 * nworkers))
            summary.notes.append(f"Dask: CSV read in this process in chunks of {chunk_rows} rows, computed on "
                                 f"{nworkers} worker(s)")
        with tableio.open_sink(output_path, run.record, overwrite) as sink, progress_bar(reader.num_rows, quiet) as bar:
            if run.declared:
                sink.declared_types = run.declared
            wrote = False
            for path, part in _ordered(tasks, client, local, nworkers, ahead):
                add_summary(summary, part)
                wrote |= _append(sink, path, part.rows)
                bar.update(part.rows)
            if not wrote:
                table = out_schema.empty_table()
                sink.write(table if sink.kind == "arrow" else tableio.arrow_to_astropy(table))
    finally:
        shutil.rmtree(part_dir, ignore_errors=True)
        if own_client:
            client.close()
    summary.notes[:0] = list(reader.notes)
    summary.notes.extend(run.closing_notes(sink))
    summary.wall_time_s = time.perf_counter() - t0
    return summary


def _append(sink, path, rows):
    """Copy one part file into the sink (then delete it); True when it held rows."""
    import pyarrow as pa

    with pa.memory_map(path, "r") as src:
        table = pa.ipc.open_file(src).read_all()
        if table.num_rows:
            sink.write(table if sink.kind == "arrow" else tableio.arrow_to_astropy(table))
        del table
    os.unlink(path)
    return rows > 0


def _ordered(tasks, client, local, nworkers, ahead):
    """Run ``(function, args)`` tasks, at most `ahead` in flight; yield their results in task order."""
    import dask

    if client is not None:
        yield from in_order(lambda task: client.submit(task[0], *task[1], pure=False), tasks, ahead)
        return
    kw = {"scheduler": local} if local == "synchronous" else {"scheduler": local, "num_workers": nworkers}
    batch = []
    for fn, args in tasks:
        batch.append(dask.delayed(fn, pure=False)(*args))
        if len(batch) >= ahead:
            yield from dask.compute(*batch, **kw)
            batch = []
    if batch:
        yield from dask.compute(*batch, **kw)


def _client(scheduler):
    """(client, created_here) for a scheduler address or Client; (None, False) for local."""
    if scheduler is None:
        return None, False
    if hasattr(scheduler, "submit") and hasattr(scheduler, "gather"):
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
