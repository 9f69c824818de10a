"""Chunked runs of the temperature engine over a table file.

Memory stays bounded by the chunk size when both ends are Parquet or CSV
(they stream); ECSV, FITS and VOTable outputs are accumulated and written at
the end, so large runs should use Parquet or CSV.

The same per-chunk function, `compute_chunk`, serves the local loop here and
the Dask partitions in :mod:`stelltemp.catalog.scale`, so both give identical
rows.
"""

from __future__ import annotations

import json
import sys
import time
from dataclasses import asdict, dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from stelltemp.catalog import tableio
from stelltemp.catalog.describe import input_units
from stelltemp.catalog.hygiene import prepare_inputs
from stelltemp.catalog.mapping import ColumnMap, default_mapping, load_mapping, mapping_from_dict
from stelltemp.engine import flags as F
from stelltemp.errors import StelltempError
from stelltemp.threads import ordered_map
from stelltemp.validation import check_number

#: suffix given to a result column whose name is already an input column
RESULT_SUFFIX = "_result"
#: rows per chunk: measured on 2 cores, 50 000 rows ran faster and in less
#: than half the memory of 200 000 (the engine's work arrays stay in cache)
DEFAULT_CHUNK_ROWS = 50_000
#: column with the reasons of the flags set before the engine ran
NOTES_COLUMN = "input_notes"
#: column naming the method the engine applied to the row
METHOD_COLUMN = "t_bb_method"
#: columns whose joint presence marks a table as a stelltemp result
RESULT_MARKERS = ("t_bb", "t_bb_lo", "t_bb_hi", "flag_names")


@dataclass(frozen=True)
class RunOptions:
    """Engine settings shared by every row of a run.

    Parameters
    ----------
    rv : float
        Total-to-selective extinction ratio R_V.
    law : str
        Extinction law name (e.g. ``"G23"``, Gordon et al. 2023, ApJ 950, 86).
    method : str
        Engine method (``"auto"`` lets the engine choose).
    fit_ebv : bool
        Fit E(B−V) from the photometry instead of taking it as given.
    cal_ebv : bool
        Estimate E(B−V) from the calibrated colours themselves for
        ``teff_cal`` (the given E(B−V) and its error act as a prior).
    cal_detail : bool
        Add each calibrated relation's own temperature and error as columns.

    Examples
    --------
    >>> RunOptions(rv=3.1, law="G23").check()  # nothing to say: usable
    >>> RunOptions(rv=-1.0).check()
    Traceback (most recent call last):
    ...
    stelltemp.errors.StelltempError: R_V must be a positive number, got -1.0
    """

    rv: float = 3.1
    law: str = "G23"
    method: str = "auto"
    fit_ebv: bool = False
    cal_ebv: bool = False
    cal_detail: bool = False

    def check(self):
        """Raise `StelltempError` for options no row could use."""
        if not (np.isfinite(self.rv) and self.rv > 0):
            raise StelltempError(f"R_V must be a positive number, got {self.rv}")
        if not isinstance(self.law, str) or not self.law:
            raise StelltempError("the extinction law needs a name (e.g. G23)")


@dataclass
class RunSummary:
    """What a run did: rows, successes, flag counts, wall time.

    A row counts as a success when at least one of its temperature columns
    (unit K, errors excluded) is finite.

    Examples
    --------
    >>> import astropy.units as u
    >>> from astropy.table import QTable
    >>> summary = RunSummary(input="in.csv", output="out.csv")
    >>> summary.add(QTable({"t_bb": [5800.0, float("nan")] * u.K, "flags": [0, 1]}))
    >>> summary.rows, summary.successes, summary.clean_rows
    (2, 1, 1)
    """

    input: str = ""
    output: str = ""
    backend: str = "local"
    rows: int = 0
    successes: int = 0
    clean_rows: int = 0
    flag_counts: dict = field(default_factory=lambda: {name: 0 for name in F.NAMES.values()})
    chunks: int = 0
    wall_time_s: float = 0.0
    notes: list = field(default_factory=list)

    @property
    def rows_per_second(self):
        return self.rows / self.wall_time_s if self.wall_time_s > 0 else float("nan")

    def add(self, results):
        """Count one chunk of engine results."""
        flags = np.asarray(results["flags"], dtype=np.int64)
        self.rows += len(flags)
        self.chunks += 1
        self.clean_rows += int(np.count_nonzero(flags == 0))
        self.successes += int(np.count_nonzero(success_mask(results)))
        for bit, name in F.NAMES.items():
            self.flag_counts[name] += int(np.count_nonzero(flags & bit))

    def to_dict(self):
        d = asdict(self)
        d["rows_per_second"] = None if not np.isfinite(self.rows_per_second) else round(self.rows_per_second, 1)
        d["wall_time_s"] = round(self.wall_time_s, 3)
        return d

    def to_json(self):
        return json.dumps(self.to_dict(), indent=1)

    def __str__(self):
        flagged = ", ".join(f"{k} {v}" for k, v in self.flag_counts.items() if v) or "none"
        lines = [
            f"{self.rows} rows in {self.wall_time_s:.2f} s ({self.backend}), "
            f"{self.successes} with a temperature, {self.clean_rows} without flags",
            f"flags: {flagged}",
            f"written: {self.output}" + _sidecar_note(self.output),
        ]
        lines += [f"note: {n}" for n in self.notes]
        return "\n".join(lines)


