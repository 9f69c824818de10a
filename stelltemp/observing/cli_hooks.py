"""Command-line subcommands ``exposure`` (one star) and ``nightplan`` (a list, one night).

The lead's ``stelltemp/cli.py`` calls ``add_cli(subparsers)`` to register
both and dispatches to ``run_cli(args)``, which returns the exit code.  Bad
input raises :class:`stelltemp.errors.StelltempError`; the CLI shell prints
it as one line and exits with 2.

Output: a plain-text table on stdout (or JSON with ``--json``); Sun-safety
warnings and saturation advice go to stderr as well as into the output.
"""

from __future__ import annotations

import json
import math
import sys

import numpy as np

from ..errors import StelltempError
from ..jsonable import json_ready

__all__ = ["add_cli", "run_cli", "table_to_jsonable"]

_TEXT_COLUMNS = {
    "exposure": [("filter", "{}"), ("airmass", "{:.2f}"), ("star_rate", "{:.4g}"), ("sky_rate", "{:.3g}"),
                 ("exposure_for_snr", "{:.3g}"), ("exposure", "{:.3g}"), ("snr", "{:.1f}"), ("peak_adu", "{:.0f}"),
                 ("nonlinear_after", "{:.3g}"), ("saturation", "{}")],
    "nightplan": [("target", "{}"), ("filter", "{}"), ("window_start", "{}"), ("window_end", "{}"),
                  ("min_airmass", "{:.2f}"), ("star_rate", "{:.4g}"), ("exposure", "{:.3g}"), ("snr", "{:.1f}"),
                  ("saturation", "{}"), ("flags", "{}")],
}


def _goal_options(p):
    p.add_argument("--snr", type=float, help="target signal-to-noise ratio")
    p.add_argument("--time", type=float, dest="exposure", metavar="SECONDS",
                   help="planned exposure time in seconds (default: the time for --snr)")
    p.add_argument("--instrument", required=True, metavar="FILE", help="instrument + site description (TOML)")
    p.add_argument("--seeing", type=float, metavar="ARCSEC", help="zenith seeing FWHM (default: the site's)")
    p.add_argument("--profile", choices=("moffat", "gaussian"), default="moffat", help="seeing profile")
    p.add_argument("--json", action="store_true", help="print JSON instead of a text table")
    p.add_argument("--plot", metavar="FILE", help="write a figure (PNG, PDF or SVG by extension)")
    p.add_argument("--replace", action="store_true", help="allow replacing existing output files")


def add_cli(subparsers):
    """Register the ``exposure`` and ``nightplan`` subcommands on an argparse subparsers object."""
    p = subparsers.add_parser(
        "exposure", help="count rates, S/N, exposure time and saturation for one star",
        description="Count rates, S/N, exposure time and saturation advice for one star through each filter "
                    "of an instrument.")
    p.add_argument("--mag", type=float, required=True, help="magnitude outside the atmosphere")
    p.add_argument("--band", help="passband key or instrument filter of --mag (default: each filter's own)")
    p.add_argument("--teff", type=float, metavar="K", help="blackbody temperature (default: Vega-shaped spectrum)")
    p.add_argument("--ebv", type=float, default=0.0,
                   help="E(B-V) of the star, reddening the blackbody of --teff (default 0)")
    p.add_argument("--airmass", type=float, default=1.0, help="airmass (default 1.0)")
    p.add_argument("--at", metavar="UTC", help="ISO time: take the airmass from --ra/--dec at the site")
    p.add_argument("--ra", help="right ascension (degrees or h:m:s), with --at")
    p.add_argument("--dec", help="declination (degrees or d:m:s), with --at")
    p.add_argument("--filters", help="comma-separated subset of the instrument's filters")
    _goal_options(p)
    p.set_defaults(observing_command="exposure")

    q = subparsers.add_parser(
        "nightplan", help="best windows, airmass and exposures for a target list in one night",
        description="For a target list (CSV/ECSV with columns name, ra, dec, mag, band and optional teff, ebv), find "
                    "each target's best dark-time window at the instrument's site and plan its exposures.")
    q.add_argument("targets", help="target list file (.csv or .ecsv)")
    q.add_argument("--date", required=True, help="local date of the evening, YYYY-MM-DD")
    q.add_argument("--min-alt", type=float, default=30.0, dest="min_alt", help="lowest usable altitude, deg")
    q.add_argument("--dark", choices=("astronomical", "nautical", "civil"), default="astronomical",
                   help="twilight that bounds dark time (default astronomical, Sun below -18 deg)")
    q.add_argument("--step", type=float, default=10.0, metavar="MIN", help="time grid step in minutes")
    q.add_argument("--no-moon", action="store_true", dest="no_moon", help="skip the Moon")
    q.add_argument("--save", metavar="FILE", help="also write the full table (.ecsv or .csv)")
    _goal_options(q)
    q.set_defaults(observing_command="nightplan")
    return subparsers


def table_to_jsonable(table):
    """A planning table as {"meta", "units", "rows"} with NaN → null."""
    units = {c: (str(table[c].unit) if table[c].unit is not None else None) for c in table.colnames}
    rows = [{c: json_ready(row[c]) for c in table.colnames} for row in table]
    return {"meta": json_ready(dict(table.meta)), "units": units, "rows": rows}


