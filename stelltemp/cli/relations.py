"""``stelltemp relations``: list the empirical colour–T_eff relations, or apply one to a colour."""

import sys

from ..errors import StelltempError
from . import options
from .output import emit_json, measure

NAME = "relations"
HELP = "list empirical colour-Teff relations, or apply one to a colour"
DESCRIPTION = (
    "Without --use: the loaded relations with their colour, stage, validity ranges, scatter and "
    "source. With --use and --colour: the effective temperature from that relation, with its error."
)


def add(p):
    """Register the options of this subcommand on ``p`` (made by :func:`stelltemp.cli.options.subcommand`)."""
    p.add_argument("--bands", nargs="+", metavar="BAND", help="only relations whose two passbands are among these")
    p.add_argument("--use", metavar="KEY", help="relation key to apply, e.g. c10_vk")
    p.add_argument("--colour", type=float, metavar="MAG", help="dereddened colour, mag, for --use")
    p.add_argument("--colour-err", type=float, default=0.0, metavar="MAG", help="1-sigma error of the colour, mag")
    options.renamed(p, "--colour-error", "--colour-err", "colour_err", type=float, metavar="MAG")
    p.add_argument("--feh", type=float, metavar="DEX", help="[Fe/H], dex (default: solar, 0.0, noted)")
    p.add_argument("--logg", type=float, metavar="DEX",
                   help="log g, cgs dex: selects dwarf or giant relations (default: dwarf)")
    return options.add_closing(p)


def run(args, out=None, err=None):
    from ..calibrations import combine_teff, get_relation, relation_summary, relations, relations_for

    out = out or sys.stdout
    if args.use is None:
        rels = relations_for(args.bands) if args.bands else relations()
        if args.json:
            emit_json({"relations": [relation_summary(r) for r in rels]}, out)
            return 0
        for r in rels:
            print(f"{r.key:18s} {r.colour_name:7s} {r.stage:5s} "
                  f"X in [{r.colour_range[0]:.2f}, {r.colour_range[1]:.2f}] mag  "
                  f"[Fe/H] in [{r.feh_range[0]:.1f}, {r.feh_range[1]:.1f}]  "
                  f"scatter {r.scatter_text()}{'  needs log g' if r.needs_logg else ''}  ({r.citation})",
                  file=out)
        return 0
    if args.colour is None:
        raise StelltempError("--use needs --colour")
    from ..validation import check_number

    check_number("colour", args.colour, "--colour")
    check_number("mag_err", args.colour_err, "--colour-err")
    for name in ("feh", "logg"):
        if getattr(args, name) is not None:
            check_number(name, getattr(args, name), f"--{name}")
    rel = get_relation(args.use)
    res = combine_teff({args.use: [args.colour]}, {args.use: [args.colour_err]},
                       feh=None if args.feh is None else [args.feh],
                       logg=None if args.logg is None else [args.logg])
    if res.none_applicable[0]:  # a refusal like any other: one line, exit 2
        raise StelltempError(
            f"{rel.label} does not apply: colour {args.colour:.3f} mag (valid {rel.colour_range[0]:.2f} to "
            f"{rel.colour_range[1]:.2f}), [Fe/H] {0.0 if args.feh is None else args.feh:g} (valid "
            f"{rel.feh_range[0]:.1f} to {rel.feh_range[1]:.1f})" + (", or log g" if rel.needs_logg else ""))
    applied = True
    if args.json:
        emit_json({"relation": relation_summary(rel), "colour_mag": args.colour,
                   "teff_K": float(res.teff[0]) if applied else None,
                   "teff_err_K": float(res.teff_err[0]) if applied else None,
                   "feh_assumed": bool(res.feh_assumed[0]), "inside_range": bool(applied)}, out)
        return 0
    note = " ([Fe/H] = 0 assumed)" if res.feh_assumed[0] else ""
    print(f"{rel.label}: Teff = {measure(res.teff[0], res.teff_err[0], 'K')}{note}  ({rel.citation})", file=out)
    return 0
