"""Property-based: no command line and no malformed table crashes, hangs, loses a row or passes silently.

Hypothesis draws command lines over every subcommand's options (numbers such
as nan, inf, negatives, 1e20, 400-digit integers; text with odd and
undecodable characters; output and figure paths that exist, lack a folder,
have a foreign extension or a too-long name) and malformed CSV and ECSV
tables (short and long lines, unclosed quotes, CR line ends, a BOM, bytes
that are not UTF-8).  For each case it asserts the promises of the README:

* exit status 0 or 2; on 2 exactly one line on stderr, ``stelltemp: error: …``,
  never a traceback, and no file written;
* no file that existed before is changed (unless it was the output and
  ``--replace`` was given), no temporary file is left behind;
* a table run keeps every row: rows out = rows in, or the whole file is
  refused in one line that names its line.

Command lines run in this process through :func:`stelltemp.cli.main` with one
reused parser, and tables are a few rows, so the whole set runs in CI time.
Each test counts the cases it really ran and checks the count; the total
is printed (``pytest -s``) and checked in the last test.  All fixtures are
invented.
"""

import contextlib
import csv
import io
import os
import shutil
import sys
import tempfile
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from stelltemp.catalog import run_catalogue
from stelltemp.catalog.tableio import ChunkReader, csv_sidecar_path
from stelltemp.cli import build_parser, main
from stelltemp.errors import StelltempError
from stelltemp.safeio import PART_SUFFIX

try:
    from test_catalog_helpers import fake_estimate
except ImportError:  # tests run as a package
    from tests.test_catalog_helpers import fake_estimate

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "catalogs_demo"
PARSER = build_parser()  # one parser for every case: building one takes ~25 ms
RUN = Counter()  # cases really run, per test
#: cases per test (the sum is at least 5,000); the time per case differs a lot between commands
EXAMPLES = {"refusals": 2700, "runs": 60, "csv": 2000, "ecsv": 300}
if os.environ.get("STELLTEMP_PROPERTY_SCALE"):  # e.g. 10 for a longer hunt, 0.1 while editing
    EXAMPLES = {k: max(1, int(v * float(os.environ["STELLTEMP_PROPERTY_SCALE"]))) for k, v in EXAMPLES.items()}


#: the suite draws the same cases every run, so a result is reproducible and CI cannot flake;
#: STELLTEMP_PROPERTY_HUNT=1 draws fresh random cases to look for new failures
HUNT = bool(os.environ.get("STELLTEMP_PROPERTY_HUNT"))


def _settings(n):
    return settings(max_examples=n, deadline=None, database=None, derandomize=not HUNT,
                    suppress_health_check=list(HealthCheck))


# ---------------------------------------------------------------------------- the values drawn
#: text a hostile user types for a number
odd_numbers = st.sampled_from([
    "nan", "NaN", "-nan", "inf", "-inf", "+inf", "Infinity", "-1", "-0", "0", "1e20", "-1e20", "1e308",
    "1e309", "-1e309", "1e-320", "9" * 400, "-" + "9" * 400, "0x10", "1_000", "", " ", "1,5", "١٢",
    "½", "NA", "--", "1e", "e5", "99999999999999999999", "2.5", "1000000000", "\udcff", "10\x00",
])
plain_floats = st.floats(allow_nan=True, allow_infinity=True).map(repr)
integers = st.integers(-(10 ** 30), 10 ** 30).map(str)
#: text with characters from every category, and the surrogates Python makes of non-UTF-8 argv bytes
odd_text = st.one_of(
    st.text(st.characters(blacklist_categories=("Cs",)), max_size=12),
    st.text(st.sampled_from(["\udcff", "\udc80", "é", "\u202e", "\ufeff", "\x1b", ",", "=", '"', "\n", "\t"]),
            min_size=1, max_size=6),
    st.just("x" * 300),
)
bands = st.sampled_from(["B", "V", "B_JC", "V_JC", "Ic_JC", "Ks_2MASS", "g", "G", "BP", "U", "jc.V", "V_XYZ",
                         "b", "\udcff", "", "nodir/curve.dat", "x" * 300])


