"""Benchmark of the night plan of the README example; prints one JSON object.

Times (min and median of ``--runs`` runs, one process, so ratios are like
for like):

* ``plan_night`` of ``catalogs_demo/targets.csv`` with the demo CCD on
  2026-11-08 (the README's ``nightplan`` example, without start-up and
  printing);
* the spectral shapes of its targets with one temperature-engine call for
  the whole list (`stelltemp.observing.anchor.star_spectra`, as the plan
  does) and with one call per target (as it did before), and their ratio.

Usage: ``python tests/benchmarks/bench_nightplan.py [--runs 3] [--date YYYY-MM-DD]``.
"""

import argparse
import json
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _timing import min_median  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]


def _times(fn, runs):
    t = min_median(fn, runs)
    return {"min_s": round(t["min"], 3), "median_s": round(t["median"], 3)}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--date", default="2026-11-08")
    args = ap.parse_args()

    from stelltemp.observing import anchor, plan
    from stelltemp.observing.instrument import load_instrument

    rig = load_instrument(ROOT / "catalogs_demo" / "instruments" / "quillmere_04m_ccd.toml")
    targets = plan.read_targets(ROOT / "catalogs_demo" / "targets.csv")
    plan.plan_night(rig, targets, args.date, snr=50.0)  # warm caches (passbands, IERS tables, grids)
    good = [t for t in targets if not t["error"]]
    phots = [anchor.clean_photometry(plan.target_photometry(rig, t)) for t in good]
    shape_args = (phots, [t["teff"] for t in good], [t["ebv"] for t in good], [t["ebv_err"] for t in good])

    whole = _times(lambda: plan.plan_night(rig, targets, args.date, snr=50.0), args.runs)
    joint = _times(lambda: anchor.star_spectra(*shape_args), args.runs)
    each = _times(lambda: [anchor.star_spectrum(*a) for a in zip(*shape_args)], args.runs)
    print(json.dumps({
        "targets": len(targets), "date": args.date, "runs": args.runs,
        "plan_night": whole,
        "spectra_one_engine_call": joint,
        "spectra_one_call_per_target": each,
        "speedup_min": round(each["min_s"] / joint["min_s"], 2),
    }, indent=2))


if __name__ == "__main__":
    main()
