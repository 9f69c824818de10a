"""Benchmark: fitting a night's transformation and applying it to many targets.

Invented nights made from the transformation equation (two filters B, V;
12 standards at three airmasses; k'' in B), as in tests/test_reduction_fit.py.
Times (repeated, min and median in seconds):

* ``fit_night_s``: one night's fit (both filters, GLS with rejection);
* ``apply_per_1000_targets_s``: standard magnitudes and covariance of 1000
  targets (two measurements each);
* ``coverage_200_nights_s``: the 200-night coverage check end to end, and the
  coverage it measured.

Prints one JSON object.  Goals on 2 cores: a night's fit under 0.05 s;
1000 targets under 1 s.

    python tests/benchmarks/bench_reduction.py [--repeat N]
"""

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from test_reduction_fit import SETUPS, TRUE, night, simulate  # noqa: E402

from stelltemp.reduction import Observations, apply_transformation, fit_transformation  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _timing import min_median as _times  # noqa: E402


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    rng = np.random.default_rng(1)
    sim = simulate(rng, 1)
    obs, stds = night(0, *sim)
    fit_transformation(obs, stds, SETUPS)  # warm-up
    tr = fit_transformation(obs, stds, SETUPS)
    n = 1000
    v = rng.uniform(10, 13, n)
    bv = rng.uniform(0, 1.4, n)
    star, filt, mag, x = [], [], [], []
    for f, m0 in (("B", v + bv), ("V", v)):
        z, k, c, k2 = TRUE[f]
        star += [f"t{j}" for j in range(n)]
        filt += [f] * n
        x += [1.3] * n
        mag += list(m0 + z + k * 1.3 + c * bv + k2 * 1.3 * bv)
    tobs = Observations.from_arrays(star, filt, mag, 0.01, x)

    def coverage():
        rng2 = np.random.default_rng(20261108)
        s = simulate(rng2, 200)
        hits = []
        for i in range(200):
            o, st = night(i, *s)
            for f, fit in fit_transformation(o, st, SETUPS).fits.items():
                hits.append(np.abs(fit.values - np.array(TRUE[f][: len(fit.names)])) < fit.errors)
        return float(np.mean(np.concatenate(hits)))

    t0 = time.perf_counter()
    frac = coverage()
    cov_time = time.perf_counter() - t0
    result = {
        "fit_night_s": _times(lambda: fit_transformation(obs, stds, SETUPS), args.repeat),
        "apply_per_1000_targets_s": _times(lambda: apply_transformation(tobs, tr), max(1, args.repeat // 2)),
        "coverage_200_nights_s": cov_time,
        "coverage_68_fraction": frac,
        "goals": {"fit_night_s": 0.05, "apply_per_1000_targets_s": 1.0},
    }
    print(json.dumps(result, indent=1))


if __name__ == "__main__":
    main()
