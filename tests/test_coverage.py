"""Coverage of the 68 % and 95 % intervals of teff_cal and t_bb on simulated stars.

The stars are drawn from the model itself, so the truth is known:

* calibrated temperatures: each star's intrinsic colours come from the
  empirical relations (Casagrande et al. 2010, A&A 512, A54, Table 4;
  Mucciarelli et al. 2021, A&A 653, A90), each relation off by a draw of
  its own published scatter; [Fe/H] known to ±0.1 dex;
* colour temperatures: magnitudes of a reddened blackbody through the
  passbands.

Both are reddened by E(B−V) from 0 to 1 (known to ±0.05 mag, or fitted
with that prior) and observed with magnitude errors of 0.01–0.03 mag.
For Gaussian errors a correct 68.27 % (95.45 % for ±1.96σ: 95.0 %) interval
holds the truth in that fraction of stars; with 2,000 stars the binomial
standard deviation of the fraction is 1.0 % (0.5 %), so the bands 66–70 %
and 94–96 % are about ±2σ.  Fixed seeds make the tests deterministic.
"""

import numpy as np
import pytest

from stelltemp import bandgrid as bg
from stelltemp.calibrations import get_relation
from stelltemp.engine import estimate

N_STARS = 2000
EBV_ERR = 0.05
FEH_ERR = 0.1
BANDS = ("B_JC", "V_JC", "Ic_JC", "H_2MASS", "Ks_2MASS", "BP_GDR3", "RP_GDR3")
#: independent colours of BANDS, each defining one band from another
RELATIONS = ("c10_bv", "c10_vi", "c10_vh", "c10_vk", "mbm21_bprp_dwarf")


def _inverse_relation(rel, teff, feh):
    """Intrinsic colour that the relation maps to ``teff`` (Newton from mid-range, per star)."""
    lo, hi = rel.colour_range
    x = np.full(teff.size, (lo + hi) / 2)
    for _ in range(30):
        t, _ = rel.teff(x, feh)
        x = np.clip(x + (teff - t) / rel.dteff_dcolour(x, feh), lo, hi)
    t, inside = rel.teff(x, feh)
    return np.where(inside & (np.abs(t - teff) < 0.01), x, np.nan)


def _redden(mags, t, ebv):
    lnt = np.log(t)
    return {k: v + bg.band_table(k).evaluate(lnt, ebv, want_de=False)[0]
            - bg.band_table(k).evaluate(lnt, np.zeros_like(ebv), want_de=False)[0]
            for k, v in mags.items()}


def _observe(rng, mags, ebv_true):
    errs = {k: rng.uniform(0.01, 0.03, N_STARS) for k in mags}
    obs = {k: v + errs[k] * rng.standard_normal(N_STARS) for k, v in mags.items()}
    ebv_given = ebv_true + EBV_ERR * rng.standard_normal(N_STARS)
    return obs, errs, ebv_given


@pytest.fixture(scope="module")
def calibrated_stars():
    return simulate_calibrated(20261202)


def simulate_calibrated(seed):
    """Stars whose colours come from the relations: (teff, mags, errs, E(B-V) given, [Fe/H] given)."""
    rng = np.random.default_rng(seed)
    teff = rng.uniform(4900.0, 6400.0, N_STARS)
    feh = rng.uniform(-0.6, 0.2, N_STARS)
    ebv = rng.uniform(0.0, 1.0, N_STARS)
    v = rng.uniform(8.0, 12.0, N_STARS)
    colour = {}
    for key in RELATIONS:
        rel = get_relation(key)
        colour[key] = _inverse_relation(rel, teff + rel.scatter * rng.standard_normal(N_STARS), feh)
    bp = v + rng.uniform(-0.1, 0.1, N_STARS)
    intrinsic = {"B_JC": v + colour["c10_bv"], "V_JC": v, "Ic_JC": v - colour["c10_vi"],
                 "H_2MASS": v - colour["c10_vh"], "Ks_2MASS": v - colour["c10_vk"],
                 "BP_GDR3": bp, "RP_GDR3": bp - colour["mbm21_bprp_dwarf"]}
    obs, errs, ebv_given = _observe(rng, _redden(intrinsic, teff, ebv), ebv)
    feh_obs = feh + FEH_ERR * rng.standard_normal(N_STARS)
    simulate_calibrated.truth = {"ebv": ebv, "feh": feh}
    return teff, obs, errs, ebv_given, feh_obs


@pytest.fixture(scope="module")
def blackbody_stars():
    return simulate_blackbodies(1202)


def simulate_blackbodies(seed):
    """Reddened blackbodies: (T, mags, errs, E(B-V) given)."""
    rng = np.random.default_rng(seed)
    t = np.exp(rng.uniform(np.log(3500.0), np.log(12000.0), N_STARS))
    ebv = rng.uniform(0.0, 1.0, N_STARS)
    lnt = np.log(t)
    mags = {k: bg.band_table(k).evaluate(lnt, ebv, want_de=False)[0] for k in BANDS}
    offset = rng.uniform(8.0, 12.0, N_STARS) - mags["V_JC"]  # V from 8 to 12 mag
    mags = {k: v + offset for k, v in mags.items()}
    obs, errs, ebv_given = _observe(rng, mags, ebv)
    return t, obs, errs, ebv_given


def _fractions(value, err, truth):
    z = np.abs(value - truth) / err
    ok = np.isfinite(z)
    return np.mean(z[ok] < 1.0), np.mean(z[ok] < 1.96), ok.mean()


@pytest.mark.parametrize("fit_ebv", [False, True], ids=["ebv_known", "ebv_fitted"])
def test_teff_cal_coverage(calibrated_stars, fit_ebv):
    teff, obs, errs, ebv_given, feh_obs = calibrated_stars
    res = estimate(obs, errs, ebv=ebv_given, ebv_err=EBV_ERR, fit_ebv=fit_ebv, feh=feh_obs,
                   feh_err=FEH_ERR)
    f68, f95, have = _fractions(res["teff_cal"].value, res["teff_cal_err"].value, teff)
    print(f"teff_cal fit_ebv={fit_ebv}: 68 % interval {f68:.4f}, 95 % interval {f95:.4f}")
    assert have > 0.97
    assert 0.66 <= f68 <= 0.70, f68
    assert 0.94 <= f95 <= 0.96, f95


@pytest.mark.parametrize("fit_ebv", [False, True], ids=["ebv_known", "ebv_fitted"])
def test_t_bb_coverage(blackbody_stars, fit_ebv):
    t, obs, errs, ebv_given = blackbody_stars
    res = estimate(obs, errs, ebv=ebv_given, ebv_err=EBV_ERR, fit_ebv=fit_ebv)
    lnt = np.log(res["t_bb"].value)
    sigma = np.log(res["t_bb_hi"].value / res["t_bb_lo"].value) / 2
    f68, f95, have = _fractions(lnt, sigma, np.log(t))
    print(f"t_bb fit_ebv={fit_ebv}: 68 % interval {f68:.4f}, 95 % interval {f95:.4f}")
    assert have > 0.99
    assert 0.66 <= f68 <= 0.70, f68
    assert 0.94 <= f95 <= 0.96, f95
