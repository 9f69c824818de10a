"""Command line: ``stelltemp <subcommand>``, a thin layer over the Python API.

Every subcommand takes ``--json``; bad input prints one line,
``stelltemp: error: …``, on stderr and exits with code 2 (never a
traceback); writing into a closed pipe (``… --json | head``) ends quietly.

Layout
------
``options``     option groups shared by the subcommands (reddening, magnitudes,
                output files, ``--json``, ``--replace``), defined once
``output``      JSON, numbers rounded as a scientist writes them, plain tables
one module per subcommand, in :data:`COMMANDS` order:
``passbands``   list the built-in passbands and their properties
``blackbody``   Planck, Wien and Stefan–Boltzmann quantities for a temperature
``colourgrid``  synthetic magnitudes and colours of blackbodies over temperatures
``star``        temperature of one star from magnitudes typed on the command line
``relations``   empirical colour–T_eff relations
``catalogue``   temperatures for every row of a table file
``exposure``    counts, S/N and exposure time for one star
``nightplan``   windows and exposures for a target list in one night
``standardise`` standard magnitudes from instrumental ones (transformation from standard stars)
``tour``        the whole job once on the invented demo data

How to add a subcommand
-----------------------
1. Write ``stelltemp/cli/<name>.py`` with three texts and two functions, like the others::

       NAME = "<name>"
       HELP = "…"                      # its line in ``stelltemp --help``
       DESCRIPTION = "…"               # the text of its own ``--help``

       def add(p):                     # its options; shared groups from .options
           ...
           return options.add_closing(p, plot="…", replace="--plot file")

       def run(args, out=None, err=None):   # parse → call the public API → format; return 0
           ...

   ``run`` only turns arguments into API calls and results into text or
   JSON (:mod:`.output`); anything a script could also want belongs in the
   API.  Import the API inside ``run`` so ``stelltemp --help`` stays quick.
   Raise :class:`stelltemp.errors.StelltempError` for bad input.
2. Add the module to the import list and to :data:`COMMANDS` below.
3. Test it through :func:`main` (``main(["<name>", …, "--json"])``).

No module outside this package imports from it.
"""

import argparse
import functools
import os
import sys
import warnings

from .. import __version__
from ..errors import RenamedWarning, StelltempError
from . import blackbody, catalogue, colourgrid, exposure, nightplan, passbands, relations, standardise, star, tour
from .options import HelpWithDefaults, subcommand
from .output import emit_json

__all__ = ["COMMANDS", "EXIT_BAD_INPUT", "build_parser", "emit_json", "for_people", "main", "option_names",
           "run_parsed"]

EXIT_BAD_INPUT = 2
#: exit status after the reader of stdout went away (128 + SIGPIPE, as Unix tools report it)
EXIT_CLOSED_PIPE = 141
#: the subcommand modules, in the order ``--help`` lists them
COMMANDS = (passbands, blackbody, colourgrid, star, relations, catalogue, exposure, nightplan, standardise, tour)


class Parser(argparse.ArgumentParser):
    """argparse, but a usage error is one line and exit code 2, and ``--help`` shows defaults."""

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("formatter_class", HelpWithDefaults)
        super().__init__(*args, **kwargs)

    def _get_values(self, action, arg_strings):
        # ``--clip=--`` would otherwise give an option of one value an empty list
        if action.nargs is None and action.option_strings and arg_strings == ["--"]:
            self.error(f"argument {'/'.join(action.option_strings)}: expected one value, got '--'")
        return super()._get_values(action, arg_strings)

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"stelltemp: error: {message} (see `{self.prog} --help`)\n")


