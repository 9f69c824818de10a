"""The command-line package: layering, shared vocabulary, rounding, closed pipes."""

import ast
import subprocess
import sys
from pathlib import Path

import pytest

from stelltemp.cli import build_parser, main
from stelltemp.cli.output import interval, measure, number, plural, rounded

PACKAGE = Path(__file__).resolve().parents[1] / "stelltemp"


def _imports(path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    mod = ".".join(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    pkg = mod if path.name == "__init__.py" else mod.rsplit(".", 1)[0]
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            yield from (a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                parts = pkg.split(".")
                base = ".".join(parts[: len(parts) - node.level + 1] + ([base] if base else []))
            yield base
            yield from (f"{base}.{a.name}" for a in node.names)


def test_no_module_outside_the_cli_package_imports_it():
    offenders = []
    for path in PACKAGE.rglob("*.py"):
        if path.parent.name == "cli" or path.name == "__main__.py":
            continue
        if any(name == "stelltemp.cli" or name.startswith("stelltemp.cli.") for name in _imports(path)):
            offenders.append(str(path.relative_to(PACKAGE)))
    assert offenders == []


def test_no_module_imports_private_names_of_another_module():
    offenders = []
    for path in PACKAGE.rglob("*.py"):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith(("stelltemp.catalog", "catalog")):
                offenders += [f"{path.name}: {a.name}" for a in node.names if a.name.startswith("_")]
    assert offenders == []


@pytest.mark.parametrize("value,err,unit,text", [
    (5749.8, 112.3, "K", "5750 ± 110 K"),          # the error to 2 significant figures, the value to match
    (5749.8, 11.23, "K", "5750 ± 11 K"),
    (0.0512, 0.0199, "mag", "0.051 ± 0.020 mag"),
    (0.0512, 0.0996, "mag", "0.05 ± 0.10 mag"),    # an error rounding up to the next decade sets the decimals
    (484.2, 9.93, "nm", "484.2 ± 9.9 nm"),
    (3.828e26, 1.21e25, "W", "(3.83 ± 0.12) × 10^26 W"),
    (float("nan"), 1.0, "K", "—"),
    (5000.0, float("nan"), "K", "5000 K"),
    (5000.0, float("inf"), "K", "5000 K (error unbounded)"),
])
def test_values_are_rounded_as_a_scientist_writes_them(value, err, unit, text):
    assert measure(value, err, unit) == text


def test_blank_values_give_their_reason_and_plurals_agree():
    assert measure(float("nan"), 0.1, "R_sun", reason="no parallax given") == "— (no parallax given)"
    assert number(None, reason="not computed") == "— (not computed)"
    assert [plural(n, "relation") for n in (0, 1, 2)] == ["0 relations", "1 relation", "2 relations"]
    assert rounded(-1234.4, 56.0) == ("-1234", "56", None) and rounded(-1234.4, 560.0) == ("-1230", "560", None)
    assert interval(5864.4, 6109.4, 122.5, "K") == "5860 – 6110 K"


def test_star_text_rounds_and_explains_blank_radius(capsys):
    code = main(["star", "--mag", "B_JC=10.65,0.01", "--mag", "V_JC=10.00,0.01", "--ebv", "0.05",
                 "--ebv-err", "0.02", "--parallax", "5", "--parallax-err", "2"])
    out = capsys.readouterr().out
    assert code == 0
    assert "radius                         — (parallax error above 20 %)" in out
    assert "(calibrated, 1 relation)" in out and "2 passbands" in out
    assert "e+0" not in out  # no raw floating-point exponents on screen


def test_every_help_shows_its_defaults():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    for name, p in sub.choices.items():
        text = p.format_help()
        for action in p._actions:
            if action.option_strings and action.default not in (None, False) and action.help != "==SUPPRESS==" \
                    and action.nargs != 0 and action.default != "==SUPPRESS==":
                assert "default" in (action.help % {"default": action.default} if "%(" in action.help
                                     else text), (name, action.dest)
    blackbody_help = sub.choices["nightplan"].format_help()
    assert "(default: 30.0)" in blackbody_help and "(default: 10.0)" in blackbody_help


@pytest.mark.parametrize("argv,new", [
    (["relations", "--use", "c10_vk", "--colour", "1.56", "--colour-error", "0.01"], "--colour-err"),
    (["blackbody", "5772", "--at", "500"], "--wavelength"),
])
def test_old_spellings_work_with_a_one_line_note(capsys, argv, new):
    assert main(argv) == 0
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("stelltemp: note:") and new in err[0]


def test_old_exposure_spellings_still_work(capsys):
    demo = Path(__file__).resolve().parents[1] / "catalogs_demo" / "instruments" / "quillmere_04m_ccd.toml"
    new = main(["exposure", "--instrument", str(demo), "--mag", "V=12", "--exposure", "30", "--json"])
    new_out = capsys.readouterr().out
    old = main(["exposure", "--instrument", str(demo), "--mag", "12", "--band", "V", "--time", "30", "--json"])
    captured = capsys.readouterr()
    assert new == old == 0 and captured.out == new_out
    notes = captured.err.strip().splitlines()
    assert len(notes) == 2 and all(n.startswith("stelltemp: note:") for n in notes)


def test_relations_reach_giant_relations_through_logg(capsys):
    from stelltemp.calibrations import relations

    giants = [r for r in relations() if r.stage == "giant"]
    if not giants:
        pytest.skip("no giant relation loaded")
    rel = giants[0]
    colour = sum(rel.colour_range) / 2
    assert main(["relations", "--use", rel.key, "--colour", f"{colour:.3f}", "--logg", "2.5", "--json"]) == 0


def test_a_closed_pipe_ends_quietly():
    # the reader takes one line and goes away; the writer must not print a traceback
    cmd = (f"{sys.executable} -m stelltemp passbands --json | head -n 1")
    done = subprocess.run(["bash", "-o", "pipefail", "-c", cmd], capture_output=True, text=True,
                          env={"PYTHONPATH": str(PACKAGE.parent), "PATH": "/usr/bin:/bin"})
    assert done.stdout.strip() == "{"
    assert done.stderr == ""


def test_python_dash_m_stelltemp_runs_the_command():
    done = subprocess.run([sys.executable, "-m", "stelltemp", "--version"], capture_output=True, text=True,
                          cwd=PACKAGE.parent)
    assert done.returncode == 0 and done.stdout.startswith("stelltemp ")


def test_old_passband_keys_on_the_command_line_give_a_note(capsys):
    assert main(["star", "--mag", "jc.B=10.65,0.01", "--mag", "V=10.00,0.01", "--json"]) == 0
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["stelltemp: note: passband key 'jc.B' is now 'B_JC' (the old key goes in the next release)"]


def test_an_ambiguous_band_is_one_error_line_with_the_choices(capsys):
    assert main(["colourgrid", "g", "r"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "ambiguous" in err[0] and "g_SDSS" in err[0] and "g_PS1" in err[0]
