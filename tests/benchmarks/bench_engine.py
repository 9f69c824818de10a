"""Benchmark of the temperature engine; prints one JSON object.

Figures (one core, this machine, one run so ratios are like for like):

* 1,000,000 single-colour inversions (B−V) with per-star E(B−V);
* a 5-band multi-band fit of 100,000 stars;
* the naive approach on a small sample: one synphot Observation per band
  per trial temperature, reddened with the same law, and scipy's brentq
  (colour) or Nelder–Mead (fit) — the per-star time ratio is printed.

Goals (the project's): inversion ≤ 0.5 s, fit ≤ 5 s, both ≥ 10,000× faster
per star than the naive approach.  Usage: ``python tests/benchmarks/bench_engine.py
[--stars N] [--fit-stars N] [--naive N]``.
"""

import argparse
import json
import os
import time

import numpy as np

os.environ.setdefault("OMP_NUM_THREADS", "1")  # one core, as the goal says


def naive_colour_temperature(colour, ebv, blue_bp, red_bp, vega, extinction):
    """One synphot Observation per band per trial temperature, brentq on T."""
    from scipy.optimize import brentq
    from synphot import Observation, SourceSpectrum, units
    from synphot.models import BlackBody1D

    def synth(t):
        sp = SourceSpectrum(BlackBody1D, temperature=t) * extinction(ebv)
        mags = []
        for bp in (blue_bp, red_bp):
            obs = Observation(sp, bp, force="extrap")
            mags.append(obs.effstim(units.VEGAMAG, vegaspec=vega).value)
        return mags[0] - mags[1]

    return brentq(lambda t: synth(t) - colour, 2000, 50000, xtol=1e-3)


def naive_fit(mags, keys_bp, ebv, vega, extinction):
    """Nelder–Mead over (log T, offset), one synphot Observation per band per trial."""
    from scipy.optimize import minimize
    from synphot import Observation, SourceSpectrum, units
    from synphot.exceptions import DisjointError
    from synphot.models import BlackBody1D

    def chi2(p):
        t = 10 ** p[0]
        if not 3.0 < p[0] < 5.0:
            return 1e30
        sp = SourceSpectrum(BlackBody1D, temperature=t) * extinction(ebv)
        try:
            model = np.array([Observation(sp, bp, force="extrap").effstim(units.VEGAMAG, vegaspec=vega).value
                              for bp in keys_bp])
        except DisjointError:  # synphot's blackbody wave set moves with T
            return 1e30
        r = mags - model
        r = r - r.mean()
        return float(np.sum(r * r))

    return minimize(chi2, [3.7, 0.0], method="Nelder-Mead", options={"xatol": 1e-5, "fatol": 1e-10})


def synphot_setup(keys):
    from astropy import units as u
    from dust_extinction.parameter_averages import G23
    from synphot import ReddeningLaw, SourceSpectrum, SpectralElement
    from synphot.models import Empirical1D

    from stelltemp.passbands import get_passband
    from stelltemp.reference import vega_spectrum

    w, f = vega_spectrum()
    vega = SourceSpectrum(Empirical1D, points=w, lookup_table=f * u.erg / u.s / u.cm**2 / u.AA)
    bps = []
    for k in keys:
        pb = get_passband(k)
        grid = pb.integration_grid
        bps.append(SpectralElement(Empirical1D, points=grid, lookup_table=pb.photon_response_at(grid)))
    lam = np.linspace(2500, 30000, 5000)
    k_lam = G23(Rv=3.1)(lam * u.AA)

    def extinction(ebv):
        return ReddeningLaw(Empirical1D, points=lam, lookup_table=np.asarray(k_lam) * 3.1).extinction_curve(
            ebv) if ebv else 1.0

    return bps, vega, extinction


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--stars", type=int, default=1_000_000)
    ap.add_argument("--fit-stars", type=int, default=100_000)
    ap.add_argument("--naive", type=int, default=3, help="stars for the naive timing")
    args = ap.parse_args()

    import warnings

    from astropy import log

    warnings.filterwarnings("ignore")
    log.setLevel("ERROR")  # synphot's notes about extrapolating the naive spectra
    from stelltemp import bandgrid as bg
    from stelltemp.engine.colour import invert_colour
    from stelltemp.engine.fit import fit_blackbody

    rng = np.random.default_rng(1)
    out = {"machine_cores": os.cpu_count()}

    # --- single colour
    n = args.stars
    t = np.exp(rng.uniform(np.log(2500), np.log(40000), n))
    e = rng.uniform(0, 2, n)
    colour = bg.colour_table("B_JC", "V_JC").evaluate(np.log(t), e, want_de=False)[0]
    invert_colour(colour[:100], "B_JC", "V_JC", e[:100])  # tables built outside the timing
    t0 = time.perf_counter()
    t_back, _, _ = invert_colour(colour, "B_JC", "V_JC", e)
    dt_inv = time.perf_counter() - t0
    out["colour_inversions"] = n
    out["colour_inversion_seconds"] = round(dt_inv, 4)
    out["colour_inversion_goal_seconds"] = 0.5
    out["colour_round_trip_max_rel_error"] = float(np.max(np.abs(t_back / t - 1)))

    # --- 5-band fit
    keys = ["B_JC", "V_JC", "Ic_JC", "J_2MASS", "Ks_2MASS"]
    m = args.fit_stars
    tf = np.exp(rng.uniform(np.log(3000), np.log(30000), m))
    ef = rng.uniform(0, 1, m)
    mags = np.stack([bg.band_table(k).evaluate(np.log(tf), ef, want_de=False)[0] for k in keys], 1)
    mags += rng.normal(0, 0.02, mags.shape) + rng.uniform(5, 15, (m, 1))
    errs = np.full_like(mags, 0.02)
    fit_blackbody(mags[:100], errs[:100], keys, ef[:100])
    t0 = time.perf_counter()
    fit_blackbody(mags, errs, keys, ef)
    dt_fit = time.perf_counter() - t0
    out["fit_stars"] = m
    out["fit_bands"] = len(keys)
    out["fit_seconds"] = round(dt_fit, 4)
    out["fit_goal_seconds"] = 5.0

    # --- naive, small sample
    bps, vega, extinction = synphot_setup(["B_JC", "V_JC"])
    k = args.naive
    t0 = time.perf_counter()
    for i in range(k):
        naive_colour_temperature(colour[i], e[i], bps[0], bps[1], vega, extinction)
    naive_colour = (time.perf_counter() - t0) / k
    bps5, vega, extinction = synphot_setup(keys)
    t0 = time.perf_counter()
    for i in range(max(1, k // 3)):
        naive_fit(mags[i], bps5, ef[i], vega, extinction)
    naive_fit_time = (time.perf_counter() - t0) / max(1, k // 3)
    out["naive_seconds_per_colour_star"] = round(naive_colour, 4)
    out["naive_seconds_per_fit_star"] = round(naive_fit_time, 4)
    out["speedup_colour_per_star"] = round(naive_colour / (dt_inv / n))
    out["speedup_fit_per_star"] = round(naive_fit_time / (dt_fit / m))
    out["speedup_goal"] = 10000
    print(json.dumps(out, indent=2))


if __name__ == "__main__":
    main()