ODD = [False]  # while the spec is built: odd numbers only (for the slow commands' refusals)


def number_for(lo, hi):
    """Numbers around an option's useful range, and the odd ones."""
    good = st.floats(lo, hi, allow_nan=False).map(lambda x: f"{x:.6g}")
    if ODD[0]:
        return st.one_of(odd_numbers, odd_numbers, plain_floats, integers)
    return st.one_of(good, good, odd_numbers, plain_floats, integers)


def mag_text():
    mag = number_for(5, 15)
    return st.one_of(
        st.builds(lambda b, m: f"{b}={m}", bands, mag),
        st.builds(lambda b, m, e: f"{b}={m},{e}", bands, mag, number_for(0, 0.1)),
        odd_text,
    )


#: where a command may write: new files, files that exist, impossible places
OUT_TABLES = ["new.csv", "new.ecsv", "new.parquet", "new.fits", "new.vot", "existing.csv", "nodir/x.csv",
              "x.xyz", "x" * 300 + ".csv", "\udcff.csv", "sub", ""]
#: figures that cannot be written (drawing one takes seconds: the plots that work are in the few 'runs')
OUT_PLOTS_REFUSED = ["nodir/p.png", "p.xyz", "p" * 300 + ".png", "sub", "\udcff/p.png"]
OUT_PLOTS = ["new.png", "new.svg", "existing.png"] + OUT_PLOTS_REFUSED
OUT_TOML = ["new.toml", "existing.toml", "nodir/c.toml", "c.xyz"]
IN_TABLES = ["targets.csv", "bad.csv", "missing.csv", "notutf8.csv", "sub", "existing.png", "x" * 300 + ".csv"]


def flag(name):
    return st.just([name])


def opt(name, values):
    return values.map(lambda v: [name, v] if not v.startswith("-") else [f"{name}={v}"])


