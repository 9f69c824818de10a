"""Bad options, resource bombs, file-name limits, late refusals, interruptions and error wording.

Each test reproduces one failure class of the robustness issue; fixtures are invented.
"""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from stelltemp.cli import main
from stelltemp.engine import estimate
from stelltemp.errors import StelltempError, plain_reason, shorten
from stelltemp.observing.instrument import load_instrument, parse_instrument
from stelltemp.observing.plan import plan_night, plan_target
from stelltemp.safeio import PART_SUFFIX, atomic_path, leftover_parts, temporary_name
from stelltemp.validation import RANGES, SIZE_LIMITS, check_number, check_size

ROOT = Path(__file__).resolve().parents[1]
INSTRUMENT = ROOT / "catalogs_demo" / "instruments" / "quillmere_04m_ccd.toml"
STAR = ["star", "--mag", "B_JC=10.6", "--mag", "V_JC=10.0"]


def _err_line(capsys):
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1, captured.err
    assert lines[0].startswith("stelltemp: error: ") and "Traceback" not in captured.err
    return lines[0][len("stelltemp: error: "):]


# ------------------------------------------------------------------ one rule for CLI and API
@pytest.mark.parametrize("argv, api", [
    (["--ebv", "nan"], dict(ebv=float("nan"))),
    (["--ebv", "inf"], dict(ebv=float("inf"))),
    (["--ebv-err=-0.1"], dict(ebv_err=-0.1)),
    (["--parallax", "inf"], dict(parallax=float("inf"))),
    (["--parallax", "2", "--parallax-err=-1"], dict(parallax=2.0, parallax_err=-1.0)),
    (["--feh", "nan"], dict(feh=float("nan"))),
    (["--logg", "inf"], dict(logg=float("inf"))),
    (["--av", "100"], dict(av=100.0)),
    (["--monte-carlo", "1000000000"], dict(monte_carlo=1_000_000_000)),
    (["--monte-carlo", "-3"], dict(monte_carlo=-3)),
    (["--feh-err=-1"], dict(feh_err=-1.0)),
])
def test_star_option_refused_with_the_api_message(capsys, argv, api):
    """One rule, two vocabularies: the CLI names the option typed, the API its parameter."""
    assert main(STAR + argv) == 2
    line = _err_line(capsys)
    with pytest.raises(StelltempError) as exc:
        estimate({"B_JC": 10.6, "V_JC": 10.0}, **api)
    (param,) = [k for k in api if k != "parallax" or len(api) == 1]
    option = "--" + param.replace("_", "-")
    assert str(exc.value).startswith(param + " ") and exc.value.parameter == param
    assert line == option + str(exc.value)[len(param):]


def test_monte_carlo_bounded_by_memory_before_work():
    t0 = time.perf_counter()
    with pytest.raises(StelltempError, match=r"would need about .* GiB of memory \(limit 2 GiB\)"):
        estimate({"B_JC": np.full(1000, 10.6), "V_JC": np.full(1000, 10.0)}, monte_carlo=500_000)
    assert time.perf_counter() - t0 < 5  # refused, not attempted


def test_per_star_arrays_are_flagged_not_refused():
    res = estimate({"B_JC": [10.6, 10.6], "V_JC": [10.0, 10.0]}, parallax=np.array([np.inf, 5.0]),
                   ebv_err=np.array([-0.1, 0.01]))
    assert res["flags"][0] != 0 and np.isnan(res["t_bb"][0].value)


@pytest.mark.parametrize("argv, message", [
    (["exposure", "--mag", "V_JC=inf", "--snr", "50"], "magnitude in 'V_JC=inf' (magnitude) must be a finite number in [-40, 40] mag, got inf"),
    (["exposure", "--mag", "V_JC=12", "--snr", "50", "--seeing", "0"],
     "--seeing (seeing FWHM) must be a finite number in (0, 30] arcsec, got 0"),
    (["exposure", "--mag", "V_JC=12", "--snr", "nan"],
     "--snr (signal-to-noise ratio) must be a finite number in (0, 1e+06], got nan"),
    (["exposure", "--mag", "V_JC=12", "--snr", "50", "--airmass", "0.5"],
     "--airmass must be a finite number in [1, 40], got 0.5"),
])
def test_exposure_options(capsys, argv, message):
    assert main(argv + ["--instrument", str(INSTRUMENT)]) == 2
    assert _err_line(capsys) == message


def test_exposure_api_same_message():
    inst = load_instrument(INSTRUMENT)
    with pytest.raises(StelltempError, match=r"^seeing \(seeing FWHM\) must be a finite number in \(0, 30\]"):
        plan_target(inst, 12.0, "V_JC", snr=50, seeing_arcsec=0.0)


