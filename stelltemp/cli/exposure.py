"""``stelltemp exposure``: counts, S/N, exposure time and saturation for one star."""

import sys

from ..errors import StelltempError
from . import options
from .observing import add_goal_options, exposure_seconds, report

NAME = "exposure"
COLUMNS = [("filter", "{}"), ("airmass", "{:.2f}"), ("star_rate", "{:.4g}"), ("sky_rate", "{:.3g}"),
           ("exposure_for_snr", "{:.3g}"), ("exposure", "{:.3g}"), ("snr", "{:.1f}"), ("peak_adu", "{:.0f}"),
           ("nonlinear_after", "{:.3g}"), ("saturation", "{}")]


def add(subparsers):
    p = subparsers.add_parser(NAME, help="count rates, S/N, exposure time and saturation for one star",
                              description="Count rates, S/N, exposure time and saturation advice for one star "
                                          "through each filter of an instrument.")
    p.add_argument("--mag", required=True, metavar="[BAND=]MAG",
                   help="magnitude outside the atmosphere, in a passband or instrument filter (BAND=MAG), "
                        "or a bare number in each filter's own band")
    options.renamed(p, "--band", "--mag BAND=MAG", "band")
    p.add_argument("--teff", type=float, metavar="K", help="blackbody temperature, K (default: Vega-shaped spectrum)")
    p.add_argument("--ebv", type=float, default=0.0, metavar="MAG",
                   help="E(B-V), mag, reddening the blackbody of --teff")
    p.add_argument("--airmass", type=float, default=1.0, help="airmass (unless --time is given)")
    p.add_argument("--time", metavar="UTC", help="ISO time (UTC): take the airmass from --ra/--dec at the site")
    options.renamed(p, "--at", "--time", "at_time", metavar="UTC")
    p.add_argument("--ra", help="right ascension (degrees or h:m:s), with --time")
    p.add_argument("--dec", help="declination (degrees or d:m:s), with --time")
    p.add_argument("--filters", help="comma-separated subset of the instrument's filters (default: all)")
    add_goal_options(p)
    options.add_plot(p, "S/N against exposure time")
    p.set_defaults(run=run)
    return p


def _magnitude(args):
    """(band or None, mag) from ``--mag [BAND=]MAG`` (and the old ``--band``)."""
    from ..parsing import parse_magnitude

    band = getattr(args, "band", None)
    if "=" in args.mag:
        if band is not None:
            raise StelltempError("give the band once: --mag BAND=MAG")
        band, mag, _ = parse_magnitude(args.mag)
        return band, mag
    try:
        return band, float(args.mag)
    except ValueError:
        raise StelltempError(f"--mag must look like BAND=MAG or MAG, got {args.mag!r}") from None


def run(args, out=None, err=None):
    from ..observing.exposure import plan_exposure
    from ..observing.instrument import load_instrument

    out, err = out or sys.stdout, err or sys.stderr
    exposure_s = exposure_seconds(args, err)
    when = args.time if args.time is not None else getattr(args, "at_time", None)
    if args.time is not None and getattr(args, "at_time", None) is not None:
        raise StelltempError("give the time once (--time UTC)")
    band, mag = _magnitude(args)
    if args.snr is None and exposure_s is None:
        raise StelltempError("give --snr, --exposure or both")
    if when is not None and (args.ra is None or args.dec is None):
        raise StelltempError("--time needs --ra and --dec")
    instrument = load_instrument(args.instrument)
    filters = [f.strip() for f in args.filters.split(",")] if args.filters else None
    table = plan_exposure(instrument, mag, band, args.teff, ebv=args.ebv, snr=args.snr, exposure_s=exposure_s,
                          airmass=args.airmass, when=when, ra=args.ra, dec=args.dec, filters=filters,
                          seeing_arcsec=args.seeing, profile=args.profile)
    if args.plot:
        from ..observing.figures import plot_snr_curves

        plot_snr_curves(table, args.plot, replace=args.replace)
    return report(table, NAME, COLUMNS, args, out, err)
