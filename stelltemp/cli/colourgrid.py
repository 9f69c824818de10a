"""``stelltemp colourgrid``: magnitudes and colours of blackbodies over a range of temperatures."""

import sys

import numpy as np

from ..errors import StelltempError
from . import options
from .output import emit_json

NAME = "colourgrid"
HELP = "synthetic magnitudes and colours of blackbodies over temperatures"
DESCRIPTION = (
    "Magnitudes of a 1 R_sun blackbody at 10 pc through each passband, and colours of adjacent "
    "passbands, over log-spaced or listed temperatures."
)


def add(p):
    """Register the options of this subcommand on ``p`` (made by :func:`stelltemp.cli.options.subcommand`)."""
    p.add_argument("bands", nargs="+", help="passband keys, e.g. B_JC V_JC Ks_2MASS")
    p.add_argument("--temps", nargs="+", metavar="K", help="explicit temperatures in K (instead of --tmin/--tmax)")
    p.add_argument("--tmin", type=float, default=3000.0, metavar="K", help="lowest temperature, K")
    p.add_argument("--tmax", type=float, default=30000.0, metavar="K", help="highest temperature, K")
    p.add_argument("--steps", type=int, default=10, help="number of temperatures, log-spaced")
    options.add_reddening(p, errors=False)
    return options.add_closing(p, plot="colour against temperature", replace="--plot file")


def run(args, out=None, err=None):
    from ..colourgrid import colour_grid
    from ..parsing import parse_temperature

    out = out or sys.stdout
    if args.temps:
        temps = np.array([parse_temperature(x).value for x in args.temps])
    else:
        from ..validation import check_number, check_size

        steps = check_size("steps", args.steps, "--steps")
        tmin = check_number("teff", args.tmin, "--tmin")
        tmax = check_number("teff", args.tmax, "--tmax")
        if not tmin < tmax:
            raise StelltempError(f"--tmin ({tmin:g} K) must be below --tmax ({tmax:g} K)")
        temps = np.geomspace(tmin, tmax, steps)
    mags, colours = colour_grid(args.bands, temps, args.ebv, args.law, args.rv)
    bands = list(mags)
    if args.plot:
        from ..plots import plot_colour_temperature

        # the figure spans the temperatures of the table (--tmin/--tmax or the listed --temps)
        plot_colour_temperature(bands, args.plot, ebv=args.ebv, law=args.law, rv=args.rv, replace=args.replace,
                                tmin=float(np.min(temps)), tmax=float(np.max(temps)))
    if args.json:
        emit_json({"scale": "blackbody of radius 1 R_sun at 10 pc", "ebv": args.ebv, "law": args.law,
                   "R_V": args.rv, "temperature_K": temps, "magnitudes": mags, "colours": colours}, out)
        return 0
    print(f"# blackbody of radius 1 R_sun at 10 pc; E(B-V) = {args.ebv:g} mag ({args.law}, R_V = {args.rv:g})",
          file=out)
    print("# magnitudes in each band's own system (Vega or AB); colours of adjacent bands", file=out)
    head = f"{'T/K':>9s} " + " ".join(f"{b:>9s}" for b in bands) + " " + " ".join(f"{c:>17s}" for c in colours)
    print(head.rstrip(), file=out)
    for i, t in enumerate(temps):
        row = f"{t:9.1f} " + " ".join(f"{mags[b][i]:9.4f}" for b in bands)
        row += " " + " ".join(f"{colours[c][i]:17.4f}" for c in colours)
        print(row.rstrip(), file=out)
    if args.plot:
        print(f"# figure: {args.plot}", file=out)
    return 0