# one entry per subcommand: (fixed start, {option: strategy of its argv pieces})
def _spec(odd=False, plots=OUT_PLOTS_REFUSED):
    ODD[0] = odd
    any_num = number_for(-10, 10)
    return {
        "passbands": ([], {"--json": flag("--json")}),
        "blackbody": (["blackbody"], {
            "temperature": number_for(100, 1e6), "--unit": opt("--unit", st.sampled_from(["K", "C", "F", "X"])),
            "--radius": opt("--radius", number_for(0.1, 100)), "--wavelength": opt("--wavelength", number_for(100, 3000)),
            "--bands": st.lists(bands, max_size=3).map(lambda b: ["--bands", *b]),
            "--plot": opt("--plot", st.sampled_from(plots)), "--replace": flag("--replace"),
            "--json": flag("--json")}),
        "colourgrid": (["colourgrid"], {
            "bands": st.lists(bands, min_size=1, max_size=3),
            "--temps": st.lists(number_for(1000, 50000), min_size=1, max_size=3).map(lambda t: ["--temps", *t]),
            "--tmin": opt("--tmin", number_for(1000, 10000)), "--tmax": opt("--tmax", number_for(5000, 100000)),
            "--steps": opt("--steps", st.one_of(st.integers(-5, 30).map(str), odd_numbers)),
            "--ebv": opt("--ebv", number_for(0, 1)), "--law": opt("--law", st.sampled_from(["G23", "F99", "no", ""])),
            "--rv": opt("--rv", number_for(2.5, 5)), "--plot": opt("--plot", st.sampled_from(plots)),
            "--replace": flag("--replace"), "--json": flag("--json")}),
        "star": (["star"], {
            "--mag": st.lists(mag_text(), min_size=1, max_size=4).map(lambda ms: [x for m in ms for x in ("--mag", m)]),
            "--ebv": opt("--ebv", number_for(0, 1)), "--ebv-err": opt("--ebv-err", number_for(0, 0.1)),
            "--law": opt("--law", st.sampled_from(["G23", "CCM89", "zz"])), "--rv": opt("--rv", number_for(2.5, 5)),
            "--av": opt("--av", number_for(0, 2)), "--av-err": opt("--av-err", number_for(0, 0.2)),
            "--fit-ebv": flag("--fit-ebv"), "--parallax": opt("--parallax", number_for(-1, 50)),
            "--parallax-err": opt("--parallax-err", number_for(0, 1)), "--feh": opt("--feh", number_for(-2, 0.5)),
            "--feh-err": opt("--feh-err", number_for(0, 0.3)), "--cal-ebv": flag("--cal-ebv"),
            "--each-relation": flag("--each-relation"), "--logg": opt("--logg", number_for(0, 5)),
            "--method": opt("--method", st.sampled_from(["auto", "colour", "fit", "x"])),
            "--monte-carlo": opt("--monte-carlo", st.one_of(st.integers(-3, 50).map(str), odd_numbers)),
            "--seed": opt("--seed", st.one_of(integers, odd_numbers)),
            "--plot": opt("--plot", st.sampled_from(plots)), "--replace": flag("--replace"),
            "--json": flag("--json")}),
        "relations": (["relations"], {
            "--bands": st.lists(bands, min_size=1, max_size=3).map(lambda b: ["--bands", *b]),
            "--use": opt("--use", st.one_of(st.sampled_from(["c10_bv", "c10_vk", "nope"]), odd_text)),
            "--colour": opt("--colour", number_for(-0.5, 3)), "--colour-err": opt("--colour-err", number_for(0, 0.1)),
            "--feh": opt("--feh", any_num), "--logg": opt("--logg", any_num), "--json": flag("--json")}),
        "catalogue": (["catalogue"], {
            "input": st.sampled_from(IN_TABLES).map(lambda p: [p]),
            "-o": opt("-o", st.sampled_from(OUT_TABLES)),
            "--ebv": opt("--ebv", st.one_of(number_for(0, 1), st.sampled_from(["B_JC", "nocol", "name"]))),
            "--ebv-err": opt("--ebv-err", number_for(0, 0.1)),
            "--columns": opt("--columns", st.sampled_from(["map.toml", "missing.toml", "notutf8.csv", "targets.csv"])),
            "--fit-ebv": flag("--fit-ebv"), "--method": opt("--method", st.sampled_from(["auto", "colour", "fit"])),
            "--chunk-rows": opt("--chunk-rows", st.one_of(st.integers(-2, 5).map(str), odd_numbers)),
            "--workers": opt("--workers", st.one_of(st.integers(-2, 5000).map(str), odd_numbers)),
            "--law": opt("--law", st.sampled_from(["G23", "bad"])), "--rv": opt("--rv", number_for(2.5, 5)),
            "--plot": opt("--plot", st.sampled_from(plots)), "--replace": flag("--replace"),
            "--renew-results": flag("--renew-results"), "--quiet": flag("--quiet"), "--json": flag("--json")}),
        "exposure": (["exposure", "--instrument"], {
            "instrument": st.sampled_from(["inst.toml", "inst.toml", "notutf8.csv", "missing.toml", "bad.toml"]).map(
                lambda p: [p]),
            "--mag": st.lists(mag_text(), min_size=1, max_size=2).map(lambda ms: [x for m in ms for x in ("--mag", m)]),
            "--snr": opt("--snr", number_for(1, 500)), "--exposure": opt("--exposure", number_for(1, 600)),
            "--seeing": opt("--seeing", number_for(0.5, 4)), "--teff": opt("--teff", number_for(3000, 30000)),
            "--ebv": opt("--ebv", number_for(0, 1)), "--airmass": opt("--airmass", number_for(1, 3)),
            "--time": opt("--time", st.one_of(st.just("2026-03-01T22:00:00"), odd_text)),
            "--ra": opt("--ra", st.one_of(number_for(0, 360), st.just("10:00:00"), odd_text)),
            "--dec": opt("--dec", st.one_of(number_for(-90, 90), st.just("-10:00:00"), odd_text)),
            "--filters": opt("--filters", st.one_of(st.sampled_from(["V", "B,V", "nope"]), odd_text)),
            "--profile": opt("--profile", st.sampled_from(["moffat", "gaussian"])), "--no-moon": flag("--no-moon"),
            "--json": flag("--json")}),
        "nightplan": (["nightplan"], {
            "targets": st.sampled_from(IN_TABLES).map(lambda p: [p]),
            "--date": opt("--date", st.one_of(st.just("2026-03-01"), st.just("2026-02-30"), odd_text)),
            "--instrument": opt("--instrument", st.sampled_from(["inst.toml", "bad.toml", "notutf8.csv"])),
            "--snr": opt("--snr", number_for(1, 500)), "--exposure": opt("--exposure", number_for(1, 600)),
            "--min-alt": opt("--min-alt", number_for(0, 90)),
            "--step": opt("--step", st.one_of(st.sampled_from(["0.001", "1e-6", "30", "60", "0.5"]), odd_numbers)),
            "--seeing": opt("--seeing", number_for(0.5, 4)),
            "--dark": opt("--dark", st.sampled_from(["astronomical", "civil", "x"])), "--no-moon": flag("--no-moon"),
            "--plot": opt("--plot", st.sampled_from(plots)), "-o": opt("-o", st.sampled_from(OUT_TABLES)),
            "--replace": flag("--replace"), "--json": flag("--json")}),
        "standardise": (["standardise"], {
            "observations": st.sampled_from(["obs.csv", "bad.csv", "notutf8.csv", "missing.csv"]).map(lambda p: [p]),
            "--standards": opt("--standards", st.sampled_from(["std.csv", "bad.csv", "targets.csv"])),
            "--use-fit": opt("--use-fit", st.sampled_from(["coef.toml", "existing.toml", "missing.toml"])),
            "--instrument": opt("--instrument", st.sampled_from(["inst.toml", "bad.toml"])),
            "-o": opt("-o", st.sampled_from(OUT_TOML)),
            "--targets": opt("--targets", st.sampled_from(OUT_TABLES)),
            "--temperatures": opt("--temperatures", st.sampled_from(OUT_TABLES)),
            "--clip": opt("--clip", number_for(1, 5)),
            "--predicted": opt("--predicted", st.sampled_from(["check", "fallback", "prior", "off"])),
            "--plot": opt("--plot", st.sampled_from(plots)), "--replace": flag("--replace"),
            "--quiet": flag("--quiet"), "--json": flag("--json")}),
    }