@pytest.mark.parametrize("extra, message", [
    (["--seeing", "-1"], "--seeing (seeing FWHM) must be a finite number in (0, 30] arcsec, got -1"),
    (["--step", "1e-6"], "--step (time step) must be a finite number in [0.5, 60] min, got 1e-06"),
    (["--step", "0.001"], "--step (time step) must be a finite number in [0.5, 60] min, got 0.001"),
    (["--min-alt", "nan"], "--min-alt (lowest altitude) must be a finite number in [0, 90] deg, got nan"),
])
def test_nightplan_options_refused_before_work(capsys, extra, message):
    t0 = time.perf_counter()
    argv = ["nightplan", str(ROOT / "catalogs_demo" / "targets.csv"), "--instrument", str(INSTRUMENT),
            "--date", "2026-03-01", "--snr", "50"]
    assert main(argv + extra) == 2
    assert _err_line(capsys) == message
    assert time.perf_counter() - t0 < 20


def test_night_plan_memory_estimate():
    inst = load_instrument(INSTRUMENT)
    targets = [{"name": f"t{i}", "ra_deg": 10.0, "dec_deg": 10.0, "mag": 12.0, "band": "V_JC", "error": ""}
               for i in range(300_000)]
    with pytest.raises(StelltempError, match="a night plan of 300000 targets every 0.5 min would need"):
        plan_night(inst, targets, "2026-03-01", snr=50, step_min=0.5)


@pytest.mark.parametrize("argv, message", [
    (["colourgrid", "B_JC", "V_JC", "--steps", "99999999999999999999"],
     "--steps (number of temperatures) must be a whole number from 2 to 100000, got 99999999999999999999"),
    (["colourgrid", "B_JC", "V_JC", "--tmin", "nan"],
     "--tmin (temperature) must be a finite number in [1000, 100000] K, got nan"),
    (["blackbody", "5000", "--radius", "inf"], "--radius must be a finite number in (0, 100000] R_sun, got inf"),
    (["blackbody", "1e300"], "temperature must be a finite number in [0.001, 1e+09] K, got 1e+300"),
])
def test_other_commands(capsys, argv, message):
    assert main(argv) == 2
    assert _err_line(capsys) == message


def test_catalogue_sizes(tmp_path, capsys):
    inp = tmp_path / "in.csv"
    inp.write_text("B_JC,V_JC\n10.6,10.0\n")
    assert main(["catalogue", str(inp), "-o", str(tmp_path / "o.csv"), "--chunk-rows", "100000000000000000000"]) == 2
    assert _err_line(capsys).startswith("--chunk-rows (rows per chunk) must be a whole number from 1 to 10000000")
    with pytest.raises(SystemExit) as stop:  # argparse's own refusal, one line, exit 2
        main(["catalogue", str(inp), "-o", str(tmp_path / "o.csv"), "--chunk-rows", "1e20"])
    assert stop.value.code == 2 and "invalid int value: '1e20'" in _err_line(capsys)
    assert not (tmp_path / "o.csv").exists()


def test_documented_ranges_match_the_kernel_and_the_limits_are_sane():
    from stelltemp import bandgrid

    assert (RANGES["ebv"].lo, RANGES["ebv"].hi) == (bandgrid.E_MIN, bandgrid.E_MAX)
    assert (RANGES["teff"].lo, RANGES["teff"].hi) == (bandgrid.T_MIN, bandgrid.T_MAX)
    for name, (lo, hi, _) in SIZE_LIMITS.items():
        assert check_size(name, lo) == lo and check_size(name, hi) == hi
        with pytest.raises(StelltempError):
            check_size(name, hi + 1)
    with pytest.raises(StelltempError, match="must be a number, got abc"):
        check_number("ebv", "abc")
    with pytest.raises(StelltempError, match="whole number"):
        check_size("steps", 2.5)


def test_passband_curve_extent_is_bounded(tmp_path, capsys):
    curve = tmp_path / "wide.dat"
    curve.write_text("# unit: nm\n400 0\n500 1\n1e10 0\n")
    assert main(["star", "--mag", f"{curve}=10", "--mag", "V_JC=9"]) == 2
    assert _err_line(capsys).endswith("curve wavelengths must lie in [10, 100000] nm (got 1e+10 nm); "
                                      "beyond it no reference spectrum or extinction law is defined")


# ------------------------------------------------------------------ instrument files
def _instrument_text():
    return INSTRUMENT.read_text()


