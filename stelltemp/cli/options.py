"""Option groups shared by the subcommands, defined once.

One vocabulary across commands:

* errors are ``--<name>-err`` (``--ebv-err``, ``--colour-err``, ``--parallax-err``);
* times are ``--time`` (ISO, UTC); wavelengths ``--wavelength`` in nm;
* magnitudes ``--mag BAND=MAG[,ERR]``, repeatable;
* a table or other main product goes to ``-o/--output``, a figure to
  ``--plot PATH``; ``--replace`` allows overwriting either;
* ``--json`` prints machine-readable output on stdout.

An old spelling is registered with :func:`renamed`: it still works, hidden
from ``--help``, and prints a one-line note on stderr.
"""

import argparse
import sys

__all__ = ["HelpWithDefaults", "add_closing", "add_json", "add_magnitudes", "add_output", "add_plot", "add_reddening",
           "add_replace", "renamed", "subcommand"]


class HelpWithDefaults(argparse.HelpFormatter):
    """Shows each option's default in ``--help`` (unless it is None/False or the text already says it)."""

    def _get_help_string(self, action):
        text = action.help or ""
        default = action.default
        shown = (default is not None and default is not argparse.SUPPRESS and not isinstance(default, bool)
                 and default != [] and action.option_strings and action.nargs != 0)
        if text and shown and "%(default)" not in text and "default" not in text:
            if isinstance(default, (list, tuple)):
                text += " (default: " + " ".join(str(d) for d in default) + ")"
            else:
                text += " (default: %(default)s)"
        return text


class _Renamed(argparse.Action):
    """An old option spelling: does what the new one does, with a note on stderr."""

    def __init__(self, option_strings, dest, new=None, base="store", **kwargs):
        self.new, self.base = new, base
        if base in ("store_true", "store_false"):
            kwargs["nargs"] = 0
        super().__init__(option_strings, dest, **kwargs)

    def __call__(self, parser, namespace, values, option_string=None):
        print(f"stelltemp: note: {option_string} is now {self.new} (the old spelling goes in the next release)",
              file=sys.stderr)
        if self.base == "append":
            setattr(namespace, self.dest, (getattr(namespace, self.dest, None) or []) + [values])
        elif self.base == "store_true":
            setattr(namespace, self.dest, True)
        else:
            setattr(namespace, self.dest, values)


def renamed(parser, old, new, dest, base="store", **kwargs):
    """Keep ``old`` working as a hidden, noted alias of option ``new`` (which stores into ``dest``)."""
    parser.add_argument(old, dest=dest, action=_Renamed, new=new, base=base, default=argparse.SUPPRESS,
                        help=argparse.SUPPRESS, **kwargs)


def subcommand(subparsers, module):
    """Register ``stelltemp <module.NAME>``, run by ``module.run``, with its options from ``module.add``.

    ``module.HELP`` is its line in ``stelltemp --help``, ``module.DESCRIPTION``
    the text of its own ``--help``.
    """
    p = subparsers.add_parser(module.NAME, help=module.HELP, description=module.DESCRIPTION)
    p.set_defaults(run=module.run)
    module.add(p)
    return p


def add_closing(p, plot=None, replace=None):
    """The options that close a subcommand, in one order: ``--plot`` (drawing ``plot``),
    ``--replace`` (of ``replace``) and ``--json``."""
    if plot:
        add_plot(p, plot)
    if replace:
        add_replace(p, replace)
    add_json(p)
    return p


def add_json(p):
    """``--json``: machine-readable output on stdout."""
    p.add_argument("--json", action="store_true", help="machine-readable output (JSON) on stdout")


def add_replace(p, what="--output or --plot file"):
    """``--replace`` and ``--sweep-leftovers`` (every command that writes files has both)."""
    p.add_argument("--replace", action="store_true", help=f"allow replacing an existing {what}")
    p.add_argument("--sweep-leftovers", action="store_true",
                   help="remove temporary files that killed stelltemp runs left in the output folder "
                        "(they are reported otherwise)")


def add_plot(p, what):
    """``--plot PATH``: a figure (PNG, PDF or SVG by extension)."""
    p.add_argument("--plot", metavar="PATH", help=f"write {what} (PNG, PDF or SVG by extension)")


def add_output(p, what, required=False):
    """``-o/--output PATH``: the table or other main product."""
    p.add_argument("-o", "--output", metavar="PATH", required=required, help=f"write {what}")


def add_reddening(p, errors=True, column=False):
    """``--ebv``, ``--ebv-err`` (with ``errors``), ``--law``, ``--rv``.

    With ``column`` (catalogues) ``--ebv`` and ``--ebv-err`` take a number or a column name.
    """
    from ..extinction import DEFAULT_LAW, DEFAULT_RV, LAWS

    if column:
        p.add_argument("--ebv", metavar="MAG|COLUMN",
                       help="E(B-V), mag, for every row, or the column holding it (default: 0, or the column map's)")
        if errors:
            p.add_argument("--ebv-err", metavar="MAG|COLUMN", help="1-sigma error of E(B-V): a number or a column")
    else:
        p.add_argument("--ebv", type=float, default=0.0, metavar="MAG", help="E(B-V), mag (nominal, of the law)")
        if errors:
            p.add_argument("--ebv-err", type=float, default=0.0, metavar="MAG", help="1-sigma error of E(B-V), mag")
    p.add_argument("--law", default=DEFAULT_LAW, help=f"extinction law: {', '.join(LAWS)}")
    p.add_argument("--rv", type=float, default=DEFAULT_RV, help="R_V, ratio of total to selective extinction")


def add_calibration(p, column=False):
    """Options of the calibrated temperature: ``--feh-err``, ``--cal-ebv``, ``--each-relation``.

    A single star also gets ``--feh`` and ``--logg``; with ``column``
    (catalogues, where [Fe/H] and log g come from columns) ``--feh-err``
    takes a number or a column name.
    """
    if column:
        p.add_argument("--feh-err", metavar="DEX|COLUMN",
                       help="1-sigma error of [Fe/H] for every row, or the column holding it (default: the "
                            "column map's, else 0)")
    else:
        p.add_argument("--feh", type=float, metavar="DEX", help="[Fe/H], dex, for the calibrations (default: solar)")
        p.add_argument("--feh-err", type=float, metavar="DEX", help="1-sigma error of [Fe/H], dex")
        p.add_argument("--logg", type=float, metavar="DEX",
                       help="log g, cgs dex, for the calibrations: dwarf or giant (default: dwarf)")
    p.add_argument("--cal-ebv", action="store_true",
                   help="fit E(B-V) from the calibrated colours themselves (3+ colours, or --ebv-err as prior)")
    p.add_argument("--each-relation", action="store_true",
                   help="also give each calibrated relation's own temperature and error")


def add_magnitudes(p, required=True, example="V=10.00,0.01"):
    """``--mag BAND=MAG[,ERR]``, repeatable."""
    p.add_argument("--mag", action="append", required=required, metavar="BAND=MAG[,ERR]",
                   help=f"a magnitude and optional 1-sigma error, e.g. --mag {example} (repeat for each band)")