SPEC_ODD = _spec(odd=True)
SPEC = _spec()
SPEC_RUNS = _spec(plots=OUT_PLOTS)
SPECS = {"odd": SPEC_ODD, "plain": SPEC, "runs": SPEC_RUNS}
#: commands whose successful runs take 0.1 s or more: drawn often only in the refusal test
SLOW = ("star", "catalogue", "exposure", "nightplan", "standardise")


@st.composite
def command_lines(draw, commands, spec):
    """A command line of one of `commands` from `SPECS[spec]` ('odd': every number odd)."""
    command = draw(st.sampled_from(commands))
    start, options = SPECS[spec][command]
    names = sorted(options)
    chosen = draw(st.lists(st.sampled_from(names), unique=True, max_size=min(6, len(names))))
    required = {"blackbody": ["temperature"], "colourgrid": ["bands"], "star": ["--mag"],
                "catalogue": ["input", "-o"], "exposure": ["instrument", "--mag", "--snr"],
                "nightplan": ["targets", "--date", "--instrument", "--snr"],
                "standardise": ["observations", "--instrument", "--standards", "-o"]}.get(command, [])
    for name in required:
        if name not in chosen and draw(st.integers(0, 9)) > 0:  # now and then a required one is missing
            chosen.append(name)
    argv = list(start) if command != "passbands" else ["passbands"]
    positional = [n for n in chosen if not n.startswith("-") and n != "instrument"]
    for name in ["instrument"] if "instrument" in chosen else []:
        argv += draw(options[name])
    for name in chosen:
        if name.startswith("-"):
            argv += draw(options[name])
    for name in positional:
        piece = draw(options[name])
        argv += piece if isinstance(piece, list) else [piece]
    if command == "exposure" and "instrument" not in chosen:
        argv.remove("--instrument")
    return argv


