"""Planning figures: clock times, windows, the Moon, Kasten & Young airmass, S/N markers."""

import math
import re
from pathlib import Path

import numpy as np
import pytest
from astropy.time import Time

from stelltemp.observing import figures
from stelltemp.observing.airmass import airmass_kasten_young
from stelltemp.observing.instrument import load_instrument
from stelltemp.observing.plan import night_tracks, parse_targets, plan_night, plan_target

DEMO = Path(__file__).resolve().parents[1] / "catalogs_demo" / "instruments"
CCD_FILE = DEMO / "quillmere_04m_ccd.toml"
CLOCK = re.compile(r"^\d\d:\d\d$")


def _by_gid(fig, prefix):
    return [a for ax in fig.axes for a in ax.get_children() if str(a.get_gid() or "").startswith(prefix)]


def _tick_texts(axis):
    return [t.get_text() for t in axis.get_ticklabels() if t.get_text()]


@pytest.fixture(scope="module")
def instrument():
    return load_instrument(CCD_FILE)


@pytest.fixture(scope="module")
def small_night(instrument):
    from astropy.table import Table

    rows = Table(rows=[("Invented-1", "11:24:00", "+02:00:00", 9.5, "V"), ("Invented-2", "150.0", "-10.0", 12.0, "V"),
                       ("Invented-3", "07:00:00", "+40:00:00", 10.0, "V"), ("Invented-4", "20:00:00", "-60:00:00", 8.0, "V")],
                 names=("name", "ra", "dec", "mag", "band"))
    targets = parse_targets(rows)
    plan = plan_night(instrument, targets, "2025-03-10", snr=100, step_min=20)
    tracks = night_tracks(instrument, targets, "2025-03-10", step_min=20)
    return plan, tracks


def test_clock_label_and_kasten_young_ticks():
    assert figures.clock_label(23.999) == "00:00" and figures.clock_label(13.5) == "13:30"
    for x in figures.AIRMASS_TICKS[1:]:  # the airmass axis is the plan table's airmass (Kasten & Young 1989)
        assert float(airmass_kasten_young(figures.altitude_at_airmass(x))) == pytest.approx(x, rel=1e-7)
    assert figures.altitude_at_airmass(1.0) == 90.0  # the formula gives 0.9997 at the zenith: "1" marks it
    # the airmass 2 tick is not at 30 deg as sec z would put it (common practice: curvature lowers X)
    assert 29.9 < figures.altitude_at_airmass(2.0) < 30.0


def test_night_chart_reads_what_to_observe_when(small_night):
    plan, tracks = small_night
    fig = figures.night_figure(tracks, 30.0, plan=plan)
    fig.canvas.draw()  # the upper (secondary) axis takes its limits when drawn
    ax, bars = fig.axes[0], fig.axes[1]
    # clock times on the time axes: UTC below, local time above
    assert _tick_texts(bars.xaxis) and all(CLOCK.match(t) for t in _tick_texts(bars.xaxis))
    local = [a for a in ax.child_axes]
    assert local and "local time (UTC" in local[0].get_xlabel()
    assert all(CLOCK.match(t) for t in _tick_texts(local[0].xaxis))
    offset = plan.meta["utc_offset_hours"]
    # the upper axis is the lower one shifted by the site's UTC offset, its labels the clock times there
    np.testing.assert_allclose(local[0].get_xlim(), np.add(ax.get_xlim(), offset))
    for loc, text in zip(local[0].get_xticks(), local[0].get_xticklabels()):
        assert text.get_text() == figures.clock_label(loc)
    for loc, text in zip(bars.get_xticks(), bars.get_xticklabels()):
        assert text.get_text() == figures.clock_label(loc)
    assert "UTC" in bars.get_xlabel()
    # one window bar per target with a window (Invented-4 at dec -60 never rises above 30 deg at 37.5 N)
    drawn = sorted(a.get_gid().split(":", 1)[1] for a in _by_gid(fig, "window:"))
    assert drawn == ["Invented-1", "Invented-2", "Invented-3"]
    assert "No window (1): Invented-4" in fig.caption
    # bars sorted by best time, first at the top
    labels = [t.get_text() for t in bars.get_yticklabels()]
    best = {str(r["target"]): str(r["best_time"]) for r in plan}
    assert labels == sorted(labels, key=lambda n: best[n])
    # the Moon's track and phase, the labelled altitude limit, the Kasten & Young airmass axis
    assert _by_gid(fig, "moon") and "Moon" in fig.caption and "illuminated" in fig.caption
    (limit,) = _by_gid(fig, "altitude-limit")
    assert set(limit.get_ydata()) == {30.0}
    assert any(t.get_text().startswith("altitude limit 30°") for t in ax.texts)
    right = [a for a in fig.axes if "Kasten & Young" in a.get_ylabel()]
    assert right and _tick_texts(right[0].yaxis)[:3] == ["1", "1.1", "1.2"]
    assert "targets have a window" in ax.get_title()


