"""Figures: each writes a real PNG, and what is drawn is what the physics says."""

import subprocess
import sys

import numpy as np
import pytest
from astropy.table import Table

from stelltemp import bandgrid as bg
from stelltemp import plots
from stelltemp.errors import StelltempError

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
BANDS = ["B_JC", "V_JC", "Rc_JC", "Ic_JC", "J_2MASS", "H_2MASS", "Ks_2MASS"]


def _by_gid(fig, prefix):
    return [a for ax in fig.axes for a in ax.get_children() if str(a.get_gid() or "").startswith(prefix)]


def _is_png(path):
    data = open(path, "rb").read()
    return data[:8] == PNG_MAGIC and len(data) > 10_000


# ---------------------------------------------------------------- spectrum
def test_wien_marker_sits_at_b_over_t():
    # b = 2.897771955e-3 m K (exact since the 2019 SI redefinition): CODATA 2018,
    # Tiesinga et al. 2021, Rev. Mod. Phys. 93, 025010
    fig = plots.spectrum_figure(5000.0, BANDS)
    (marker,) = _by_gid(fig, "wien-peak")
    x = np.unique(marker.get_xdata())
    assert x.size == 1
    assert x[0] == pytest.approx(2.897771955e-3 / 5000.0 * 1e9, rel=1e-8)  # nm
    # and the drawn spectrum peaks there, to the resolution of its wavelength grid
    (spectrum,) = _by_gid(fig, "spectrum")
    w, b = spectrum.get_xdata(), spectrum.get_ydata()
    assert abs(w[np.argmax(b)] - x[0]) <= np.max(np.diff(w))


def test_spectrum_draws_each_passband_once_and_labels_units():
    fig = plots.spectrum_figure(9000.0, BANDS[:5])
    drawn = sorted(a.get_gid().split(":", 1)[1] for a in _by_gid(fig, "passband:"))
    assert drawn == sorted(BANDS[:5])
    ax = fig.axes[0]
    assert "(nm)" in ax.get_xlabel()
    assert "W m" in ax.get_ylabel() and "nm$^{-1}$" in ax.get_ylabel() and "sr" in ax.get_ylabel()
    assert "peak = 1" in fig.axes[1].get_ylabel()


def test_hot_star_peak_inside_the_drawn_range():
    # the Wien peak of a 30,000 K star lies in the ultraviolet, far left of the optical passbands
    fig = plots.spectrum_figure(30000.0, ["V_JC", "Ks_2MASS"])
    (marker,) = _by_gid(fig, "wien-peak")
    lo, hi = fig.axes[0].get_xlim()
    assert lo < marker.get_xdata()[0] < hi


def test_plot_spectrum_writes_png(tmp_path):
    path = tmp_path / "spec.png"
    assert plots.plot_spectrum_with_passbands(5800, ["V_JC"], path) == str(path)
    assert _is_png(path)


# ------------------------------------------------------- colour-temperature
def test_colour_temperature_curves_and_calibrations():
    fig = plots.colour_temperature_figure(["B_JC", "V_JC", "Ic_JC", "Ks_2MASS"])
    curves = _by_gid(fig, "blackbody:")
    assert sorted(c.get_gid() for c in curves) == sorted(
        ["blackbody:B_JC-V_JC", "blackbody:V_JC-Ic_JC", "blackbody:Ic_JC-Ks_2MASS"])
    for c in curves:  # a hotter blackbody is bluer in every colour (Planck)
        assert np.all(np.diff(c.get_ydata()) < 0)
    cal = {c.get_gid(): c for c in _by_gid(fig, "calibration:")}
    # no relation for Ic-Ks; B-V and V-Ic have the FGK, hot-dwarf and M-dwarf relations, and
    # B-V the giant relation of González Hernández & Bonifacio 2009
    assert set(cal) == {"calibration:c10_bv", "calibration:c10_vi", "calibration:pm13_bv_hot",
                        "calibration:m15_vi", "calibration:pm13_vic_cool", "calibration:ghb09_bv_giant"}
    x = cal["calibration:c10_bv"].get_ydata()
    # drawn only over the published B-V range: Casagrande et al. 2010, A&A 512, A54, Table 4
    assert x.min() >= 0.18 - 1e-9 and x.max() <= 1.29 + 1e-9
    ax = fig.axes[0]
    assert "(K)" in ax.get_xlabel() and "(mag)" in ax.get_ylabel()


def test_reddened_curves_are_redder():
    fig = plots.colour_temperature_figure(["B_JC", "V_JC"], ebv=0.4, calibrations=False)
    (red,) = _by_gid(fig, "blackbody:")
    (clear,) = _by_gid(fig, "blackbody-unreddened:")
    excess = red.get_ydata() - clear.get_ydata()
    # E(B-V) through real passbands on a blackbody: close to, not exactly, the nominal 0.4
    assert np.all(excess > 0.3) and np.all(excess < 0.5)
    assert not _by_gid(fig, "calibration:")


def test_colour_temperature_needs_two_bands(tmp_path):
    with pytest.raises(StelltempError, match="at least 2"):
        plots.plot_colour_temperature(["V_JC"], tmp_path / "x.png")