# ---------------------------------------------------------------------------- the folder the commands see
def _make_folder(root):
    shutil.copy(DEMO / "instruments" / "quillmere_04m_ccd.toml", root / "inst.toml")
    for extra in (DEMO / "instruments").glob("*.ecsv"):
        shutil.copy(extra, root / extra.name)
    with open(DEMO / "targets.csv", encoding="utf-8") as fh:
        lines = fh.read().splitlines()
    (root / "targets.csv").write_text("\n".join(lines[:4]) + "\n", encoding="utf-8")
    (root / "bad.csv").write_bytes(b"name,B_JC,V_JC\na,10.6,10\nb,\"10.7,10.1\nc,10.5\r\nd,\xff,9\n")
    (root / "notutf8.csv").write_bytes(b"B_JC,V_JC\xff\n10.6,10\n")
    (root / "bad.toml").write_text("[site\nname = 1\n", encoding="utf-8")
    (root / "map.toml").write_text('[bands]\n"B_JC" = "B_JC"\n"V_JC" = "V_JC"\n', encoding="utf-8")
    (root / "existing.csv").write_text("keep,me\n1,2\n", encoding="utf-8")
    (root / "existing.png").write_bytes(b"not a figure: must stay")
    (root / "existing.toml").write_text("# must stay\n", encoding="utf-8")
    (root / "sub").mkdir()
    (root / "sub" / "inside.txt").write_text("keep", encoding="utf-8")
    with open(DEMO / "night_observations.csv", encoding="utf-8") as fh:
        (root / "obs.csv").write_text("".join(fh.readlines()[:40]), encoding="utf-8")
    shutil.copy(DEMO / "night_standards.csv", root / "std.csv")
    shutil.copy(DEMO / "night_coefficients.toml", root / "coef.toml")


def _snapshot(root):
    return {p.relative_to(root).as_posix(): p.read_bytes() for p in root.rglob("*") if p.is_file()}


@pytest.fixture(scope="module")
def folder():
    with tempfile.TemporaryDirectory(prefix="stelltemp-props-") as tmp:
        root = Path(tmp)
        _make_folder(root)
        old = os.getcwd()
        os.chdir(root)
        try:
            yield root, _snapshot(root)
        finally:
            os.chdir(old)


def _streams():
    """stdout/stderr as a terminal has them: UTF-8, strict on stdout, backslashes on stderr."""
    out = io.TextIOWrapper(io.BytesIO(), encoding="utf-8", errors="strict", newline="")
    err = io.TextIOWrapper(io.BytesIO(), encoding="utf-8", errors="backslashreplace", newline="")
    return out, err


def _read(stream):
    stream.flush()
    return stream.buffer.getvalue().decode("utf-8", errors="replace")


def _written_targets(argv):
    """Paths the command line names as outputs (value after an output option), with a CSV's sidecar."""
    names = set()
    for i, a in enumerate(argv):
        for o in ("-o", "--output", "--plot", "--targets", "--temperatures"):
            if a == o and i + 1 < len(argv):
                names.add(argv[i + 1])
            elif a.startswith(o + "="):
                names.add(a[len(o) + 1:])
    return names | {csv_sidecar_path(n).as_posix() for n in names if n.lower().endswith(".csv")}


def _remove_output(path):
    """Remove a written table and, for CSV, the metadata file beside it."""
    path.unlink()
    csv_sidecar_path(path).unlink(missing_ok=True)


