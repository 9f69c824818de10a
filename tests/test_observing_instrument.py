"""Instrument + site description files: the demo files load; bad values give one-line errors with line numbers."""

import math
from pathlib import Path

import numpy as np
import pytest

from stelltemp.errors import StelltempError
from stelltemp.observing.instrument import load_instrument, parse_instrument

DEMO = Path(__file__).resolve().parents[1] / "catalogs_demo" / "instruments"

GOOD = """\
title = "test rig (invented)"

[telescope]
aperture_m = 0.40
obstruction_m = 0.16
mirrors = 2
mirror_reflectivity = 0.9

[camera]
qe = { wavelength_A = [3000, 6000, 11000], value = [0.2, 0.6, 0.0] }
read_noise_e = 9.0
gain_e_per_adu = 1.4
dark_e_per_s = 0.02
full_well_e = 100000
adc_bits = 16
bias_adu = 1000
pixel_scale_arcsec = 0.6
binning = 2

[[filter]]
name = "V"
passband = "V_JC"
peak_transmission = 0.9
sky_mag_arcsec2 = 21.0
extinction_mag_per_airmass = 0.18

[[filter]]
name = "I"
passband = "Ic_JC"
sky_mag_arcsec2 = 19.3
extinction_mag_per_airmass = 0.08

[site]
latitude_deg = 37.5
longitude_deg = 356.8
elevation_m = 850
seeing_fwhm_arcsec = 2.5
"""


def _line_of(text, needle):
    return next(i for i, line in enumerate(text.splitlines(), start=1) if needle in line)


def test_demo_files_load():
    for name in ("quillmere_04m_ccd.toml", "quillmere_028m_cmos.toml"):
        ins = load_instrument(DEMO / name)
        assert "nvented" in ins.title
        assert ins.filters and ins.site.seeing_fwhm_arcsec > 0
        for spec in ins.filters.values():
            assert spec.passband.wave.size > 2
    cmos = load_instrument(DEMO / "quillmere_028m_cmos.toml")
    assert cmos.camera.saturation_adu == 4095  # 12-bit ADC: 2**12 - 1
    assert cmos.camera.binning == 2
    assert cmos.camera.qe(5500.0) == pytest.approx(0.83)  # value in the invented curve file
    assert cmos.camera.qe(20000.0) == 0.0  # blind outside the tabulated range


def test_good_text_values():
    ins = parse_instrument(GOOD, source="good.toml")
    # area pi/4 (D^2 - d^2), common practice
    assert ins.telescope.collecting_area_cm2 == pytest.approx(math.pi / 4 * (0.40**2 - 0.16**2) * 1e4)
    assert ins.telescope.throughput(np.array([5000.0]))[0] == pytest.approx(0.81)
    assert ins.camera.saturation_adu == 65535
    assert ins.camera.binned_scale_arcsec == pytest.approx(1.2)
    assert ins.camera.binned_dark_e_per_s == pytest.approx(0.08)
    assert ins.filters["I"].peak_transmission == 1.0
    assert ins.site.longitude_deg == pytest.approx(-3.2)  # 0–360 folded to ±180
    assert ins.filter("V").passband.key == "V_JC"
    with pytest.raises(StelltempError, match="no filter 'R'"):
        ins.filter("R")


