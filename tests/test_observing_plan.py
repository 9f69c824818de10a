"""Planning tables and the exposure / nightplan command-line hooks."""

import io
import json
from pathlib import Path

import numpy as np
import pytest
from astropy import units as u
from astropy.table import Table

from stelltemp.errors import StelltempError
from stelltemp.observing import ccd, plan
from stelltemp.cli import build_parser
from stelltemp.observing.instrument import load_instrument

DEMO = Path(__file__).resolve().parents[1] / "catalogs_demo" / "instruments"
CCD_FILE = DEMO / "quillmere_04m_ccd.toml"


@pytest.fixture(scope="module")
def rig():
    return load_instrument(CCD_FILE)


def test_plan_target_columns_and_consistency(rig):
    t = plan.plan_target(rig, 11.0, "V", teff=5000.0, snr=150.0, airmass=1.3)
    assert list(t["filter"]) == ["B", "V", "R", "I"]
    for name in t.colnames:
        col = t[name]
        assert col.description
        if col.dtype.kind == "f":
            assert col.unit is not None, name
    assert t["star_rate"].unit == u.electron / u.s
    assert t["sky_rate"].unit == u.electron / (u.s * u.pix)
    assert t["exposure_for_snr"].unit == u.s
    np.testing.assert_allclose(t["snr"], 150.0, rtol=1e-9)  # exposure_for_snr substituted back
    np.testing.assert_allclose(t["exposure"], t["exposure_for_snr"])
    # seeing X^0.6 (common practice) and extinction applied
    assert t["seeing_fwhm"][0] == pytest.approx(2.5 * 1.3**0.6)
    # recompute one S/N from the table's own columns with the CCD equation
    r = t[t["filter"] == "R"][0]
    s = ccd.snr(r["exposure"], r["aperture_rate"], r["sky_rate"], r["dark_rate"], 9.0, r["n_pix"],
                r["n_background"], 1.4, ccd.SIGMA_F_ADU, r["scintillation_1s"])
    assert s == pytest.approx(150.0)


def test_plan_target_given_time_and_saturation(rig):
    faint = plan.plan_target(rig, 15.0, "V", exposure_s=60.0)
    assert set(faint["saturation"]) == {"ok"}
    assert np.all(np.isnan(faint["exposure_for_snr"]))
    bright = plan.plan_target(rig, 5.0, "V", teff=3500.0, exposure_s=60.0)
    sat = bright[bright["saturation"] == "saturated"]
    assert len(sat) >= 3
    for row in sat:
        # never an exposure below the camera's minimum; a star too bright even then gets the light cut it needs
        assert row["n_exposures"] > 1 and row["each_exposure"] >= rig.camera.min_exposure_s
        if row["light_cut"] > 1:
            assert row["nonlinear_after"] < rig.camera.min_exposure_s
            assert row["light_cut"] == pytest.approx(rig.camera.min_exposure_s / row["nonlinear_after"])
            assert "neutral-density filter" in row["advice"] and "aperture stop" in row["advice"]
        else:
            assert row["each_exposure"] <= row["nonlinear_after"] * (1 + 1e-9)
        assert "take" in row["advice"]
        assert row["peak_adu"] <= rig.camera.saturation_adu and row["peak_e"] <= rig.camera.full_well_e
        assert row["peak_excess"] > 1
    with pytest.raises(StelltempError, match="S/N, an exposure"):
        plan.plan_target(rig, 10.0, "V")
    with pytest.raises(StelltempError, match="airmass"):
        plan.plan_target(rig, 10.0, "V", snr=10, airmass=0.5)


def test_parse_targets_flags_bad_rows():
    t = Table(rows=[("A", "05:30:00", "+20:00:00", "9.0", "V", ""), ("B", "150.5", "-10", "12", "V_JC", "4500"),
                    ("C", "xx", "5", "3", "V", ""), ("D", "10", "95", "3", "V", ""), ("E", "10", "5", "x", "V", "")],
              names=["name", "ra", "dec", "mag", "band", "teff"])
    rows = plan.parse_targets(t)
    assert rows[0]["ra_deg"] == pytest.approx(82.5) and rows[0]["dec_deg"] == pytest.approx(20.0)
    assert rows[1]["teff"] == 4500.0 and rows[0]["teff"] is None
    assert [bool(r["error"]) for r in rows] == [False, False, True, True, True]
    with pytest.raises(StelltempError, match="lacks column"):
        plan.parse_targets(Table(rows=[("A", 1.0)], names=["name", "ra"]))


@pytest.fixture(scope="module")
def target_file(tmp_path_factory):
    p = tmp_path_factory.mktemp("plan") / "targets.csv"
    p.write_text("name,ra,dec,mag,band,teff\n"
                 "Invented-1,11:24:00,+02:00:00,9.5,V,4200\n"
                 "Invented-2,150.0,-10.0,12.0,V_JC,\n"
                 "Broken-3,xx,5,3,V,\n"
                 "Invented-4,20:00:00,-60:00:00,8.0,V,\n")
    return p


def _parser():
    return build_parser()


def run_cli(args, out, err):
    return args.run(args, out, err)