def check_command_line(root, before, argv):
    out, err = _streams()
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                code = main(argv, parser=PARSER)
            except SystemExit as exc:  # argparse: usage errors
                code = exc.code
    finally:
        after = _snapshot(root)
        for name in set(after) - set(before):  # the next case starts from the same folder
            (root / name).unlink()
        for name in set(before):
            if after.get(name) != before[name]:
                (root / name).write_bytes(before[name])
        for d in sorted((p for p in root.rglob("*") if p.is_dir()), reverse=True):
            if d.relative_to(root).as_posix() != "sub" and not any(d.iterdir()):
                d.rmdir()
    text = _read(err)
    lines = text.splitlines()
    stdout = _read(out)
    assert code in (0, 2), (argv, code, text)
    assert "Traceback" not in text and "Traceback" not in stdout, (argv, text)
    new = set(after) - set(before)
    changed = {n for n in before if after.get(n) != before[n]}
    targets = {os.path.normpath(t) for t in _written_targets(argv)}
    assert not [n for n in new if PART_SUFFIX in n or Path(n).name.startswith(".")], (argv, new)
    if code == 2:
        errors = [ln for ln in lines if ln.startswith("stelltemp: error")]
        assert len(errors) == 1 and errors[0].startswith("stelltemp: error: "), (argv, text)
        assert len(errors[0]) > len("stelltemp: error: ") + 5, (argv, text)
        assert lines[-1] == errors[0], (argv, text)  # the last word, after any progress line or note
        assert all(ln.startswith("stelltemp: ") for ln in lines), (argv, text)  # no raw library output
        assert not new and not changed, (argv, text, new, changed)  # refused before any file was written
    else:
        assert not any(ln.startswith("stelltemp: error") for ln in lines), (argv, text)
        assert new <= targets | {t + s for t in targets for s in ("",)} or all(
            n.startswith("sub/") or n in targets for n in new), (argv, new, targets)
        assert changed <= (targets if "--replace" in argv else set()), (argv, changed)
    return code


def test_any_command_line_is_refused_in_one_line_or_runs(folder):
    """Every subcommand over its whole option space (slow commands mostly with an odd value)."""
    root, before = folder
    codes = Counter()

    odd, plain = command_lines(tuple(SPEC), "odd"), command_lines(tuple(c for c in SPEC if c not in SLOW), "plain")

    @_settings(EXAMPLES["refusals"])
    @given(st.one_of(odd, odd, plain))
    def case(argv):
        if any(a in ("-h", "--help", "--version") for a in argv):
            return
        RUN["refusals"] += 1
        codes[check_command_line(root, before, argv)] += 1

    case()
    print(f"\ncommand lines: {RUN['refusals']} run, exit codes {dict(codes)}")
    assert RUN["refusals"] >= 0.9 * EXAMPLES["refusals"] and codes[2] > 0


def test_slow_commands_run_with_plausible_options(folder):
    """star, catalogue, exposure, nightplan, standardise drawn as a user would mostly type them."""
    root, before = folder
    codes = Counter()

    @_settings(EXAMPLES["runs"])
    @given(command_lines(SLOW + ("blackbody", "colourgrid"), "runs"))
    def case(argv):
        RUN["runs"] += 1
        codes[check_command_line(root, before, argv)] += 1

    case()
    print(f"\nslow commands: {RUN['runs']} run, exit codes {dict(codes)}")
    assert RUN["runs"] >= 0.9 * EXAMPLES["runs"]


# ---------------------------------------------------------------------------- malformed tables
HEADER = ["name", "B_JC", "V_JC", "ebv"]
cell_text = st.one_of(
    st.floats(-5, 25, allow_nan=False).map(lambda x: f"{x:.3f}"),
    st.sampled_from(["", "nan", "inf", "-1e309", "9" * 400, "NA", " 12.5 ", "1e20", "x", "\u00e9", "0"]),
)
#: bytes that break a line: not UTF-8, a NUL, a BOM in the middle
odd_bytes = st.sampled_from([b"\xff", b"\xc3", b"\x00", b"\xef\xbb\xbf", b"\x80abc", b"\xe9"])


