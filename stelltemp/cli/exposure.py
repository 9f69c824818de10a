"""``stelltemp exposure``: counts, S/N, exposure time and saturation for one star."""

import sys

from ..errors import StelltempError
from . import options
from .observing import add_goal_options, exposure_seconds, report
from .output import sig

NAME = "exposure"
HELP = "count rates, S/N, exposure time and saturation for one star"
DESCRIPTION = (
    "Count rates, S/N, exposure time and saturation advice for one star through each filter of an "
    "instrument."
)
COLUMNS = [("filter", "{}"), ("rate_source", "{}"), ("airmass", "{:.2f}"), ("star_rate", sig(3)),
           ("sky_rate", sig(3)), ("exposure_for_snr", sig(3)), ("exposure", sig(3)), ("snr", "{:.1f}"),
           ("peak_adu", "{:.0f}"), ("peak_excess", sig(3)), ("nonlinear_after", sig(3)), ("saturation", "{}")]


def add(p):
    """Register the options of this subcommand on ``p`` (made by :func:`stelltemp.cli.options.subcommand`)."""
    p.add_argument("--mag", action="append", required=True, metavar="BAND=MAG[,ERR]",
                   help="a measured magnitude outside the atmosphere, in a passband or instrument filter, e.g. "
                        "--mag V=12.0,0.02 (repeat for each band: every filter's rate is anchored to them)")
    options.renamed(p, "--band", "--mag BAND=MAG", "band")
    p.add_argument("--teff", type=float, metavar="K",
                   help="blackbody temperature, K (default: fitted to two or more --mag bands, else an A0 V "
                        "template, said per filter)")
    p.add_argument("--ebv", type=float, default=0.0, metavar="MAG", help="E(B-V), mag, reddening the spectrum")
    p.add_argument("--ebv-err", type=float, default=0.0, metavar="MAG",
                   help="1-sigma error of E(B-V), mag (enters the temperature fitted to the --mag bands)")
    p.add_argument("--airmass", type=float, default=1.0, help="airmass (unless --time is given)")
    p.add_argument("--time", metavar="UTC", help="ISO time (UTC): take the airmass from --ra/--dec at the site")
    options.renamed(p, "--at", "--time", "at_time", metavar="UTC")
    p.add_argument("--ra", help="right ascension (degrees or h:m:s), with --time")
    p.add_argument("--dec", help="declination (degrees or d:m:s), with --time")
    p.add_argument("--no-moon", action="store_true", dest="no_moon",
                   help="with --time: leave the Moon out of the sky brightness")
    p.add_argument("--filters", help="comma-separated subset of the instrument's filters (default: all)")
    add_goal_options(p)
    return options.add_closing(p, plot="S/N against exposure time", replace="--output or --plot file")


def _magnitudes(args):
    """{band: (mag, err)} from ``--mag BAND=MAG[,ERR]`` (repeatable; the old ``--mag MAG --band BAND`` too)."""
    from ..parsing import parse_magnitude

    band = getattr(args, "band", None)
    typed = list(args.mag)
    if band is not None:
        if len(typed) != 1 or "=" in typed[0]:
            raise StelltempError("give the band once: --mag BAND=MAG")
        typed = [f"{band}={typed[0]}"]
    out = {}
    for text in typed:
        if "=" not in text:
            raise StelltempError(f"--mag needs the magnitude's band: --mag BAND=MAG (e.g. V={text}), got {text!r}")
        b, mag, err = parse_magnitude(text)
        if b in out:
            raise StelltempError(f"two magnitudes in {b}")
        out[b] = (mag, err)
    return out


def run(args, out=None, err=None):
    from ..observing.exposure import plan_exposure
    from ..observing.instrument import load_instrument

    out, err = out or sys.stdout, err or sys.stderr
    exposure_s = exposure_seconds(args, err)
    when = args.time if args.time is not None else getattr(args, "at_time", None)
    if args.time is not None and getattr(args, "at_time", None) is not None:
        raise StelltempError("give the time once (--time UTC)")
    photometry = _magnitudes(args)
    if args.snr is None and exposure_s is None:
        raise StelltempError("give --snr, --exposure or both")
    if when is not None and (args.ra is None or args.dec is None):
        raise StelltempError("--time needs --ra and --dec")
    instrument = load_instrument(args.instrument)
    filters = [f.strip() for f in args.filters.split(",")] if args.filters else None
    if args.no_moon and when is None:
        raise StelltempError("--no-moon applies with --time (without a time there is no Moon in the sky)")
    table = plan_exposure(instrument, teff=args.teff, photometry=photometry, ebv=args.ebv, ebv_err=args.ebv_err,
                          snr=args.snr,
                          exposure_s=exposure_s, airmass=args.airmass, when=when, ra=args.ra, dec=args.dec,
                          moon=not args.no_moon, filters=filters, seeing_arcsec=args.seeing, profile=args.profile)
    if args.plot:
        from ..observing.figures import plot_snr_curves

        plot_snr_curves(table, args.plot, replace=args.replace)
    return report(table, NAME, COLUMNS, args, out, err)