def test_cli_nightplan(target_file, tmp_path):
    args = _parser().parse_args(["nightplan", str(target_file), "--instrument", str(CCD_FILE), "--date",
                                 "2025-03-10", "--snr", "100", "--step", "20", "--json",
                                 "--plot", str(tmp_path / "night.png"), "--output", str(tmp_path / "plan.ecsv")])
    out, err = io.StringIO(), io.StringIO()
    assert run_cli(args, out, err) == 0
    doc = json.loads(out.getvalue())
    rows = doc["rows"]
    assert len(rows) == 16  # 4 targets x 4 filters; the bad row kept with a flag
    assert doc["units"]["exposure"] == "s" and doc["units"]["min_airmass"] == ""
    by = {(r["target"], r["filter"]): r for r in rows}
    assert by[("Broken-3", "V")]["flags"] == "bad ra 'xx'" and by[("Broken-3", "V")]["exposure"] is None
    assert "no dark time above 30 deg" in by[("Invented-4", "V")]["flags"]  # dec -60 never above 30 deg at 37.5 N
    good = by[("Invented-1", "V")]
    assert good["snr"] == pytest.approx(100.0) and good["flags"] == ""
    assert doc["meta"]["dark_start"] < good["window_start"] < good["best_time"] < good["window_end"]
    assert good["min_airmass"] == pytest.approx(1 / np.cos(np.radians(37.5 - 2.0)), rel=0.01)
    assert (tmp_path / "night.png").stat().st_size > 1000
    saved = Table.read(tmp_path / "plan.ecsv")
    assert saved["star_rate"].unit == u.electron / u.s and len(saved) == 16


def test_cli_exposure_text_plot_and_sun(tmp_path):
    p = _parser()
    args = p.parse_args(["exposure", "--instrument", str(DEMO / "quillmere_028m_cmos.toml"), "--mag", "V_JC=6",
                         "--teff", "3500", "--snr", "300", "--plot", str(tmp_path / "snr.png")])
    out, err = io.StringIO(), io.StringIO()
    assert run_cli(args, out, err) == 0
    text = out.getvalue()
    assert text.splitlines()[0].startswith("filter") and "exposure [s]" in text
    assert "saturated" in text and "take" in err.getvalue()
    assert (tmp_path / "snr.png").stat().st_size > 1000
    # pointing at the Sun's position at noon: daylight is refused, with the Sun warnings and the caution
    args = p.parse_args(["exposure", "--instrument", str(CCD_FILE), "--mag", "3", "--band", "V", "--exposure", "1",
                         "--json", "--time", "2025-06-21T12:00", "--ra", "06:00:00", "--dec", "23.4"])
    out, err = io.StringIO(), io.StringIO()
    with pytest.raises(StelltempError, match="daylight") as exc:
        run_cli(args, out, err)
    assert "SUN NEARBY" in str(exc.value) and "certified solar filter" in str(exc.value)
    assert "\n" not in str(exc.value)
    with pytest.raises(StelltempError, match="--snr, --exposure"):
        run_cli(p.parse_args(["exposure", "--instrument", str(CCD_FILE), "--mag", "V=3"]), out, err)
    with pytest.raises(StelltempError, match="no filter 'Q'"):
        run_cli(p.parse_args(["exposure", "--instrument", str(CCD_FILE), "--mag", "3", "--band", "V", "--snr", "5",
                              "--filters", "V,Q"]), out, err)


def test_plan_night_into_twilight_warns(rig):
    # windows allowed up to sunset (sun_limit="sun") reach into civil twilight: the plan says so, with the caution
    targets = Table(rows=[("Invented-W", "11:00:00", "0", 9.0, "V")], names=["name", "ra", "dec", "mag", "band"])
    t = plan.plan_night(rig, targets, "2025-03-10", snr=50.0, sun_limit="sun", min_alt_deg=3.0, moon=False,
                        step_min=20.0)
    warns = t.meta["sun_warnings"]
    assert any(w.startswith("CIVIL TWILIGHT") for w in warns)
    assert all("certified solar filter" in w for w in warns)
    assert t["window_start"][0] < t.meta["twilight"]["civil_evening"]


def test_night_tracks_extinction_through_the_night(rig):
    targets = plan.parse_targets(Table(rows=[("Invented-T", "11:24:00", "+02:00:00", 10.0, "V", 6000.0)],
                                       names=["name", "ra", "dec", "mag", "band", "teff"]))
    tr = plan.night_tracks(rig, targets, "2025-03-10", step_min=30.0)
    x = tr["airmass"][0]
    up = np.nonzero(np.isfinite(x))[0]
    i, j = up[0], up[len(up) // 2]
    for f, spec in rig.filters.items():
        r = tr["rates"][f][0]
        # counts scale as 10^(-0.4 k X) across the night (Bouguer's law, common practice)
        assert r[i] / r[j] == pytest.approx(10 ** (-0.4 * spec.extinction_mag_per_airmass * (x[i] - x[j])))
        assert np.all(np.isnan(r[~np.isfinite(x)]))
    assert tr["dark"].any() and tr["names"] == ["Invented-T"]


def test_exposure_refuses_the_sun_with_the_caution():
    # common practice: V(Sun) ≈ −26.7; the tool gives the usual caution instead of a plan
    args = _parser().parse_args(["exposure", "--instrument", str(CCD_FILE), "--mag", "V_JC=-26.7",
                                 "--snr", "50"])
    with pytest.raises(StelltempError, match="certified solar filter"):
        run_cli(args, io.StringIO(), io.StringIO())