@st.composite
def csv_tables(draw):
    """(file bytes, kind): kind 'plain' (no quote), 'quoted' (well-formed quotes) or 'unclosed'."""
    n = draw(st.integers(0, 8))
    eol = draw(st.sampled_from([b"\n", b"\r\n", b"\r"]))
    bom = draw(st.sampled_from([b"", b"", b"\xef\xbb\xbf"]))
    rows, kind = [], "plain"
    for i in range(n):
        cells = [f"s{i}".encode()] + [draw(cell_text).encode() for _ in HEADER[1:]]
        shape = draw(st.sampled_from(["ok"] * 6 + ["short", "long", "bytes", "quoted", "unclosed", "blank"]))
        if shape == "short":
            cells = cells[: draw(st.integers(1, len(cells) - 1))]
        elif shape == "long":
            cells += [b"extra"] * draw(st.integers(1, 3))
        elif shape == "bytes":
            j = draw(st.integers(0, len(cells) - 1))
            cells[j] = cells[j] + draw(odd_bytes)
        elif shape == "quoted":
            j = draw(st.integers(0, len(cells) - 1))
            inner = draw(st.sampled_from([b"a,b", b'say ""hi""', b"two\nlines", b"10.5"]))
            cells[j] = b'"' + inner + b'"'
            kind = "quoted" if kind == "plain" else kind
        elif shape == "unclosed" and kind != "unclosed":
            j = draw(st.integers(0, len(cells) - 1))
            cells[j] = b'"' + cells[j]
            kind = "unclosed"
        if shape == "blank":
            rows.append(b"")
        rows.append(b",".join(cells))
    body = bom + b",".join(h.encode() for h in HEADER) + eol + eol.join(rows) + (eol if draw(st.booleans()) else b"")
    return body, kind


def _expected_rows(data, kind):
    """Records in the file by Python's csv module (after the header), blank lines not counted."""
    text = data.decode("utf-8", errors="replace").lstrip("\ufeff")
    records = [r for r in csv.reader(io.StringIO(text, newline=""))]
    return sum(1 for r in records[1:] if r)


def _rows_out(path):
    with open(path, encoding="utf-8", newline="") as fh:
        return sum(1 for r in csv.reader(line for line in fh if not line.startswith("#")) if r) - 1


def test_malformed_csv_keeps_every_row_or_is_refused_in_one_line(tmp_path):
    inp, out = tmp_path / "in.csv", tmp_path / "out.csv"
    kinds = Counter()

    @_settings(EXAMPLES["csv"])
    @given(csv_tables(), st.sampled_from(["csv", "csv", "parquet", "ecsv"]), st.integers(1, 4), st.integers(0, 7))
    def case(table, fmt, chunk_rows, reader_only):
        data, kind = table
        RUN["csv"] += 1
        inp.write_bytes(data)
        target = out.with_suffix("." + fmt)
        try:
            if reader_only:  # the reader alone; a whole run, writing a file, in one case of eight
                rows = sum(len(chunk) for chunk in ChunkReader(inp, chunk_rows))
            else:
                rows = run_catalogue(inp, target, engine=fake_estimate, quiet=True, chunk_rows=chunk_rows).rows
        except StelltempError as exc:
            kinds[kind + " refused"] += 1
            msg = str(exc)
            assert "\n" not in msg and "line" in msg, (data, msg)
            assert kind == "unclosed" or "quote" in msg, (data, msg)  # only a broken quote refuses a file
            assert not target.exists(), data
        else:
            kinds[kind + " read"] += 1
            assert rows == _expected_rows(data, kind), (data, rows)
            if not reader_only:
                if fmt == "csv":
                    assert _rows_out(target) == rows, data
                _remove_output(target)
        assert sorted(p.name for p in tmp_path.iterdir()) == ["in.csv"], data  # nothing left behind

    case()
    print(f"\nCSV tables: {RUN['csv']} run, {dict(kinds)}")
    assert RUN["csv"] >= 0.9 * EXAMPLES["csv"]