@pytest.mark.parametrize(
    "old, new, pattern, needle",
    [
        ("aperture_m = 0.40", "aperture_m = -0.40", r"aperture_m.*impossible", "aperture_m ="),
        ("obstruction_m = 0.16", "obstruction_m = 0.40", r"obstruction_m.*smaller than aperture_m", "obstruction_m"),
        ("value = [0.2, 0.6, 0.0]", "value = [0.2, 60, 0.0]", r"above 1", "qe = {"),
        ("read_noise_e = 9.0", "read_nosie_e = 9.0", r"unknown key 'read_nosie_e'", "read_nosie_e"),
        ("gain_e_per_adu = 1.4", "gain_e_per_adu = 0", r"gain_e_per_adu", "gain_e_per_adu"),
        ("bias_adu = 1000", "saturation_adu = 70000", r"exceeds a 16-bit ADC", "saturation_adu"),
        ("binning = 2", "binning = 1.5", r"whole number", "binning"),
        ('passband = "V_JC"', 'passband = "jc.Vx"', r"filter 'V'", 'passband = "jc.Vx"'),
        ("sky_mag_arcsec2 = 19.3", "sky_mag_arcsec2 = 99", r"sky_mag_arcsec2", "sky_mag_arcsec2 = 99"),
        ("latitude_deg = 37.5", "latitude_deg = 137.5", r"latitude_deg", "latitude_deg"),
        ("mirror_reflectivity = 0.9", 'mirror_reflectivity = "high"', r"must be a number", "mirror_reflectivity"),
    ],
)
def test_bad_values_name_key_and_line(old, new, pattern, needle):
    text = GOOD.replace(old, new, 1)
    assert text != GOOD
    with pytest.raises(StelltempError, match=pattern) as exc:
        parse_instrument(text, source="bad.toml")
    msg = str(exc.value)
    assert "\n" not in msg and msg.startswith("bad.toml")
    assert f"(line {_line_of(text, needle)})" in msg


def test_missing_and_structural_errors():
    with pytest.raises(StelltempError, match="missing required key 'aperture_m'"):
        parse_instrument(GOOD.replace("aperture_m = 0.40\n", ""))
    with pytest.raises(StelltempError, match=r"missing \[site\]"):
        parse_instrument(GOOD[: GOOD.index("[site]")])
    with pytest.raises(StelltempError, match="not valid TOML.*line"):
        parse_instrument(GOOD.replace("aperture_m = 0.40", "aperture_m = = 0.40"))
    with pytest.raises(StelltempError, match="unknown key or table 'telescop'"):
        parse_instrument(GOOD + "\n[telescop]\naperture_m = 1\n")
    with pytest.raises(StelltempError, match="duplicate filter name 'V'"):
        parse_instrument(GOOD.replace('name = "I"', 'name = "V"'))
    with pytest.raises(StelltempError, match="exactly one of 'passband'"):
        parse_instrument(GOOD.replace('passband = "Ic_JC"', 'passband = "Ic_JC"\ncurve = "x.ecsv"'))
    with pytest.raises(StelltempError, match="cannot read instrument file"):
        load_instrument("/nonexistent/dir/rig.toml")


def test_curve_files(tmp_path):
    qe = tmp_path / "qe.csv"
    qe.write_text("wavelength,value\n3000,0.1\n6000,0.9\n10000,0.2\n")
    text = GOOD.replace("qe = { wavelength_A = [3000, 6000, 11000], value = [0.2, 0.6, 0.0] }", 'qe_curve = "qe.csv"')
    rig = tmp_path / "rig.toml"
    rig.write_text(text)
    ins = load_instrument(rig)
    assert ins.camera.qe(6000.0) == pytest.approx(0.9)
    assert ins.camera.qe(4500.0) == pytest.approx(0.5)  # linear interpolation
    # per-cent values are refused (QE above 1), naming the key's line
    qe.write_text("wavelength,value\n3000,10\n6000,90\n10000,20\n")
    with pytest.raises(StelltempError, match=r"above 1.*\(line \d+\)"):
        load_instrument(rig)
    # an ECSV column in nm is converted to Å
    (tmp_path / "qe.ecsv").write_text(
        "# %ECSV 1.0\n# ---\n# datatype:\n# - {name: wavelength, unit: nm, datatype: float64}\n"
        "# - {name: value, datatype: float64}\n# schema: astropy-2.0\nwavelength value\n300 0.1\n600 0.9\n1000 0.2\n")
    rig.write_text(text.replace("qe.csv", "qe.ecsv"))
    assert load_instrument(rig).camera.qe(6000.0) == pytest.approx(0.9)
    rig.write_text(text.replace("qe.csv", "missing.csv"))
    with pytest.raises(StelltempError, match="file not found"):
        load_instrument(rig)
