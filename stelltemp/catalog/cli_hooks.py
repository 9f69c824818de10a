"""The ``catalogue`` subcommand: run the engine over a table file.

The lead wires it into ``stelltemp/cli.py``::

    from stelltemp.catalog.cli_hooks import add_cli as add_catalogue_cli
    add_catalogue_cli(subparsers)          # registers "catalogue"
    ...
    if args.command == "catalogue":        # or set_defaults(func=run_cli)
        return run_cli(args)

Exit codes: 0 done, 2 bad input (one line on stderr).
"""

from __future__ import annotations

import sys
from pathlib import Path

from stelltemp.errors import StelltempError

COMMAND = "catalogue"
#: same as stelltemp.catalog.batch.DEFAULT_CHUNK_ROWS (not imported: keeps CLI start-up light)
DEFAULT_CHUNK_ROWS = 50_000


def add_cli(subparsers):
    """Register the ``catalogue`` subcommand on an argparse subparsers object."""
    p = subparsers.add_parser(
        COMMAND,
        help="temperatures for every row of a table file (CSV, ECSV, FITS, VOTable, Parquet)",
        description=(
            "Run the temperature engine over a table file. Magnitude columns are named by "
            "passband key (jc.V, 2mass.Ks ...) with errors in <key>_err, unless a column map "
            "file says otherwise. Formats follow the file extensions; Parquet and CSV stream "
            "with bounded memory, other formats are held in memory."
        ),
    )
    p.add_argument("input", help="input table file")
    p.add_argument("output", help="output table file (input columns plus results)")
    p.add_argument("--columns", metavar="MAP.toml", help="column map file ([bands], [columns], [values])")
    p.add_argument("--ebv", metavar="VALUE|COLUMN", help="E(B-V) in mag for every row, or the column holding it")
    p.add_argument("--ebv-err", metavar="VALUE|COLUMN", help="error of E(B-V), a number or a column")
    p.add_argument("--fit-ebv", action="store_true", help="fit E(B-V) from the photometry")
    p.add_argument("--rv", type=float, default=3.1, help="R_V (default 3.1)")
    p.add_argument("--law", default="G23", help="extinction law name (default G23)")
    p.add_argument("--method", default="auto", help="engine method (default auto)")
    p.add_argument("--replace", action="store_true", help="allow replacing an existing output file")
    p.add_argument("--chunk-rows", type=int, default=DEFAULT_CHUNK_ROWS, metavar="N",
                   help=f"rows per chunk (default {DEFAULT_CHUNK_ROWS}); memory grows with it")
    p.add_argument("--quiet", action="store_true", help="no progress bar and no closing summary text")
    p.add_argument("--json", action="store_true", help="print the closing summary as JSON on stdout")
    p.add_argument("--plot", metavar="FILE",
                   help=f"write a colour-temperature diagram of the results (first {PLOT_ROWS} rows; PNG)")
    p.add_argument("--dask", action="store_true", help="run on Dask (Parquet input; needs stelltemp[scale])")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="address of a running dask.distributed scheduler (implies --dask)")
    p.add_argument("--workers", type=int, metavar="N", help="local Dask workers (default: all cores)")
    p.add_argument("--dask-local", choices=("threads", "processes"), default="threads",
                   help="local Dask workers as threads (default) or processes")
    p.set_defaults(func=run_cli)
    return p


def run_cli(args, engine=None):
    """Run the subcommand from parsed `args`; return the exit code.

    Parameters
    ----------
    args : argparse.Namespace
    engine : callable or None
        Engine function (tests pass a stand-in); default the real engine.
    """
    try:
        if args.chunk_rows < 1:
            raise StelltempError("--chunk-rows must be at least 1")
        if args.plot:  # refuse before the long run: folder, format, existing file
            from stelltemp.safeio import check_figure_path

            check_figure_path(args.plot, args.replace)
        common = dict(
            mapping=args.columns, ebv=args.ebv, ebv_err=args.ebv_err, rv=args.rv, law=args.law,
            method=args.method, fit_ebv=args.fit_ebv, overwrite=args.replace, quiet=args.quiet,
            engine=engine,
        )
        if args.dask or args.scheduler:
            from stelltemp.catalog.scale import run_catalogue_dask

            summary = run_catalogue_dask(args.input, args.output, scheduler=args.scheduler,
                                         workers=args.workers, local=args.dask_local, **common)
        else:
            from stelltemp.catalog.batch import run_catalogue

            summary = run_catalogue(args.input, args.output, chunk_rows=args.chunk_rows, **common)
    except StelltempError as exc:
        text = str(exc).replace("(allow replacing it explicitly, e.g. with --replace)", "(add --replace to replace it)")
        print(f"stelltemp: error: {text}", file=sys.stderr)
        return 2
    if args.plot:
        try:
            plot_results(args.output, args.plot, args.law, args.rv, replace=args.replace)
        except StelltempError as exc:
            print(f"stelltemp: error: {exc}", file=sys.stderr)
            return 2
    if args.json:
        print(summary.to_json())
    elif not args.quiet:
        print(summary)
    return 0


#: rows of a results file drawn by --plot (a diagram of millions of points reads no better)
PLOT_ROWS = 20_000


def plot_results(results_path, figure_path, law="G23", rv=3.1, replace=False):
    """Colour–temperature diagram of the first `PLOT_ROWS` rows of a results file."""
    from stelltemp.catalog.tableio import STREAMING, ChunkReader, arrow_to_astropy
    from stelltemp.plots import plot_catalogue_results

    reader = ChunkReader(results_path, chunk_rows=PLOT_ROWS)
    first = next(iter(reader), None)
    if first is None:
        raise StelltempError(f"{results_path}: no rows to plot")
    table = arrow_to_astropy(first) if reader.fmt in STREAMING else first[:PLOT_ROWS]
    return plot_catalogue_results(table, figure_path, law=law, rv=rv, replace=replace)