def _sidecar_note(output):
    """`` (units and run record: <stem>.meta.json)`` for a CSV output, else nothing."""
    from .tableio import EXTENSIONS, csv_sidecar_path

    if output and EXTENSIONS.get(Path(str(output)).suffix.lower()) == "csv":
        return f" (units and run record: {csv_sidecar_path(output)})"
    return ""


def success_mask(results):
    """Rows with at least one finite temperature (unit K, ``*_err`` excluded)."""
    import astropy.units as u

    ok = np.zeros(len(results), bool)
    found = False
    for name in results.colnames:
        col = results[name]
        unit = getattr(col, "unit", None)
        if unit is None or name.endswith("_err") or unit != u.K:
            continue
        found = True
        ok |= np.isfinite(np.asarray(getattr(col, "value", col), dtype=float))
    if not found:
        ok = np.asarray(results["flags"]) == 0
    return ok


def default_engine():
    """The temperature engine, imported only when a run needs it."""
    try:
        from stelltemp.engine import estimate
    except ImportError as exc:
        raise StelltempError(f"the temperature engine is not available ({exc})") from None
    return estimate


def tool_version():
    """Version of stelltemp: the package attribute, else the installed metadata."""
    import stelltemp

    version = getattr(stelltemp, "__version__", None)
    if version:
        return str(version)
    try:
        from importlib.metadata import PackageNotFoundError, version as dist_version

        return dist_version("stelltemp")
    except PackageNotFoundError:
        return "unknown"


def run_record(cmap, opts):
    """Run metadata stored with the output (layout in :mod:`stelltemp.catalog.describe`)."""
    from stelltemp.catalog.describe import run_record as describe_run

    return describe_run(cmap, opts, tool_version(), datetime.now(timezone.utc).isoformat(timespec="seconds"))


def resolve_mapping(colnames, mapping=None, ebv=None, ebv_err=None, vector_columns=(), feh_err=None):
    """The column map of a run, checked against the table's columns.

    Parameters
    ----------
    colnames : list of str
    mapping : None, path-like, dict or ColumnMap
        None uses the default naming (see :mod:`stelltemp.catalog.mapping`).
    ebv, ebv_err : float, str or None
        A number for every row or a column name; overrides the map.
    vector_columns : iterable of str
        Columns holding several values per row; none may be mapped.
    feh_err : float, str or None
        [Fe/H] error (dex): a number for every row or a column name.
    """
    if mapping is None:
        cmap = default_mapping(colnames)
    elif isinstance(mapping, ColumnMap):
        cmap = mapping
    elif isinstance(mapping, dict):
        cmap = mapping_from_dict(mapping)
    else:
        cmap = load_mapping(mapping)
    for name, val in cmap.values.items():  # the map's own values: named as the map names them
        check_number(name, val, f"{name} in the column map's [values]")
    cmap = cmap.with_ebv(ebv, ebv_err, feh_err)
    for name, val in cmap.values.items():  # now the ebv / ebv_err arguments too
        check_number(name, val)
    cmap.check(colnames)
    vectors = [c for c in cmap.required_columns() if c in set(vector_columns)]
    if vectors:
        raise StelltempError(
            f"column '{vectors[0]}' holds several values per row (a vector column): map a column "
            "with one value per row"
        )
    return cmap


