"""Transformation fit and its application (stelltemp.reduction).

Simulated nights are made on the fly from the transformation equation
itself (invented coefficients, Gaussian noise of the stated errors), so the
truth is known exactly.
"""

import numpy as np
import pytest
from astropy.table import Table

from stelltemp.errors import StelltempError
from stelltemp.reduction import (Observations, apply_transformation, default_setups, fit_filter,
                                 fit_transformation, observations_from_table, standards_from_table)

# invented coefficients (z, k', c, k''); typical magnitudes for B and V on a small telescope (common practice)
TRUE = {"B": (1.80, 0.30, 0.08, -0.03), "V": (1.50, 0.18, -0.04, 0.0)}
SETUPS = default_setups({"B": "B_JC", "V": "V_JC"}, second_order={"B"})


def simulate(rng, n_nights, n_std=12, airmasses=(1.1, 1.5, 2.0), err=0.01, std_err=0.005):
    """Vectorised standard-star nights: arrays (nights, n_std, n_X) per filter."""
    v = rng.uniform(9.0, 12.5, (n_nights, n_std))
    bv = rng.uniform(-0.2, 1.6, (n_nights, n_std))
    x = np.asarray(airmasses)[None, None, :] + rng.normal(0, 0.03, (n_nights, n_std, len(airmasses)))
    std = {"V_JC": v, "B_JC": v + bv}
    inst = {}
    for f, key in (("B", "B_JC"), ("V", "V_JC")):
        z, k, c, k2 = TRUE[f]
        inst[f] = (std[key][..., None] + z + k * x + c * bv[..., None] + k2 * x * bv[..., None]
                   + rng.normal(0, err, x.shape))
    quoted = {k: s + rng.normal(0, std_err, s.shape) for k, s in std.items()}  # the list is itself noisy
    return x, inst, quoted, err, std_err


def night(i, x, inst, quoted, err, std_err, prefix="s"):
    n_std, n_x = x.shape[1:]
    names = np.array([f"{prefix}{j:02d}" for j in range(n_std)])
    star, filt, mag, xx = [], [], [], []
    for f in ("B", "V"):
        star.append(np.repeat(names, n_x))
        filt.append(np.full(n_std * n_x, f))
        mag.append(inst[f][i].ravel())
        xx.append(x[i].ravel())
    obs = Observations.from_arrays(np.concatenate(star), np.concatenate(filt), np.concatenate(mag),
                                   np.full(2 * n_std * n_x, err), np.concatenate(xx))
    stds = {n: {k: (float(quoted[k][i, j]), std_err) for k in quoted} for j, n in enumerate(names)}
    return obs, stds


def test_coefficients_recovered_with_honest_68_percent_intervals():
    # Check of our own error bars: over 200 simulated nights the ±1σ intervals of the fitted
    # coefficients should contain the generating values 68.3 % of the time (Gaussian statistics);
    # the issue asks for 60–76 %.
    rng = np.random.default_rng(20261108)
    sim = simulate(rng, 200)
    hits = {f: [] for f in TRUE}
    for i in range(200):
        obs, stds = night(i, *sim)
        tr = fit_transformation(obs, stds, SETUPS)
        for f, fit in tr.fits.items():
            truth = np.array(TRUE[f][: len(fit.names)])
            hits[f].append(np.abs(fit.values - truth) < fit.errors)
    every = np.concatenate([np.ravel(h) for h in hits.values()])
    assert 0.60 <= every.mean() <= 0.76, every.mean()
    for f, h in hits.items():
        per_coefficient = np.mean(h, axis=0)
        assert np.all((per_coefficient > 0.55) & (per_coefficient < 0.81)), (f, per_coefficient)


def test_outlier_rejected_and_reported():
    rng = np.random.default_rng(5)
    obs, stds = night(0, *simulate(rng, 1))
    mag = obs.mag.copy()
    bad = np.flatnonzero((obs.star == "s03") & (obs.filter == "V"))[1]
    mag[bad] += 0.25  # a cosmic ray or a cloud
    obs = Observations.from_arrays(obs.star, obs.filter, mag, obs.err, obs.airmass)
    fit = fit_filter(obs, stds, SETUPS[1])
    assert [r[0] for r in fit.rejected] == ["s03"]
    assert "sigma" in fit.rejected[0][2]
    assert abs(fit.coefficient("colour_term") - TRUE["V"][2]) < 3 * fit.errors[2]
    # without rejection the bad point drags the solution and inflates chi2
    loose = fit_filter(obs, stds, SETUPS[1], clip=np.inf)
    assert loose.rejected == [] and loose.chi2 > 5 * fit.chi2