@st.composite
def ecsv_tables(draw):
    n = draw(st.integers(0, 6))
    head = ["# %ECSV 1.0", "# ---", "# datatype:", "# - {name: name, datatype: string}",
            "# - {name: B_JC, datatype: float64}", "# - {name: V_JC, datatype: float64}",
            "# schema: astropy-2.0", "name B_JC V_JC"]
    if draw(st.integers(0, 4)) == 0:  # a damaged header line
        i = draw(st.integers(0, len(head) - 1))
        head[i] = draw(st.sampled_from(["# - {name: B_JC, datatype: float64", "# %ECSV 9.9", "", "# datatype: 5",
                                        "name B_JC"]))
    lines = [line.encode() for line in head]
    for i in range(n):
        cells = [f"s{i}".encode(), draw(cell_text).encode() or b'""', draw(cell_text).encode() or b'""']
        shape = draw(st.sampled_from(["ok"] * 5 + ["short", "long", "bytes", "unclosed"]))
        if shape == "short":
            cells = cells[:2]
        elif shape == "long":
            cells.append(b"9")
        elif shape == "bytes":
            cells[0] += draw(odd_bytes)
        elif shape == "unclosed":
            cells[0] = b'"' + cells[0]
        lines.append(b" ".join(cells))
    eol = draw(st.sampled_from([b"\n", b"\r\n"]))
    return eol.join(lines) + eol, n


def test_malformed_ecsv_is_read_whole_or_refused_in_one_line(tmp_path):
    inp, out = tmp_path / "in.ecsv", tmp_path / "out.csv"
    kinds = Counter()

    @_settings(EXAMPLES["ecsv"])
    @given(ecsv_tables())
    def case(table):
        data, n = table
        RUN["ecsv"] += 1
        inp.write_bytes(data)
        try:
            summary = run_catalogue(inp, out, engine=fake_estimate, quiet=True)
        except StelltempError as exc:
            kinds["refused"] += 1
            assert "\n" not in str(exc) and str(exc), data
            assert not out.exists()
        else:
            kinds["read"] += 1
            rows_out = _rows_out(out)
            _remove_output(out)
            assert summary.rows == n == rows_out, (data, summary.rows, rows_out)
        assert sorted(p.name for p in tmp_path.iterdir()) == ["in.ecsv"], data

    case()
    print(f"\nECSV tables: {RUN['ecsv']} run, {dict(kinds)}")
    assert RUN["ecsv"] >= 0.9 * EXAMPLES["ecsv"]


def test_unclosed_quote_refused_before_any_work(tmp_path):
    """CSV to any format: the whole file is checked before the engine sees a row."""
    calls = []

    def engine(*a, **kw):
        calls.append(1)
        return fake_estimate(*a, **kw)

    lines = ["name,B_JC,V_JC"] + [f"s{i},10.{i},10.0" for i in range(10)]
    lines[8] = 's7,"10.7,10.0'
    (tmp_path / "in.csv").write_text("\n".join(lines) + "\n")
    for fmt in ("csv", "ecsv", "parquet", "fits"):
        with pytest.raises(StelltempError, match=r"line 9: .*unclosed quote"):
            run_catalogue(tmp_path / "in.csv", tmp_path / f"out.{fmt}", engine=engine, quiet=True, chunk_rows=2)
        assert not calls and sorted(p.name for p in tmp_path.iterdir()) == ["in.csv"]


def test_zz_cases_counted():
    """The sum of the cases really run (when the whole file ran)."""
    if set(RUN) != set(EXAMPLES):
        pytest.skip("only part of the property tests ran")
    total = sum(RUN.values())
    print(f"\nproperty cases run: {total} ({dict(RUN)})")
    assert total >= 5000
