"""What ``exposure`` and ``nightplan`` share: the goal and instrument options, warnings, text tables."""

import sys

from ..errors import StelltempError
from .output import emit_json, print_table

__all__ = ["add_goal_options", "exposure_seconds", "report"]


def add_goal_options(p):
    """The instrument and the goal (S/N or exposure time, seeing) of ``exposure`` and ``nightplan``."""
    p.add_argument("--instrument", required=True, metavar="FILE", help="instrument + site description (TOML)")
    p.add_argument("--snr", type=float, help="goal signal-to-noise ratio")
    p.add_argument("--exposure", type=float, metavar="SECONDS",
                   help="planned exposure time, s (default: the time that reaches --snr)")
    p.add_argument("--seeing", type=float, metavar="ARCSEC", help="zenith seeing FWHM, arcsec (default: the site's)")
    p.add_argument("--profile", choices=("moffat", "gaussian"), default="moffat", help="seeing profile")


def exposure_seconds(args, err=None):
    """``--exposure``, or the old ``--time SECONDS`` (a bare number; with a note)."""
    old = getattr(args, "time", None)
    if old is not None:
        try:
            seconds = float(old)
        except ValueError:
            return args.exposure
        if args.exposure is not None:
            raise StelltempError("give the exposure time once (--exposure SECONDS)")
        print("stelltemp: note: --time SECONDS is now --exposure SECONDS; --time takes a UTC time "
              "(the old meaning goes in the next release)", file=err or sys.stderr)
        args.time = None
        return seconds
    return args.exposure


def report(table, which, columns, args, out, err, header=None, summary=None, summary_columns=None):
    """Warnings on stderr; the table (after an optional per-target summary) as JSON or text on stdout;
    advice on stderr."""
    from ..jsonable import table_ready

    for w in table.meta.get("sun_warnings", []):
        print(f"WARNING: {w}", file=err)
    if args.json:
        doc = table_ready(table)
        if summary is not None:
            doc["summary"] = table_ready(summary)
        emit_json(doc, out)
        return 0
    if header:
        print(header, file=out)
    if summary is not None:
        print_table(summary, summary_columns, out)
        print(file=out)
    print_table(table, columns, out)
    for row in table:
        if row["advice"]:
            label = f"{row['target']} " if which == "nightplan" else ""
            print(f"note: {label}{row['filter']}: {row['advice']}", file=err)
    return 0


