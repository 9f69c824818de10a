"""``stelltemp nightplan``: best windows, airmass and exposures for a target list in one night."""

import argparse
import sys

from ..errors import StelltempError
from . import options
from .observing import add_goal_options, exposure_seconds, report
from .output import sig

NAME = "nightplan"
HELP = "best windows, airmass and exposures for a target list in one night"
DESCRIPTION = (
    "For a target list (CSV/ECSV with columns name, ra, dec, the star's magnitudes as columns named "
    "by passband key (with _err) and/or mag, band, and optional teff, ebv, ebv_err), find each "
    "target's best dark-time window at the instrument's site and plan its exposures from its own "
    "photometry, with the Moon in the sky."
)
COLUMNS = [("target", "{}"), ("filter", "{}"), ("rate_source", "{}"), ("mag_band", "{}"), ("min_airmass", "{:.2f}"),
           ("star_rate", sig(3)), ("sky_rate", sig(3)), ("exposure", sig(3)), ("snr", "{:.1f}"),
           ("n_exposures", "{:.0f}"), ("saturation", "{}"), ("flags", "{}")]
#: the per-target summary printed above the per-filter table
SUMMARY_COLUMNS = [("target", "{}"), ("best_time", "{}"), ("best_time_local", "{}"), ("window_local", "{}"),
                   ("max_altitude", "{:.1f}"), ("min_airmass", "{:.2f}"), ("moon_separation", "{:.0f}"),
                   ("moon_delta_v", "{:.2f}"), ("spectrum", "{}"), ("teff", "{:.0f}"), ("ebv", "{:.3f}"),
                   ("total_time", sig(3)), ("flags", "{}")]


def add(p):
    """Register the options of this subcommand on ``p`` (made by :func:`stelltemp.cli.options.subcommand`)."""
    p.add_argument("targets", help="target list file (.csv or .ecsv)")
    p.add_argument("--date", required=True, help="local date of the evening, YYYY-MM-DD")
    p.add_argument("--min-alt", type=float, default=30.0, dest="min_alt", metavar="DEG",
                   help="lowest usable altitude, deg")
    p.add_argument("--dark", choices=("astronomical", "nautical", "civil"), default="astronomical",
                   help="twilight that bounds dark time (astronomical: Sun below -18 deg)")
    p.add_argument("--step", type=float, default=10.0, metavar="MIN", help="time grid step, minutes")
    p.add_argument("--no-moon", action="store_true", dest="no_moon", help="leave the Moon out of the sky brightness")
    options.add_output(p, "the full plan table (.ecsv or .csv)")
    options.renamed(p, "--save", "--output", "output", metavar="PATH")
    p.add_argument("--time", help=argparse.SUPPRESS)  # old: exposure seconds (see exposure_seconds)
    add_goal_options(p)
    return options.add_closing(p, plot="altitude and airmass of the targets through the night", replace="--output or --plot file")


def _save(table, path, replace):
    """ECSV (with the metadata) or CSV by extension, written atomically."""
    from ..jsonable import json_ready
    from ..safeio import save_table

    fmt = "ascii.ecsv" if str(path).lower().endswith(".ecsv") else "ascii.csv"
    copy = table.copy(copy_data=True)
    copy.meta = {} if fmt == "ascii.csv" else json_ready(dict(copy.meta))
    return save_table(copy, path, fmt, replace)


def run(args, out=None, err=None):
    from ..observing.instrument import load_instrument
    from ..observing.plan import night_summary, night_tracks, plan_night, read_targets

    out, err = out or sys.stdout, err or sys.stderr
    exposure_s = exposure_seconds(args, err)
    if args.time is not None:
        raise StelltempError(f"nightplan takes no --time; for the exposure time use --exposure (got {args.time!r})")
    if args.snr is None and exposure_s is None:
        raise StelltempError("give --snr, --exposure or both")
    instrument = load_instrument(args.instrument)
    targets = read_targets(args.targets)
    table = plan_night(instrument, targets, args.date, snr=args.snr, exposure_s=exposure_s,
                       min_alt_deg=args.min_alt, step_min=args.step, sun_limit=args.dark, moon=not args.no_moon,
                       seeing_arcsec=args.seeing, profile=args.profile)
    if args.plot:
        from ..observing.figures import plot_night

        plot_night(night_tracks(instrument, targets, args.date, args.step, args.dark), args.plot, args.min_alt,
                   replace=args.replace, plan=table)
    if args.output:
        _save(table, args.output, args.replace)
    m = table.meta
    sign = "+" if m["utc_offset_hours"] >= 0 else "-"
    header = (f"{m['date']} at {m['site'] or 'site'}: dark ({m['sun_limit']}) "
              f"{m['dark_start'] or '-'} to {m['dark_end'] or '-'} UTC; local time = UTC{sign}"
              f"{abs(m['utc_offset_hours']):g} h ({m['utc_offset_from']}); Moon: "
              f"{'in the sky brightness' if not args.no_moon else 'left out (--no-moon)'}")
    if m["sun_limit"] != "astronomical":
        header += "; twilight sky not modelled (windows reaching into it are flagged)"
    return report(table, NAME, COLUMNS, args, out, err, header=header, summary=night_summary(table),
                  summary_columns=SUMMARY_COLUMNS)