def test_instrument_number_with_400_digits(tmp_path, capsys):
    path = tmp_path / "big.toml"
    path.write_text(_instrument_text().replace("read_noise_e = 9.0", "read_noise_e = " + "9" * 400))
    with pytest.raises(StelltempError, match=r"'read_noise_e' is too large to be a number \(400 digits\)"):
        parse_instrument(path.read_text(), base_dir=INSTRUMENT.parent)
    assert main(["exposure", "--instrument", str(path), "--mag", "V_JC=12", "--snr", "50"]) == 2
    assert len(_err_line(capsys)) < 200


def test_instrument_without_filters_is_refused():
    text = _instrument_text()
    head, site = text.split("[[filter]]")[0], text[text.index("[site]"):]
    with pytest.raises(StelltempError, match="an instrument needs at least one filter"):
        parse_instrument("filter = []\n" + head + site, base_dir=INSTRUMENT.parent)


# ------------------------------------------------------------------ error wording
def test_non_utf8_instrument_target_and_mapping_files_are_plain_lines(tmp_path, capsys):
    bad_inst = tmp_path / "inst.toml"
    bad_inst.write_bytes(_instrument_text().encode().replace(b"# e- rms", b"# e- \xff rms"))
    assert main(["exposure", "--instrument", str(bad_inst), "--mag", "V_JC=12", "--snr", "50"]) == 2
    line = _err_line(capsys)
    assert line.startswith(f"instrument file {bad_inst}: line ") and line.endswith("not UTF-8 text (byte 0xff)")

    targets = tmp_path / "t.csv"
    targets.write_bytes(b"name,ra,dec,mag,band\nx\xff,10,10,12,V_JC\n")
    assert main(["nightplan", str(targets), "--instrument", str(INSTRUMENT), "--date", "2026-03-01",
                 "--snr", "50"]) == 2
    assert _err_line(capsys) == f"target list {targets}: line 2, column 2: not UTF-8 text (byte 0xff)"

    cmap = tmp_path / "m.toml"
    cmap.write_bytes(b'[bands]\n"B_JC" = "B\xff"\n')
    inp = tmp_path / "in.csv"
    inp.write_text("B,V_JC\n10.6,10.0\n")
    assert main(["catalogue", str(inp), "-o", str(tmp_path / "o.csv"), "--columns", str(cmap)]) == 2
    assert _err_line(capsys) == f"column map {cmap}: line 2, column 12: not UTF-8 text (byte 0xff)"


@pytest.mark.parametrize("key", ["x" * 300, "x" * 300 + ".csv"])
def test_300_character_passband_key(capsys, key):
    assert main(["star", "--mag", f"{key}=10", "--mag", "V_JC=9"]) == 2
    line = _err_line(capsys)
    assert "OSError" not in line and "Errno" not in line


def test_plain_reason_never_names_the_exception_class():
    assert plain_reason(OSError(36, "File name too long", "x" * 300)).endswith(": file name too long")
    assert plain_reason(MemoryError()) == "not enough memory for this request"
    assert plain_reason(ValueError("Maximum allowed size exceeded")) == "Maximum allowed size exceeded"
    assert len(shorten("y" * 1000)) == 60


# ------------------------------------------------------------------ file names, late refusals
def test_a_legal_250_character_output_name_works(tmp_path):
    name = "r" * 242 + ".parquet"
    assert len(name) == 250
    inp = tmp_path / "in.csv"
    inp.write_text("B_JC,V_JC\n10.6,10.0\n11.0,10.2\n")
    assert main(["catalogue", str(inp), "-o", str(tmp_path / name), "--quiet"]) == 0
    assert (tmp_path / name).is_file()
    assert len(temporary_name(name, tmp_path).encode()) <= 255
    with atomic_path(tmp_path / ("f" * 250)) as tmp:
        tmp.write_text("ok")
    assert (tmp_path / ("f" * 250)).read_text() == "ok"


def test_an_output_name_beyond_the_limit_is_refused_first(tmp_path, capsys):
    inp = tmp_path / "in.csv"
    inp.write_text("B_JC,V_JC\n10.6,10.0\n")
    out = tmp_path / ("r" * 256 + ".csv")
    assert main(["catalogue", str(inp), "-o", str(out)]) == 2
    assert _err_line(capsys).endswith("the file name is longer than the file system allows")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.csv"]
    # a CSV fits but its sidecar <stem>.meta.json (255 bytes at most) would not: refused before any work
    near = tmp_path / ("r" * 246 + ".csv")
    assert main(["catalogue", str(inp), "-o", str(near)]) == 2
    assert "cannot write metadata file" in _err_line(capsys) and not near.exists()
    ok = tmp_path / ("r" * 245 + ".csv")
    assert main(["catalogue", str(inp), "-o", str(ok), "--quiet"]) == 0 and ok.is_file()
    assert (tmp_path / ("r" * 245 + ".meta.json")).is_file()