def _getter(chunk):
    return lambda name: chunk[name]


def compute_chunk(chunk, cmap, opts, engine, row_notes=()):
    """Clean one chunk's inputs, run the engine, merge the pre-engine flags.

    Parameters
    ----------
    chunk : pyarrow Table or astropy Table
        Rows of the catalogue.
    cmap : ColumnMap
        Checked column map.
    opts : RunOptions
    engine : callable
        Follows the contract of `stelltemp.engine.estimate`.
    row_notes : iterable of (int, str, bool)
        Rows the table reader changed (`tableio.ChunkReader.row_notes`).

    Returns
    -------
    astropy.table.QTable
        One row per input row: the engine's columns with ``flags`` including
        the hygiene bits, ``flag_names`` recomputed, and `NOTES_COLUMN`.
    """
    n = len(chunk)
    if n == 0:
        return _empty_results(cmap, opts, engine)
    clean = prepare_inputs(_getter(chunk), cmap, n, fit_ebv=opts.fit_ebv, row_notes=row_notes)
    res = _call_engine(engine, clean, opts)
    if len(res) != n:
        raise StelltempError(f"the engine returned {len(res)} rows for {n}")
    old = np.asarray(res["flags"], dtype=np.int64) if "flags" in res.colnames else np.zeros(n, np.int64)
    masks = old | clean.flags
    res["flags"] = masks
    res["flag_names"] = F.describe_all(masks)
    res[NOTES_COLUMN] = clean.notes
    if "method" in res.meta and METHOD_COLUMN not in res.colnames:  # the method applied, row by row
        res[METHOD_COLUMN] = np.full(n, str(res.meta["method"]))
    return res


def _call_engine(engine, clean, opts):
    s = clean.scalars
    # the calibration options go to the engine only when used, so a stand-in engine with the
    # basic contract keeps working
    extra = {k: v for k, v in (("feh_err", s.get("feh_err")), ("cal_ebv", opts.cal_ebv),
                               ("cal_detail", opts.cal_detail)) if v is not None and v is not False}
    return engine(
        clean.mags,
        clean.errs or None,
        ebv=s.get("ebv", 0.0),
        ebv_err=s.get("ebv_err", 0.0),
        rv=opts.rv,
        law=opts.law,
        fit_ebv=opts.fit_ebv,
        parallax=s.get("parallax"),
        parallax_err=s.get("parallax_err"),
        feh=s.get("feh"),
        logg=s.get("logg"),
        method=opts.method,
        **extra,
    )


def _empty_results(cmap, opts, engine):
    """Zero-row results with the engine's columns (probe one all-NaN row)."""
    import pyarrow as pa

    probe = pa.table(
        {name: pa.array([np.nan], pa.float64()) for name in cmap.required_columns()}
    )
    return compute_chunk(probe, cmap, opts, engine)[:0]


def result_names(input_names, result_cols):
    """Output names of result columns: clashes with input columns get `RESULT_SUFFIX`."""
    taken = set(input_names)
    out = {}
    for name in result_cols:
        new = name
        while new in taken:
            new += RESULT_SUFFIX
        taken.add(new)
        out[name] = new
    return out


def merge_arrow(chunk, results, names, types=None, input_info=None):
    """Input chunk (any kind) plus renamed results as one pyarrow Table.

    ``input_info`` (from `stelltemp.catalog.describe.input_units`) gives
    input columns without a unit their unit and description; every result
    column gets its description.
    """
    import pyarrow as pa

    from stelltemp.catalog.describe import describe_result

    left = chunk if isinstance(chunk, pa.Table) else tableio.astropy_to_arrow(chunk)
    if types:
        left = tableio.apply_types(left, types)
    if input_info:
        fields = [tableio.with_column_info(f, *input_info.get(f.name, (None, None))) for f in left.schema]
        left = pa.Table.from_arrays(left.columns, schema=pa.schema(fields, metadata=left.schema.metadata))
    coded = "flag_names" in results.colnames and "flags" in results.colnames
    # text held as shared str objects goes to Arrow directly (pyarrow reads such arrays in C)
    texts = [c for c in results.colnames if getattr(results[c], "dtype", None) == object
             and getattr(results[c], "unit", None) is None]
    right = tableio.results_to_arrow(results[[c for c in results.colnames if c not in texts]])
    for name in results.colnames:
        if coded and name == "flag_names":
            # the names from their dictionary encoding: one string per distinct mask, taken per row
            codes, names_ = F.encode(np.asarray(results["flags"], dtype=np.int64))
            col = tableio.text_to_arrow(np.array(list(names_), dtype=str)).take(tableio.numpy_to_arrow(codes))
            f = pa.field(name, pa.string())
        elif name in texts:
            col = tableio.objects_to_arrow(np.asarray(results[name]))
            f = pa.field(name, pa.string())
        else:
            col = right.column(name)
            f = right.schema.field(name)
        field = tableio.with_column_info(pa.field(names[f.name], f.type, metadata=f.metadata),
                                         description=describe_result(f.name))
        left = left.append_column(field, col)
    return left


