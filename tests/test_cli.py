"""Command line: JSON output, one-line errors with exit code 2."""

import json
import subprocess
import sys

import pytest

from stelltemp.cli import main


def run_json(capsys, *argv):
    code = main([*argv, "--json"])
    out = capsys.readouterr().out
    assert code == 0
    return json.loads(out)


def test_passband_listing_has_the_required_bands_and_fields(capsys):
    data = run_json(capsys, "passbands")["passbands"]
    keys = {row["key"] for row in data}
    required = {"U_JC", "B_JC", "V_JC", "Rc_JC", "Ic_JC", "u_SDSS", "g_SDSS", "r_SDSS", "i_SDSS", "z_SDSS",
                "J_2MASS", "H_2MASS", "Ks_2MASS", "G_GDR3", "BP_GDR3", "RP_GDR3"}
    assert required <= keys and len(data) >= 17
    for row in data:
        for field in ("system", "magsys", "detector", "pivot_wavelength_nm", "source"):
            assert row[field] not in (None, ""), (row["key"], field)
    v = next(r for r in data if r["key"] == "V_JC")
    # Bessell & Murphy 2012 (PASP 124, 140) list the V pivot near 5480 Å (from memory)
    assert 540 < v["pivot_wavelength_nm"] < 556


def test_blackbody_json_for_body_temperature_in_celsius(capsys):
    data = run_json(capsys, "blackbody", "37", "--unit", "C", "--radius", "1")
    assert data["temperature_K"] == pytest.approx(310.15)
    # common practice: a body near 310 K peaks near 9.3–9.4 µm
    assert 9300 < data["peak_wavelength_B_lambda_nm"] < 9400
    assert data["peak_wavelength_photons_nm"] > data["peak_wavelength_B_lambda_nm"]
    assert data["wavelength_of_B_nu_peak_nm"] > data["peak_wavelength_photons_nm"]


def test_colourgrid_json_is_monotonic(capsys):
    data = run_json(capsys, "colourgrid", "B_JC", "V_JC", "--tmin", "3000", "--tmax", "30000", "--steps", "6")
    bv = data["colours"]["B_JC-V_JC"]
    assert all(a > b for a, b in zip(bv, bv[1:]))
    # A 1 R☉ blackbody near 5800 K at 10 pc has M_V ≈ 4.8 (common practice: the Sun's M_V = 4.83)
    data = run_json(capsys, "colourgrid", "V_JC", "--temps", "5772")
    assert data["magnitudes"]["V_JC"][0] == pytest.approx(4.8, abs=0.25)


def test_star_json_has_units_and_the_note(capsys):
    data = run_json(capsys, "star", "--mag", "B_JC=10.65,0.01", "--mag", "V_JC=10.00,0.01",
                    "--ebv", "0.05", "--ebv-err", "0.02")
    res = data["result"]
    assert res["t_bb"]["unit"] == "K" and 5000 < res["t_bb"]["value"] < 7000
    assert res["t_bb_lo"]["value"] < res["t_bb"]["value"] < res["t_bb_hi"]["value"]
    assert "not an effective temperature" in data["meta"]["note"]


def test_relations_json(capsys):
    data = run_json(capsys, "relations")
    assert any(r["key"] == "c10_vk" for r in data["relations"])


@pytest.mark.parametrize("argv,fragment", [
    (["blackbody", "-5"], "above 0 K"),
    (["blackbody", "hot"], "not a temperature"),
    (["star", "--mag", "jc.X=1", "--mag", "V_JC=1"], "unknown passband"),
    (["star", "--mag", "B_JC=abc", "--mag", "V_JC=1"], "not a number"),
    (["star", "--mag", "B_JC=1", "--mag", "V_JC=1", "--law", "nope"], "unknown extinction law"),
    (["colourgrid", "B_JC", "--tmin", "10", "--tmax", "5"], "tmin"),
    (["star"], "required"),
])
def test_bad_input_is_one_line_and_exit_code_2(capsys, argv, fragment):
    try:
        code = main(argv)
    except SystemExit as stop:  # argparse usage errors leave through exit()
        code = stop.code
    assert code == 2
    err = capsys.readouterr().err.strip()
    assert fragment in err
    assert len(err.splitlines()) == 1 and "Traceback" not in err


def test_console_script_help_and_error_in_a_subprocess():
    ok = subprocess.run([sys.executable, "-m", "stelltemp.cli", "--help"], capture_output=True, text=True)
    assert ok.returncode == 0 and "colourgrid" in ok.stdout
    bad = subprocess.run([sys.executable, "-m", "stelltemp.cli", "blackbody", "nan"], capture_output=True, text=True)
    assert bad.returncode == 2
    assert bad.stderr.count("\n") == 1 and bad.stderr.startswith("stelltemp: error:")


def test_an_existing_figure_is_not_replaced_without_permission(tmp_path, capsys):
    target = tmp_path / "spectrum.png"
    target.write_bytes(b"keep me")
    assert main(["blackbody", "5772", "--plot", str(target)]) == 2
    err = capsys.readouterr().err
    assert "already exists" in err and len(err.strip().splitlines()) == 1
    assert target.read_bytes() == b"keep me"
    assert main(["blackbody", "5772", "--plot", str(target), "--replace"]) == 0
    assert target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert [p.name for p in tmp_path.iterdir()] == ["spectrum.png"]  # no temporary file left behind
