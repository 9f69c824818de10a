"""``stelltemp catalogue``: temperatures for every row of a table file."""

import argparse
import json
import sys
from pathlib import Path

from ..errors import StelltempError
from ..safeio import check_figure_path
from ..validation import check_size
from . import options

NAME = "catalogue"
HELP = "temperatures for every row of a table file (CSV, ECSV, FITS, VOTable, Parquet)"
DESCRIPTION = (
    "Run the temperature engine over a table file. Magnitude columns are named by passband key "
    "(V_JC, Ks_2MASS ...) with errors in <key>_err, unless a column map file says otherwise. Formats "
    "follow the file extensions; Parquet and CSV stream with bounded memory, other formats are held "
    "in memory."
)
#: same as stelltemp.catalog.batch.DEFAULT_CHUNK_ROWS (not imported: keeps CLI start-up light; a test checks)
DEFAULT_CHUNK_ROWS = 50_000


def add(p):
    """Register the options of this subcommand on ``p`` (made by :func:`stelltemp.cli.options.subcommand`)."""
    p.add_argument("input", help="input table file")
    p.add_argument("old_output", nargs="?", metavar="OUTPUT", help=argparse.SUPPRESS)
    options.add_output(p, "the results table (input columns plus results; format by extension)")
    p.add_argument("--columns", metavar="MAP.toml", help="column map file ([bands], [columns], [values])")
    options.add_reddening(p, column=True)
    p.add_argument("--fit-ebv", action="store_true", help="fit E(B-V) from the photometry")
    options.add_calibration(p, column=True)
    p.add_argument("--method", default="auto", choices=["auto", "colour", "fit"], help="engine method")
    options.add_replace(p)
    p.add_argument("--renew-results", action="store_true",
                   help="the input is a stelltemp results table: drop its result columns and compute them again "
                        "(without this such an input is refused)")
    p.add_argument("--chunk-rows", type=int, default=DEFAULT_CHUNK_ROWS, metavar="N",
                   help="rows per chunk; memory grows with it")
    p.add_argument("--quiet", action="store_true", help="no progress bar and no closing summary text")
    options.add_json(p)
    options.add_plot(p, "a colour-temperature diagram of the results (the first rows of the results file)")
    p.add_argument("--dask", action="store_true",
                   help="run on Dask: Parquet read by the workers, CSV read here and computed by the workers "
                        "(other formats run locally, with a note); needs stelltemp[scale]")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="address of a running dask.distributed scheduler (implies --dask)")
    p.add_argument("--workers", type=int, metavar="N", help="local Dask workers (default: all cores)")
    p.add_argument("--dask-local", choices=("threads", "processes"), default="threads",
                   help="local Dask workers as threads or processes")
    return p


def output_path(args, err=None):
    """The results file: ``-o/--output``, or the old second positional argument (with a note)."""
    if args.output and args.old_output:
        raise StelltempError("give the output file once (-o/--output)")
    if args.old_output:
        print("stelltemp: note: the output file as a second argument is now -o/--output "
              "(the old form goes in the next release)", file=err or sys.stderr)
        return args.old_output
    if not args.output:
        raise StelltempError("give the output file with -o/--output")
    return args.output


def run(args, out=None, err=None, engine=None):
    """Run the catalogue; ``engine`` replaces the real engine (tests pass a stand-in)."""
    out = out or sys.stdout
    target = output_path(args, err)
    check_size("chunk_rows", args.chunk_rows, "--chunk-rows")
    if args.workers is not None:
        check_size("workers", args.workers, "--workers")
    if args.plot:  # refuse before the long run: folder, format, existing file
        check_figure_path(args.plot, args.replace)
    common = dict(mapping=args.columns, ebv=args.ebv, ebv_err=args.ebv_err, rv=args.rv, law=args.law,
                  method=args.method, fit_ebv=args.fit_ebv, feh_err=args.feh_err, cal_ebv=args.cal_ebv,
                  cal_detail=args.each_relation, overwrite=args.replace, quiet=args.quiet, engine=engine)
    try:
        if args.dask or args.scheduler:
            from ..catalog.scale import run_catalogue_dask

            summary = run_catalogue_dask(args.input, target, scheduler=args.scheduler, workers=args.workers,
                                         local=args.dask_local, chunk_rows=args.chunk_rows,
                                         renew_results=args.renew_results, **common)
        else:
            from ..catalog.batch import run_catalogue

            summary = run_catalogue(args.input, target, chunk_rows=args.chunk_rows,
                                    renew_results=args.renew_results, **common)
    except StelltempError as exc:
        text = str(exc).replace("(allow replacing it explicitly)", "(add --replace to replace it)")
        raise StelltempError(text, exc.parameter) from None
    figure = None
    if args.plot:
        from ..catalog.figure import plot_results

        figure = str(plot_results(target, args.plot, args.law, args.rv, replace=args.replace))
    if args.json:
        record = summary.to_dict()
        if figure:
            record["figure"] = figure
        print(json.dumps(record, indent=1), file=out)
    elif not args.quiet:
        print(summary, file=out)
        if figure:
            print(f"figure: {figure}", file=out)
    return 0