def merge_astropy(chunk, results, names, types=None, input_info=None):
    """Input chunk (any kind) plus renamed results as one astropy Table (see `merge_arrow`)."""
    import pyarrow as pa
    from astropy.table import Table

    from stelltemp.catalog.describe import describe_result

    if isinstance(chunk, pa.Table):
        left = tableio.arrow_to_astropy(tableio.apply_types(chunk, types) if types else chunk)
    else:
        left = Table(chunk, copy=True)
    left.meta.clear()  # the output's metadata is the run record alone
    for name, (unit, text) in (input_info or {}).items():
        if name in left.colnames:
            col = left[name]
            if unit and getattr(col, "unit", None) is None and col.dtype.kind in "fiu":
                col.unit = unit
            if text and not col.info.description:
                col.info.description = text
    for name in results.colnames:
        col = results[name]
        # text held as shared str objects (flag names): fixed-width text for the file writers
        left[names[name]] = col.astype(str) if getattr(col, "dtype", None) == object else col
        if not left[names[name]].info.description:
            left[names[name]].info.description = describe_result(name)
    return left


def result_columns_in(colnames):
    """Columns of an earlier stelltemp run among ``colnames`` ([] when it is no result table).

    A table counts as a result when it holds every column of `RESULT_MARKERS`;
    its result columns are the engine's, the catalogue layer's and their
    ``_result``-suffixed twins.
    """
    from stelltemp.engine import RESULT_COLUMNS

    if not all(m in colnames for m in RESULT_MARKERS):
        return []
    known = set(RESULT_COLUMNS) | {NOTES_COLUMN, METHOD_COLUMN}
    out = []
    for name in colnames:
        base = name
        while base.endswith(RESULT_SUFFIX) and base not in known:
            base = base[: -len(RESULT_SUFFIX)]
        if base in known:
            out.append(name)
    return out


def _without(chunk, drop):
    """``chunk`` (pyarrow or astropy) without the columns ``drop``."""
    if not drop:
        return chunk
    if hasattr(chunk, "drop_columns"):
        return chunk.drop_columns(list(drop))
    keep = [c for c in chunk.colnames if c not in set(drop)]
    return chunk[keep]


class _NoBar:
    """Stands in for a hidden progress bar."""

    disable = True

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False

    def update(self, n=1):
        pass

    def close(self):
        pass


def progress_bar(total, quiet):
    """A tqdm bar of rows on stderr, hidden when `quiet` or stderr is not a terminal."""
    hidden = quiet or not sys.stderr.isatty()
    if hidden:  # tqdm.auto pulls in asyncio: not worth its start-up for a bar nobody sees
        return _NoBar()
    from tqdm.auto import tqdm

    return tqdm(total=total, unit="row", unit_scale=True, disable=hidden, delay=1.0, file=sys.stderr,
                desc="stelltemp")


@dataclass
class RunSetUp:
    """What a catalogue run checks and decides before its first chunk (see `set_up_run`)."""

    opts: RunOptions
    reader: object  # tableio.ChunkReader
    old: list  # result columns of an earlier run, dropped from the input
    colnames: list  # the input's columns without them
    cmap: ColumnMap
    input_info: dict
    engine: object
    types: object  # typed columns for a typed output of a CSV input, else None
    declared: object  # CSV to CSV: the types declared in the sidecar, else None
    conversions: list
    record: dict  # the run record written into the output's metadata

    def closing_notes(self, sink):
        """The map's, the conversions' and the sink's notes, and the replaced results, as a summary lists them."""
        notes = list(self.cmap.notes) + self.conversions + list(getattr(sink, "notes", []))
        if self.old:
            notes.append(f"{len(self.old)} result columns of an earlier run replaced by this run's")
        return notes