def test_missing_standard_band_is_set_aside_with_reason():
    rng = np.random.default_rng(6)
    obs, stds = night(0, *simulate(rng, 1))
    del stds["s01"]["B_JC"]
    fit = fit_filter(obs, stds, SETUPS[1])
    reasons = {s: r for s, _, r in fit.rejected}
    assert "standard list lacks" in reasons["s01"]


def test_single_airmass_needs_an_extinction_prior():
    rng = np.random.default_rng(7)
    obs, stds = night(0, *simulate(rng, 1, airmasses=(1.3,)), )
    obs = Observations.from_arrays(obs.star, obs.filter, obs.mag, obs.err, np.full(len(obs), 1.3))
    with pytest.raises(StelltempError, match="airmass.*prior on the extinction"):
        fit_filter(obs, stds, SETUPS[1])
    fit = fit_filter(obs, stds, SETUPS[1], priors={"extinction": (0.18, 0.02)})
    assert abs(fit.coefficient("extinction") - 0.18) < 1e-6 + 0.02
    assert fit.errors[0] > 0.02  # zero point inherits the extinction prior's width at X = 1.3


def test_standard_magnitudes_of_targets_within_errors():
    rng = np.random.default_rng(8)
    x, inst, quoted, err, std_err = simulate(rng, 1, n_std=15)
    obs, stds = night(0, x, inst, quoted, err, std_err)
    tr = fit_transformation(obs, stds, SETUPS)
    # 40 targets through the same equations at random airmasses
    tx, tinst, ttrue, _, _ = simulate(rng, 1, n_std=40, airmasses=(1.2, 1.8), std_err=0.0)
    tobs, truth = night(0, tx, tinst, ttrue, err, 0.0, prefix="t")
    sp = apply_transformation(tobs, tr)
    t = sp.table
    assert len(t) == 40 and np.all(t["note"] == "")
    v_true = np.array([truth[s]["V_JC"][0] for s in t["star"]])
    b_true = np.array([truth[s]["B_JC"][0] for s in t["star"]])
    zv = (t["V_JC"] - v_true) / t["V_JC_err"]
    zbv = (t["B_JC-V_JC"] - (b_true - v_true)) / t["B_JC-V_JC_err"]
    assert np.all(np.abs(zv) < 4) and np.all(np.abs(zbv) < 4)
    # the shared coefficients make the stars' errors correlated: the mean offset of all 40 stars
    # is not 1/sqrt(40) of one star's error
    full = sp.covariance()
    iv = np.arange(40) * 2 + sp.bands.index("V_JC")
    sub = full[np.ix_(iv, iv)]
    mean_err = np.sqrt(sub.sum()) / 40
    assert mean_err > 1.5 * np.sqrt(np.diag(sub)).mean() / np.sqrt(40)
    assert np.allclose(np.diag(sub), t["V_JC_err"] ** 2)


def test_same_star_at_two_airmasses_same_standard_magnitude():
    # A star observed at X = 1.1 and X = 2.2 (two visits) must give one standard magnitude within
    # the errors of the difference, which shares the transformation (its extinction error counts
    # only through the airmass difference).
    rng = np.random.default_rng(9)
    x, inst, quoted, err, std_err = simulate(rng, 1, n_std=15)
    obs, stds = night(0, x, inst, quoted, err, std_err)
    tr = fit_transformation(obs, stds, SETUPS)
    n = 60
    v = rng.uniform(10, 13, n)
    bv = rng.uniform(0.0, 1.4, n)
    star, filt, mag, xx, visit = [], [], [], [], []
    for airmass, label in ((1.1, "low"), (2.2, "high")):
        for f, m0 in (("B", v + bv), ("V", v)):
            z, k, c, k2 = TRUE[f]
            star += [f"t{j}" for j in range(n)]
            filt += [f] * n
            xx += [airmass] * n
            visit += [label] * n
            mag += list(m0 + z + k * airmass + c * bv + k2 * airmass * bv + rng.normal(0, err, n))
    tobs = Observations.from_arrays(star, filt, mag, np.full(len(mag), err), xx, visit)
    sp = apply_transformation(tobs, tr)
    t = sp.table
    full = sp.covariance()
    nb = len(sp.bands)
    jv = sp.bands.index("V_JC")
    z = []
    for j in range(n):
        lo = np.flatnonzero((t["star"] == f"t{j}") & (t["visit"] == "low"))[0]
        hi = np.flatnonzero((t["star"] == f"t{j}") & (t["visit"] == "high"))[0]
        a, b = lo * nb + jv, hi * nb + jv
        var = full[a, a] + full[b, b] - 2 * full[a, b]
        z.append((t["V_JC"][lo] - t["V_JC"][hi]) / np.sqrt(var))
    z = np.array(z)
    assert np.all(np.abs(z) < 4)
    assert 0.6 < np.std(z) < 1.4  # errors of the difference are honest, neither inflated nor too small