def _fake_tracks(n=60):
    """An invented night: altitudes as cosines peaking through the night, the Sun as a cosine too."""
    hours = np.arange(12.0, 36.0, 0.25)
    times = Time(61000.0 + hours / 24.0, format="mjd", scale="utc")
    sun = 40.0 * np.cos((hours - 12.0) / 24.0 * 2 * np.pi) + 5.0  # noon high, midnight -35 deg
    peaks = np.linspace(19.0, 29.0, n)
    alt = 75.0 * np.cos((hours[None, :] - peaks[:, None]) / 12.0 * np.pi)
    return {"times": times, "sun_alt": sun, "dark": sun < -18.0, "names": [f"inv-{i:02d}" for i in range(n)],
            "alt": alt, "airmass": airmass_kasten_young(alt), "utc_offset_hours": -5.0,
            "moon_alt": 50.0 * np.cos((hours - 30.0) / 12.0 * np.pi), "moon_illuminated": np.full(hours.size, 0.62)}


def test_night_chart_stays_readable_for_sixty_targets(tmp_path):
    tracks = _fake_tracks(60)
    fig = figures.night_figure(tracks, 30.0)
    curves = _by_gid(fig, "altitude:")
    assert 1 < len(curves) <= figures.CURVE_LIMIT  # a chosen few as curves
    assert len(_by_gid(fig, "window:")) == 60  # every target as a window
    assert f"Curves: {len(curves)} of 60 targets" in fig.caption and "spread through the night" in fig.caption
    assert "Moon 62% illuminated" in fig.caption
    # the curves differ in colour or line style from one another
    looks = {(c.get_color(), str(c.get_linestyle())) for c in curves}
    assert len(looks) == len(curves)
    local = fig.axes[0].child_axes[0]
    assert "UTC−5 h" in local.get_xlabel()
    assert figures.plot_night(tracks, tmp_path / "n.png", chosen=["inv-00", "inv-59"], reason="the two ends") \
        == str(tmp_path / "n.png")
    fig2 = figures.night_figure(tracks, 30.0, chosen=["inv-00", "inv-59"], reason="the two ends")
    assert "(inv-00, inv-59), the two ends." in fig2.caption


def test_snr_chart_names_star_instrument_airmass_and_marks_the_goal(instrument):
    table = plan_target(instrument, mag=11.0, band="V_JC", teff=5000.0, snr=150, airmass=1.4, name="Invented-9")
    fig = figures.snr_figure(table)
    ax = fig.axes[0]
    title = ax.get_title()
    assert "Invented-9" in title and "airmass 1.4" in title and table.meta["instrument"] in title
    lines = {a.get_gid(): a for a in _by_gid(fig, "snr:")}
    assert len(lines) == len(table)
    looks = {(str(a.get_linestyle()), a.get_marker()) for a in lines.values()}
    assert len(looks) == len(lines)  # told apart without colour
    for row in table:
        (goal,) = _by_gid(fig, f"goal:{row['filter']}")
        assert goal.get_xdata()[0] == pytest.approx(float(row["exposure_for_snr"]))
        assert goal.get_ydata()[0] == 150
    legend = " ".join(t.get_text() for t in ax.get_legend().get_texts())
    assert "S/N goal 150" in legend
    if _by_gid(fig, "nonlinear:"):
        assert "non-linearity begins" in legend
        for a in _by_gid(fig, "nonlinear:"):
            f = a.get_gid().split(":", 1)[1]
            row = table[table["filter"] == f][0]
            assert a.get_xdata()[0] == pytest.approx(float(row["nonlinear_after"]))
    assert math.isfinite(float(table["exposure_for_snr"][0]))