def set_up_run(input_path, output_path, mapping, *, ebv, ebv_err, feh_err, rv, law, method, fit_ebv, cal_ebv,
               cal_detail, overwrite, renew_results, chunk_rows, engine):
    """Every check and choice a catalogue run makes before any work, shared by the local and the Dask paths.

    Options checked, output path refused early, earlier results found, the
    column map resolved against the input (vector columns refused), input
    units, the engine, the CSV type pre-pass and the run record.  Arguments
    as `run_catalogue`'s.
    """
    opts = RunOptions(rv=float(rv), law=law, method=method, fit_ebv=bool(fit_ebv), cal_ebv=bool(cal_ebv),
                      cal_detail=bool(cal_detail))
    opts.check()
    tableio.check_output(output_path, overwrite, input_path)
    reader = tableio.ChunkReader(input_path, chunk_rows)
    old = check_old_results(input_path, reader.colnames, renew_results)
    colnames = [c for c in reader.colnames if c not in set(old)]
    cmap = resolve_mapping(colnames, mapping, ebv, ebv_err, [c for c in reader.vector_columns() if c not in old],
                           feh_err)
    input_info = input_units(colnames, cmap)
    out_fmt = tableio.table_format(output_path)
    types, conversions, declared = None, [], None
    if reader.fmt == "csv" and out_fmt != "csv":  # give typed columns to typed formats
        types = tableio.narrowest_types(iter(reader), reader.colnames, conversions)
    elif reader.fmt == "csv":  # CSV to CSV keeps its text and declares the types in its sidecar
        declared = tableio.narrowest_types(iter(reader), reader.colnames, [])
    record = run_record(cmap, opts)
    if conversions:
        record["conversions"] = "; ".join(conversions)
    return RunSetUp(opts, reader, old, colnames, cmap, input_info, engine or default_engine(), types, declared,
                    conversions, record)


def run_catalogue(
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
):
    """Run the temperature engine over every row of a table file.

    Parameters
    ----------
    input_path, output_path : path-like
        Table files; formats by extension (see :mod:`stelltemp.catalog.tableio`).
    mapping : None, path-like, dict or ColumnMap
        Column map; None uses the default naming.
    ebv, ebv_err : float, str or None
        E(B−V) (mag) for every row, or the column holding it; overrides the map.
    rv : float
        R_V.
    law : str
        Extinction law name.
    method : str
        Engine method.
    fit_ebv : bool
        Fit E(B−V) instead of taking it as given.
    feh_err : float, str or None
        1σ error of [Fe/H] (dex) for every row, or the column holding it;
        overrides the map.  It enters the error of ``teff_cal``.
    cal_ebv : bool
        E(B−V) for ``teff_cal`` from the calibrated colours themselves
        (3+ colours, or the given E(B−V) error as a prior).
    cal_detail : bool
        Add each relation's own temperature and error (``teff_<relation>``
        columns).
    overwrite : bool
        Allow replacing an existing output file.
    renew_results : bool
        The input is itself a stelltemp result table: drop its result
        columns and compute them again (without this such an input is
        refused, so results never pile up as ``*_result`` columns).
    chunk_rows : int
        Rows per chunk (memory bound for streaming formats).
    quiet : bool
        No progress bar (it is also hidden when stderr is not a terminal).
    engine : callable or None
        Engine function; default `stelltemp.engine.estimate`.

    Returns
    -------
    RunSummary

    Raises
    ------
    StelltempError
        Unreadable input, unknown extension, missing columns, existing output,
        bad options.  Bad rows never raise: they are flagged.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from astropy.table import Table
    >>> from stelltemp.catalog import read_table, write_table
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = write_table(Table({"B_JC": [10.65, 9.9], "V_JC": [10.0, 9.3]}), d / "in.csv")
    >>> summary = run_catalogue(d / "in.csv", d / "out.ecsv", quiet=True)
    >>> summary.rows, len(read_table(d / "out.ecsv"))
    (2, 2)

    """
    t0 = time.perf_counter()
    run = set_up_run(input_path, output_path, mapping, ebv=ebv, ebv_err=ebv_err, feh_err=feh_err, rv=rv, law=law,
                     method=method, fit_ebv=fit_ebv, cal_ebv=cal_ebv, cal_detail=cal_detail, overwrite=overwrite,
                     renew_results=renew_results, chunk_rows=chunk_rows, engine=engine)
    reader, old, colnames, cmap, opts, engine = run.reader, run.old, run.colnames, run.cmap, run.opts, run.engine
    types, input_info = run.types, run.input_info

    summary = RunSummary(input=str(input_path), output=str(output_path))
    with tableio.open_sink(output_path, run.record, overwrite) as sink, progress_bar(
        reader.num_rows, quiet
    ) as bar:
        merge = merge_arrow if sink.kind == "arrow" else merge_astropy
        if run.declared:
            sink.declared_types = run.declared

        def computed(item):  # on a thread of its own when there are several
            chunk, row_notes = item
            chunk = _without(chunk, old)
            res = compute_chunk(chunk, cmap, opts, engine, row_notes)
            return res, merge(chunk, res, result_names(colnames, res.colnames), types, input_info)

        # each chunk with the reader's notes on it, taken before the reader moves on
        chunks = ((chunk, reader.row_notes if len(chunk) else ()) for chunk in _nonempty_or_one_empty(reader))
        # the default engine is safe on threads; another engine runs here, one chunk at a time
        threads = None if engine is default_engine() else 1
        for res, merged in ordered_map(computed, chunks, threads):
            summary.add(res)
            sink.write(merged)
            bar.update(len(res))
    summary.notes.extend(reader.notes)
    summary.notes.extend(run.closing_notes(sink))
    summary.wall_time_s = time.perf_counter() - t0
    return summary