def test_plot_colour_temperature_writes_png(tmp_path):
    path = plots.plot_colour_temperature(["BP_GDR3", "RP_GDR3"], tmp_path / "ct.png", ebv=0.2)
    assert _is_png(path)


# ------------------------------------------------------------------ star fit
def _noise_free_star(t=6200.0, ebv=0.15, theta_mas=0.05, bands=BANDS):
    theta_rad = theta_mas / plots.MAS_PER_RAD
    return [(b, float(bg.blackbody_mag(b, t, ebv, "G23", 3.1, theta_rad)), 0.02) for b in bands]


def test_star_fit_of_a_blackbody_has_zero_residuals():
    from stelltemp.engine import estimate

    typed = _noise_free_star()
    table = estimate({k: [m] for k, m, _ in typed}, {k: [e] for k, _, e in typed}, ebv=0.15)
    fig = plots.star_fit_figure(table, typed)
    from matplotlib.lines import Line2D

    # the error bars' data line (the caps are Line2Ds too, with other markers)
    (res,) = [a for a in _by_gid(fig, "residuals") if isinstance(a, Line2D) and a.get_marker() == "o"]
    y = res.get_ydata()
    assert len(y) == len(typed)
    assert np.all(np.abs(y) < 2e-3)
    (model,) = _by_gid(fig, "model")
    # model points drawn at the passbands' pivot wavelengths, in increasing order
    assert np.all(np.diff(model.get_xdata()) > 0)
    top, bottom = fig.axes[0], fig.axes[1]
    assert top.yaxis_inverted()  # brighter is up
    assert "(nm)" in bottom.get_xlabel() and "mag" in bottom.get_ylabel()
    assert "6,20" in top.get_title()  # the fitted temperature is in the title


def test_star_fit_without_a_temperature_still_draws(tmp_path):
    from stelltemp.engine import estimate

    table = estimate({"B_JC": [np.nan], "V_JC": [10.0]})
    path = plots.plot_star_fit(table, [("B_JC", None, None), ("V_JC", 10.0, None)], tmp_path / "f.png")
    assert _is_png(path)


def test_plot_star_fit_writes_png(tmp_path):
    from stelltemp.engine import estimate

    typed = _noise_free_star(bands=["B_JC", "V_JC", "Ks_2MASS"])
    table = estimate({k: [m] for k, m, _ in typed})
    assert _is_png(plots.plot_star_fit(table, typed, tmp_path / "fit.png"))


# ------------------------------------------------------------- catalogue run
def _small_run():
    """Five invented stars through the catalogue engine, with one sentinel and one lone band."""
    from stelltemp.catalog import estimate_table

    temps = np.array([4000.0, 6000.0, 9000.0, 15000.0, 5000.0])
    ebv = np.array([0.0, 0.1, 0.2, 0.05, 0.0])
    theta = 1e-9
    cols = {"name": [f"inv-{i}" for i in range(5)]}
    for b in ("B_JC", "V_JC", "Ks_2MASS"):
        cols[b] = bg.blackbody_mag(b, temps, ebv, "G23", 3.1, theta)
        cols[b + "_err"] = np.full(5, 0.02)
    cols["B_JC"][3] = 99.999  # sentinel: a temperature from V and Ks, but no B-V
    cols["V_JC"][4] = np.nan  # lone band after the next line: no temperature
    cols["Ks_2MASS"][4] = np.nan
    cols["ebv"] = ebv
    return estimate_table(Table(cols)), temps


def test_catalogue_points_are_the_run_temperatures():
    results, temps = _small_run()
    fig = plots.catalogue_figure(results)
    (stars,) = _by_gid(fig, "stars")
    pts = stars.get_offsets()
    assert len(pts) == 3  # stars 0-2: a temperature and a usable B-V
    np.testing.assert_allclose(np.sort(pts[:, 1]), np.sort(temps[:3]), rtol=1e-4)
    ax = fig.axes[0]
    assert ax.get_xlabel().startswith("B_JC − V_JC") and "(K)" in ax.get_ylabel()
    notes = " ".join(t.get_text() for t in ax.texts)
    assert "inv-4" in notes and "inv-3" in notes


def test_catalogue_rings_flagged_temperatures():
    results, _ = _small_run()
    results["flags"][1] |= 1 << 5  # pretend a poor fit on star 1
    fig = plots.catalogue_figure(results)
    (ring,) = _by_gid(fig, "flagged")
    assert len(ring.get_offsets()) == 1


def test_catalogue_rejects_a_table_without_results():
    with pytest.raises(StelltempError, match="t_bb"):
        plots.catalogue_figure(Table({"B_JC": [1.0], "V_JC": [2.0]}))


def test_plot_catalogue_writes_png_and_unwritable_path_is_one_error(tmp_path):
    results, _ = _small_run()
    assert _is_png(plots.plot_catalogue_results(results, tmp_path / "cat.png"))
    with pytest.raises(StelltempError, match="cannot write figure"):
        plots.plot_catalogue_results(results, tmp_path / "no" / "such" / "dir" / "cat.png")


def test_importing_the_package_does_not_load_matplotlib():
    code = "import sys, stelltemp, stelltemp.plots; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
