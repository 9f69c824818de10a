"""``stelltemp tour``: the whole job once, on the invented demo data."""

import sys

from . import options
from .output import emit_json

NAME = "tour"
HELP = "run the whole job once on the invented demo data"
DESCRIPTION = (
    "Temperatures for the invented demo stars, figures, and a night plan with exposures, written to "
    "one folder, with a short summary."
)
DEFAULT_OUT = "tour_output"  # same as stelltemp.tour.DEFAULT_OUT (not imported: keeps start-up light)


def add(p):
    """Register the options of this subcommand on ``p`` (made by :func:`stelltemp.cli.options.subcommand`)."""
    p.add_argument("-o", "--output", default=DEFAULT_OUT, metavar="DIR", help="output folder")
    options.renamed(p, "--out", "--output", "output", metavar="DIR")
    options.add_replace(p, "non-empty output folder")
    options.add_json(p)
    p.add_argument("--quiet", action="store_true", help="print nothing on success")
    return p


def run(args, out=None, err=None):
    from ..tour import run_tour

    out = out or sys.stdout
    summary = run_tour(args.output, replace=args.replace, quiet=args.quiet or args.json, stream=out)
    if args.json:
        emit_json(summary, out)
    return 0