def check_old_results(source, colnames, renew):
    """Result columns of an earlier run in the input; refused unless ``renew``."""
    old = result_columns_in(colnames)
    if old and not renew:
        raise StelltempError(
            f"{source} already holds stelltemp results ({len(old)} columns: {', '.join(old[:3])}, ...); "
            "run on the original catalogue, or ask to compute them again and replace them "
            "(--renew-results; renew_results=True in Python)")
    return old


def _nonempty_or_one_empty(reader):
    """Chunks of the reader; one empty chunk when the table has no rows."""
    any_rows = False
    for chunk in reader:
        if len(chunk):
            any_rows = True
            yield chunk
    if not any_rows:
        yield reader.empty_chunk()


def estimate_table(table, mapping=None, *, ebv=None, ebv_err=None, rv=3.1, law="G23", method="auto",
                   fit_ebv=False, renew_results=False, engine=None):
    """Run the engine over an in-memory astropy Table; return input plus result columns.

    Parameters are those of `run_catalogue` (without files).

    Returns
    -------
    astropy.table.QTable
        The input columns followed by the result columns, the same table
        type as :func:`stelltemp.engine.estimate` (columns with units are
        Quantities).

    Examples
    --------
    >>> from astropy.table import Table
    >>> out = estimate_table(Table({"B_JC": [10.65, 9.9], "V_JC": [10.0, 9.3]}))
    >>> type(out).__name__, out["t_bb"].unit
    ('QTable', Unit("K"))
    """
    opts = RunOptions(rv=float(rv), law=law, method=method, fit_ebv=bool(fit_ebv))
    opts.check()
    old = check_old_results("the table", list(table.colnames), renew_results)
    table = _without(table, old)
    cmap = resolve_mapping(list(table.colnames), mapping, ebv, ebv_err,
                           [n for n in table.colnames if getattr(table[n], "ndim", 1) > 1])
    res = compute_chunk(table, cmap, opts, engine or default_engine())
    from astropy.table import QTable

    return QTable(merge_astropy(table, res, result_names(table.colnames, res.colnames),
                                input_info=input_units(list(table.colnames), cmap)), copy=False)


__all__ = [
    "RunOptions",
    "RunSummary",
    "compute_chunk",
    "default_engine",
    "estimate_table",
    "merge_arrow",
    "merge_astropy",
    "progress_bar",
    "resolve_mapping",
    "result_names",
    "run_catalogue",
    "run_record",
]