@pytest.mark.parametrize("plot, reason", [
    ("nodir/p.png", "does not exist"),
    ("p.xyz", "unknown figure format '.xyz'"),
])
def test_catalogue_plot_refused_before_the_table_is_written(tmp_path, capsys, plot, reason):
    inp = tmp_path / "in.csv"
    inp.write_text("B_JC,V_JC\n10.6,10.0\n")
    out = tmp_path / "o.csv"
    assert main(["catalogue", str(inp), "-o", str(out), "--plot", str(tmp_path / plot)]) == 2
    assert reason in _err_line(capsys)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.csv"]


@pytest.mark.parametrize("argv", [
    STAR + ["--plot", "{d}/p.xyz"],
    ["blackbody", "5000", "--plot", "{d}/none/p.png"],
    ["nightplan", str(ROOT / "catalogs_demo" / "targets.csv"), "--instrument", str(INSTRUMENT),
     "--date", "2026-03-01", "--snr", "50", "-o", "{d}/none/plan.ecsv"],
])
def test_other_commands_refuse_unwritable_paths_first(tmp_path, capsys, argv, monkeypatch):
    import stelltemp.engine as engine_module

    def no_work(*a, **k):
        raise AssertionError("work started before the path check")

    monkeypatch.setattr(engine_module, "estimate", no_work)
    assert main([a.replace("{d}", str(tmp_path)) for a in argv]) == 2
    _err_line(capsys)
    assert list(tmp_path.iterdir()) == []


# ------------------------------------------------------------------ leftovers and SIGTERM
def _dead_pid():
    pid = 999_999
    while True:
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return pid
        except PermissionError:
            pass
        pid -= 1


def test_leftover_temporary_files_are_reported_then_swept(tmp_path, capsys):
    inp = tmp_path / "in.csv"
    inp.write_text("B_JC,V_JC\n10.6,10.0\n")
    stale = tmp_path / f".o.csv.{_dead_pid()}-0123abcd{PART_SUFFIX}"
    stale.write_text("partial")
    other = tmp_path / ".someone-else.part"
    other.write_text("not ours")
    assert leftover_parts(tmp_path) == [stale.name]
    assert main(["catalogue", str(inp), "-o", str(tmp_path / "o.csv"), "--quiet"]) == 0
    err = capsys.readouterr().err
    assert "1 temporary file(s) left by interrupted runs" in err and "--sweep-leftovers" in err
    assert stale.exists()
    assert main(["catalogue", str(inp), "-o", str(tmp_path / "o2.csv"), "--quiet", "--sweep-leftovers"]) == 0
    assert "removed 1 temporary file(s)" in capsys.readouterr().err
    assert not stale.exists() and other.exists()


def test_sigterm_removes_the_temporary_file(tmp_path):
    """SIGTERM during a long run: exit 130 like Ctrl-C, no output, no temporary file."""
    inp = tmp_path / "big.csv"
    rng = np.random.default_rng(1)
    b = rng.uniform(10, 14, 400_000)
    with open(inp, "w") as fh:
        fh.write("B_JC,V_JC,Ic_JC\n")
        np.savetxt(fh, np.column_stack([b, b - 0.5, b - 1.0]), fmt="%.3f", delimiter=",")
    out = tmp_path / "o.parquet"
    proc = subprocess.Popen([sys.executable, "-m", "stelltemp.cli", "catalogue", str(inp), "-o", str(out),
                             "--quiet", "--chunk-rows", "20000"], stderr=subprocess.PIPE, text=True,
                            # numpy kernels: a signal landing while numba loads is a separate case
                            # (left open, see the speed issue's note)
                            cwd=ROOT, env={**os.environ, "PYTHONPATH": str(ROOT), "STELLTEMP_JIT": "0"})
    deadline = time.time() + 120
    while time.time() < deadline and not any(p.name.endswith(PART_SUFFIX) for p in tmp_path.iterdir()):
        if proc.poll() is not None:
            break
        time.sleep(0.05)
    assert proc.poll() is None, "the run ended before it could be interrupted"
    time.sleep(0.3)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert err.strip().splitlines()[-1] == "stelltemp: interrupted"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["big.csv"]