def build_parser():
    """The ``stelltemp`` argument parser with every subcommand registered."""
    parser = Parser(prog="stelltemp", description=(
        "Temperatures of stars from their colours, with reddening applied through the passbands; "
        "blackbody physics; exposure planning."))
    parser.add_argument("--version", action="version", version=f"stelltemp {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="<subcommand>", parser_class=Parser)
    for module in COMMANDS:
        subcommand(sub, module)
    return parser


def _closed_pipe():
    """The reader went away: send further output nowhere and leave quietly."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError, AttributeError):  # stdout without a file descriptor (tests)
        pass
    return EXIT_CLOSED_PIPE


#: options naming a file the command writes: checked before any work starts
_WRITTEN = (("plot", "figure"), ("output", "output"), ("temperatures", "output"))


def check_written_paths(args):
    """Refuse unusable output and figure paths (folder, name length, format, existing file) up front."""
    from ..safeio import check_figure_path, check_output_path

    replace = bool(getattr(args, "replace", False))
    for attr, kind in _WRITTEN:
        path = getattr(args, attr, None)
        if not isinstance(path, str) or (attr == "output" and args.command == "tour"):  # tour: a folder
            continue
        if kind == "figure":
            check_figure_path(path, replace)
        else:
            check_output_path(path, replace)


@functools.lru_cache(maxsize=None)
def option_names(command):
    """{API parameter: long option} of a subcommand, read from its parser (argparse's ``dest``).

    This is the one mapping between the two vocabularies: an option stores
    into the parameter of the same name (``--ebv-err`` into ``ebv_err``).
    """
    sub = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    parser = sub.choices.get(command)
    names = {}
    for action in getattr(parser, "_actions", ()):
        spelled = [o for o in action.option_strings if o.startswith("--")]
        if spelled and action.help is not argparse.SUPPRESS:  # old spellings are hidden
            names.setdefault(action.dest, spelled[0])
    return names


def for_people(exc, command):
    """The message of a StelltempError, naming the option typed rather than the API parameter.

    Examples
    --------
    >>> for_people(StelltempError("ebv_err (E(B-V) error) must be ...", "ebv_err"), "star")
    '--ebv-err (E(B-V) error) must be ...'
    """
    text = str(exc)
    param = getattr(exc, "parameter", None)
    option = option_names(command).get(param) if param and command else None
    if option and text.startswith(param):
        text = option + text[len(param):]
    return text


def one_line(text):
    """A message as one line (line breaks of library messages folded)."""
    return " ".join(str(text).split())


def run_parsed(args, **run_options):
    """Run parsed arguments; one line on stderr for bad input; return the exit code.

    ``run_options`` go to the subcommand's ``run`` (tests pass stand-ins, e.g.
    ``engine=`` for ``catalogue``, ``out=``/``err=`` streams).  SIGTERM
    interrupts like Ctrl-C (temporary files are removed); temporary files
    left in an output folder by killed runs are reported, or removed with
    ``--sweep-leftovers``.
    """
    from ..errors import plain_reason
    from ..safeio import describe_leftovers, leftover_mode, terminate_as_interrupt

    try:
        mode = "remove" if getattr(args, "sweep_leftovers", False) else "report"
        with warnings.catch_warnings(), terminate_as_interrupt(), leftover_mode(mode) as leftovers:
            warnings.simplefilter("once", RenamedWarning)
            shown = warnings.showwarning

            def note(message, category, *rest, **kw):
                if issubclass(category, RenamedWarning):
                    print(f"stelltemp: note: {message}", file=sys.stderr)
                else:
                    shown(message, category, *rest, **kw)

            warnings.showwarning = note
            check_written_paths(args)
            code = int(args.run(args, **run_options) or 0)
        for line in describe_leftovers(leftovers):
            print(f"stelltemp: note: {line}", file=sys.stderr)
        sys.stdout.flush()
        return code
    except BrokenPipeError:
        return _closed_pipe()
    except StelltempError as exc:
        print(f"stelltemp: error: {one_line(for_people(exc, getattr(args, 'command', None)))}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except (OSError, ValueError, MemoryError, OverflowError, RecursionError) as exc:
        print(f"stelltemp: error: {one_line(plain_reason(exc))}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("stelltemp: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug of ours: one line, unless debugging
        if os.environ.get("STELLTEMP_DEBUG"):
            raise
        print(f"stelltemp: internal error: {one_line(plain_reason(exc))} "
              "(set STELLTEMP_DEBUG=1 for the traceback, and please report it)", file=sys.stderr)
        return 1


def main(argv=None, parser=None):
    """Run ``stelltemp`` with ``argv`` (default: the process arguments); return the exit code.

    ``parser`` is a parser from :func:`build_parser` to reuse (tests that run
    thousands of command lines in one process pass one).
    """
    parser = parser or build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "command", None):
        parser.print_help()
        return EXIT_BAD_INPUT
    return run_parsed(args)


if __name__ == "__main__":
    sys.exit(main())
