"""``stelltemp passbands``: the built-in passbands and their properties."""

import sys

from . import options
from .output import emit_json

NAME = "passbands"
HELP = "list built-in passbands with their properties"
DESCRIPTION = (
    "The built-in passbands: key, system, magnitude system, detector type, pivot wavelength, FWHM, "
    "equivalent width and the source of the curve."
)


def add(p):
    """Register the options of this subcommand on ``p`` (made by :func:`stelltemp.cli.options.subcommand`)."""
    return options.add_closing(p)


def run(args, out=None, err=None):
    from ..passbands import builtin_keys, get_passband

    out = out or sys.stdout
    rows = [get_passband(k).summary() for k in builtin_keys()]
    if args.json:
        emit_json({"passbands": rows}, out)
        return 0
    print(f"{'key':9s} {'system':16s} {'band':4s} {'mag':4s} {'detector':8s} "
          f"{'pivot/nm':>9s} {'FWHM/nm':>8s} {'W_eq/nm':>8s}  source", file=out)
    for r in rows:
        print(f"{r['key']:9s} {r['system']:16s} {r['band']:4s} {r['magsys']:4s} {r['detector']:8s} "
              f"{r['pivot_wavelength_nm']:9.1f} {r['fwhm_nm']:8.1f} {r['equivalent_width_nm']:8.1f}  "
              f"{r['source']}", file=out)
    return 0