def test_target_missing_a_filter_gets_nan_and_note():
    rng = np.random.default_rng(10)
    obs, stds = night(0, *simulate(rng, 1))
    tr = fit_transformation(obs, stds, SETUPS)
    tobs = Observations.from_arrays(["x1", "x2", "x2"], ["V", "V", "B"], [12.0, 12.0, 13.0], [0.01] * 3,
                                    [1.2] * 3)
    t = apply_transformation(tobs, tr).table
    assert len(t) == 2
    assert np.isnan(t["V_JC"][0]) and "no usable measurement for B_JC" in t["note"][0]
    assert np.isfinite(t["V_JC"][1])


def test_tables_and_airmass_from_time_and_position():
    # A star with dec = site latitude at its upper transit (local sidereal time = RA) is at the
    # zenith: airmass 1 (geometry; the site is the demo's invented one).
    from astropy import units as u
    from astropy.time import Time

    from stelltemp.observing.instrument import Site
    from stelltemp.observing.night import offline_iers

    site = Site(37.5, -3.2, 850.0, 2.5)
    t = Time("2026-11-08T22:00:00", scale="utc")
    with offline_iers():
        lst = t.sidereal_time("apparent", longitude=site.longitude_deg * u.deg).deg
    tab = Table({"star": ["a", "a"], "filter": ["V", "B"], "inst_mag": [10.0, 11.0], "inst_mag_err": [0.01, 0.01],
                 "time_utc": [t.isot, t.isot], "ra": [lst, (lst + 90) % 360], "dec": [37.5, 37.5]})
    obs = observations_from_table(tab, site=site)
    assert obs.airmass[0] == pytest.approx(1.0, abs=2e-3)
    assert obs.airmass[1] > 1.5
    with pytest.raises(StelltempError, match="needs the instrument file"):
        observations_from_table(tab)
    std = standards_from_table(Table({"star": ["a", "b"], "V_JC": [10.0, np.nan], "V_JC_err": [0.01, 0.02],
                                      "comment": ["x", "y"]}))
    assert std == {"a": {"V_JC": (10.0, 0.01)}, "b": {}}
    with pytest.raises(StelltempError, match="missing column"):
        observations_from_table(Table({"star": ["a"]}))


def test_transformation_file_round_trip(tmp_path):
    from stelltemp.reduction.store import read_transformation, write_transformation

    rng = np.random.default_rng(11)
    obs, stds = night(0, *simulate(rng, 1))
    tr = fit_transformation(obs, stds, SETUPS, provenance={"tool_version": "test", "observations": "x.csv"})
    path = tmp_path / "night.toml"
    write_transformation(tr, path)
    with pytest.raises(StelltempError, match="already exists"):
        write_transformation(tr, path)
    back = read_transformation(path)
    assert back.provenance["tool_version"] == "test"
    for f in tr.fits:
        assert back.fits[f].names == tr.fits[f].names
        assert np.array_equal(back.fits[f].values, tr.fits[f].values)
        assert np.array_equal(back.fits[f].covariance, tr.fits[f].covariance)
    a = apply_transformation(obs, tr).table
    b = apply_transformation(obs, back).table
    assert np.array_equal(a["V_JC"], b["V_JC"]) and np.array_equal(a["V_JC_err"], b["V_JC_err"])
    (tmp_path / "bad.toml").write_text('format = "something else"\n')
    with pytest.raises(StelltempError, match="not a stelltemp transformation"):
        read_transformation(tmp_path / "bad.toml")