def _print_text(table, which, out):
    cols = _TEXT_COLUMNS[which]
    header = [f"{c}" + (f" [{table[c].unit}]" if table[c].unit not in (None, "") and str(table[c].unit) else "")
              for c, _ in cols]
    cells = []
    for row in table:
        line = []
        for c, fmt in cols:
            v = row[c]
            if isinstance(v, (float, np.floating)) and not math.isfinite(v):
                line.append("-")
            else:
                line.append(fmt.format(v))
        cells.append(line)
    widths = [max(len(h), *(len(r[i]) for r in cells)) if cells else len(h) for i, h in enumerate(header)]
    print("  ".join(h.ljust(w) for h, w in zip(header, widths)), file=out)
    for r in cells:
        print("  ".join(v.ljust(w) for v, w in zip(r, widths)), file=out)


def _airmass_at(instrument, when, ra, dec):
    from astropy.time import Time

    from .airmass import airmass_kasten_young
    from .night import altaz_of, offline_iers
    from .plan import _parse_angle
    from .safety import sun_warnings

    if ra is None or dec is None:
        raise StelltempError("--at needs --ra and --dec")
    try:
        with offline_iers():
            t = Time(when, scale="utc")
    except ValueError:
        raise StelltempError(f"--at: not an ISO time: {when!r}") from None
    try:
        ra_deg, dec_deg = _parse_angle(ra, "hourangle") % 360.0, _parse_angle(dec, "deg")
    except ValueError:
        raise StelltempError(f"cannot read --ra {ra!r} / --dec {dec!r}") from None
    loc = instrument.site.location()
    alt, _ = altaz_of(([ra_deg], [dec_deg]), t.reshape(1), loc)
    alt = float(alt[0, 0])
    warnings_ = sun_warnings(t, loc, ([ra_deg], [dec_deg]), ["target"])
    if alt <= 0:
        raise StelltempError(f"the target is below the horizon at {t.isot[:16]} UTC (altitude {alt:.1f} deg)")
    return float(airmass_kasten_young(alt)), warnings_


#: brighter than this only the Moon (full Moon V ≈ −12.7) and the Sun qualify
MOON_BRIGHT_MAG = -10.0
#: brighter than this it is the Sun (V ≈ −26.7): no plan, only the caution
SUN_BRIGHT_MAG = -20.0


def _run_exposure(args, instrument):
    from .plan import plan_target
    from .safety import SUN_CAUTION

    if args.mag < SUN_BRIGHT_MAG:
        raise StelltempError(f"magnitude {args.mag:g} is the Sun; stelltemp does not plan solar exposures. "
                             + SUN_CAUTION)

    warnings_ = []
    airmass = args.airmass
    if args.at:
        airmass, warnings_ = _airmass_at(instrument, args.at, args.ra, args.dec)
    filters = [f.strip() for f in args.filters.split(",")] if args.filters else None
    for f in filters or []:
        instrument.filter(f)
    if args.ebv and args.teff is None:
        raise StelltempError("--ebv reddens the blackbody of --teff: give --teff too")
    table = plan_target(instrument, args.mag, args.band, args.teff, ebv=args.ebv, snr=args.snr,
                        exposure_s=args.exposure,
                        airmass=airmass, filters=filters, seeing_arcsec=args.seeing, profile=args.profile)
    if args.mag < MOON_BRIGHT_MAG:
        warnings_ = warnings_ + [f"magnitude {args.mag:g} is as bright as the Moon: "
                                 "use a filter of the right density and check for saturation"]
    table.meta["sun_warnings"] = warnings_
    if args.plot:
        from .figures import plot_snr_curves

        plot_snr_curves(table, args.plot, replace=args.replace)
    return table


def _run_nightplan(args, instrument):
    from .plan import night_tracks, plan_night, read_targets

    targets = read_targets(args.targets)
    table = plan_night(instrument, targets, args.date, snr=args.snr, exposure_s=args.exposure,
                       min_alt_deg=args.min_alt, step_min=args.step, sun_limit=args.dark, moon=not args.no_moon,
                       seeing_arcsec=args.seeing, profile=args.profile)
    if args.plot:
        from .figures import plot_night

        plot_night(night_tracks(instrument, targets, args.date, args.step, args.dark), args.plot, args.min_alt,
                   replace=args.replace)
    if args.save:
        _save_table(table, args.save, args.replace)
    return table


def _save_table(table, path, replace):
    from ..safeio import save_table

    fmt = "ascii.ecsv" if str(path).lower().endswith(".ecsv") else "ascii.csv"
    out = table.copy(copy_data=True)
    out.meta = {} if fmt == "ascii.csv" else json_ready(dict(out.meta))
    return save_table(out, path, fmt, replace)


def run_cli(args, out=None, err=None) -> int:
    """Run ``exposure`` or ``nightplan`` from parsed arguments; returns the exit code (0)."""
    from .instrument import load_instrument

    out = out or sys.stdout
    err = err or sys.stderr
    which = getattr(args, "observing_command", None)
    if which not in ("exposure", "nightplan"):
        raise StelltempError(f"not an observing subcommand: {which!r}")
    if args.snr is None and args.exposure is None:
        raise StelltempError("give --snr, --time or both")
    instrument = load_instrument(args.instrument)
    table = _run_exposure(args, instrument) if which == "exposure" else _run_nightplan(args, instrument)
    for w in table.meta.get("sun_warnings", []):
        print(f"WARNING: {w}", file=err)
    if args.json:
        json.dump(table_to_jsonable(table), out, indent=1)
        print(file=out)
        return 0
    if which == "nightplan":
        m = table.meta
        print(f"{m['date']} at {m['site'] or 'site'}: dark ({m['sun_limit']}) "
              f"{m['dark_start'] or '-'} to {m['dark_end'] or '-'} UTC", file=out)
    _print_text(table, which, out)
    for row in table:
        if row["advice"]:
            label = f"{row['target']} " if which == "nightplan" else ""
            print(f"note: {label}{row['filter']}: {row['advice']}", file=err)
    return 0
