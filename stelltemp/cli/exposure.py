"""``stelltemp exposure``: counts, S/N, exposure time and saturation for one star."""

import sys

from ..errors import StelltempError
from . import options
from .observing import add_goal_options, exposure_seconds, report
from .output import sig

NAME = "exposure"
COLUMNS = [("filter", "{}"), ("mag", "{:.2f}"), ("mag_band", "{}"), ("airmass", "{:.2f}"), ("star_rate", sig(3)),
           ("sky_rate", sig(3)), ("exposure_for_snr", sig(3)), ("exposure", sig(3)), ("snr", "{:.1f}"),
           ("peak_adu", "{:.0f}"), ("nonlinear_after", sig(3)), ("saturation", "{}")]


def add(subparsers):
    p = subparsers.add_parser(NAME, help="count rates, S/N, exposure time and saturation for one star",
                              description="Count rates, S/N, exposure time and saturation advice for one star "
                                          "through each filter of an instrument.")
    p.add_argument("--mag", action="append", required=True, metavar="BAND=MAG[,ERR]",
                   help="magnitude outside the atmosphere in a passband or instrument filter, repeatable: each "
                        "filter takes its own band's magnitude, else the first; a bare number is a magnitude "
                        "in every filter's own band")
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
    add_goal_options(p, replace_what="--plot file")
    options.add_plot(p, "S/N against exposure time")
    p.set_defaults(run=run)
    return p


def _magnitudes(args, err):
    """``(mag, band)`` for the API from the ``--mag`` options (and the old ``--band``).

    One bare number: a magnitude in each filter's own band (or in the old
    ``--band``).  ``BAND=MAG[,ERR]``, repeatable: a dict of magnitudes.
    """
    from ..parsing import parse_magnitude

    band = getattr(args, "band", None)
    typed = args.mag
    if len(typed) == 1 and "=" not in typed[0]:
        try:
            return float(typed[0]), band
        except ValueError:
            raise StelltempError(f"--mag must look like BAND=MAG[,ERR] or MAG, got {typed[0]!r}") from None
    if band is not None:
        raise StelltempError("give the band inside --mag BAND=MAG")
    mags = {}
    for text in typed:
        b, m, e = parse_magnitude(text)
        if e is not None:
            print(f"stelltemp: note: the error in --mag {text} is not used by exposure planning", file=err)
        if b in mags:
            raise StelltempError(f"two magnitudes for {b}")
        mags[b] = m
    return mags, None


def run(args, out=None, err=None):
    from ..observing.exposure import plan_exposure
    from ..observing.instrument import load_instrument

    out, err = out or sys.stdout, err or sys.stderr
    exposure_s = exposure_seconds(args, err)
    when = args.time if args.time is not None else getattr(args, "at_time", None)
    if args.time is not None and getattr(args, "at_time", None) is not None:
        raise StelltempError("give the time once (--time UTC)")
    mag, band = _magnitudes(args, err)
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
