"""``stelltemp tour``: the whole job once, on the invented demo scenario.

One command for a newcomer.  It reads ``catalogs_demo/`` (an invented
teaching observatory, 40 field stars and a 20-star cluster; see its
README) and, in a fresh output folder:

1. runs the catalogue engine over ``targets.csv`` → ``temperatures.ecsv``
   (blackbody colour temperatures with 68 % intervals, flags, derived
   quantities, calibrated T_eff where a relation applies);
2. compares the calibrated effective temperatures (``teff_cal``) with the
   generating values in ``truth.csv`` (the demo stars have the colours of
   real stars, so the empirical relations should recover them within their
   errors) and reports how far the blackbody colour temperature ``t_bb``
   lies from T_eff — it is a colour temperature, not T_eff;
3. draws the catalogue's colour–temperature diagram, blackbody colours
   against temperature with the calibrated relations, one star's fit and
   its spectrum under the passbands;
4. plans the night in the scenario with the demo instrument: best window,
   airmass and the exposure per filter for the S/N goal (``plan.ecsv``),
   an altitude/airmass chart and S/N against exposure time for one star;
5. reduces the scenario's invented night of instrumental photometry
   (``night_observations.csv``, ``night_standards.csv``) to the standard
   system: transformation fitted from the standards
   (``night_transformation.toml``, residual figure), targets' standard
   magnitudes (``night_targets.ecsv``) checked against ``night_truth.csv``;
6. prints a short summary (with any Sun-safety warning of the observing
   module) and the paths.

With two or more usable cores the figures are drawn by a second process
while the next step computes (`stelltemp.sidecar`): the same files, in
about three quarters of the time.

The demo folder sits at the top of the source tree (``catalogs_demo/``);
the build copies the same files into the package (``stelltemp/demo_scenario``,
see ``setup.py``), so an installed copy runs the tour from any directory.
It is looked for in the current directory, then in the installed package,
then beside the package in a source checkout.
"""

from __future__ import annotations

import json
import math
import sys
import tomllib
from pathlib import Path

import numpy as np

from .errors import StelltempError
from .jsonable import json_ready, table_ready
from .safeio import atomic_path, save_table
from .sidecar import Sidecar

__all__ = ["run_tour", "find_demo_dir", "load_scenario", "DEMO_DIRNAME", "SCENARIO_FILE"]

DEMO_DIRNAME = "catalogs_demo"
#: the demo's copy inside an installed package (made by setup.py at build time)
PACKAGED_DEMO = "demo_scenario"
SCENARIO_FILE = "scenario.toml"
DEFAULT_OUT = "tour_output"
#: passbands drawn under the showcase star's spectrum and in the blackbody-colour figure
SPECTRUM_BANDS = ("B_JC", "V_JC", "Rc_JC", "Ic_JC", "J_2MASS", "H_2MASS", "Ks_2MASS")
COLOUR_BANDS = ("B_JC", "V_JC", "Ic_JC", "Ks_2MASS")
#: targets drawn in the altitude chart besides the showcase star (more would crowd the legend)
CHART_TARGETS = 5

_SCENARIO_KEYS = {"title": str, "date": str, "instrument": str, "targets": str, "truth": str,
                  "extinction_law": str, "r_v": (int, float), "snr_goal": (int, float), "showcase_star": str}


# ------------------------------------------------------------------- inputs
def find_demo_dir(explicit=None):
    """The demo folder: ``explicit`` if given, else ./catalogs_demo, the installed copy or the source tree's.

    Raises
    ------
    StelltempError
        One line naming the places searched.
    """
    if explicit is not None:
        candidates = [Path(explicit)]
    else:
        here = Path(__file__).resolve().parent
        candidates = [Path.cwd() / DEMO_DIRNAME, here / PACKAGED_DEMO, here.parent / DEMO_DIRNAME]
    for c in candidates:
        if (c / SCENARIO_FILE).is_file():
            return c
    places = " and ".join(str(c) for c in dict.fromkeys(candidates))
    raise StelltempError(f"demo data not found (no {SCENARIO_FILE} in {places}); "
                         "reinstall stelltemp (the package ships the demo) or give a source checkout's folder")


def load_scenario(demo_dir):
    """Read and check ``scenario.toml``; file entries become absolute paths."""
    demo_dir = Path(demo_dir)
    path = demo_dir / SCENARIO_FILE
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError) as exc:
        raise StelltempError(f"cannot read {path}: {exc}") from None
    for key, kind in _SCENARIO_KEYS.items():
        if key not in doc:
            raise StelltempError(f"{path}: missing '{key}'")
        if not isinstance(doc[key], kind) or isinstance(doc[key], bool):
            raise StelltempError(f"{path}: '{key}' has the wrong type")
    for key in ("instrument", "targets", "truth"):
        doc[key] = demo_dir / doc[key]
    for key in ("instrument", "targets"):
        if not doc[key].is_file():
            raise StelltempError(f"demo file missing: {doc[key]}")
    return doc


def prepare_output(out_dir, replace=False):
    """Create the output folder; refuse a non-empty one unless ``replace``."""
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise StelltempError(f"output path {out} exists and is not a folder")
    if out.is_dir() and any(out.iterdir()) and not replace:
        raise StelltempError(f"output folder {out} is not empty; give another with --out or allow reuse with --replace")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise StelltempError(f"cannot create output folder {out}: {exc.strerror or exc}") from None
    return out


def _read_csv(path):
    from .catalog.tableio import read_table

    return read_table(path)  # the one table reader; its errors are one line naming the file


def _floats(col):
    data = getattr(col, "value", col)
    return np.ma.filled(np.ma.asarray(data, dtype=float), np.nan)


# --------------------------------------------------------------- the checks
def truth_comparison(results, truth):
    """How far each calibrated T_eff lies from the generating one, in its own error.

    The demo stars have the colours of real stars (published relations and an
    intrinsic-colour sequence, see ``catalogs_demo/README.md``), so the
    calibrated ``teff_cal`` is the temperature to compare with ``t_true``.
    ``t_bb`` is a blackbody colour temperature, not an effective temperature:
    its offset from ``t_true`` is reported as what it is, not as an error.

    Returns
    -------
    dict
        ``column`` (``teff_cal``), ``compared`` (stars with a calibrated
        T_eff and a truth row), ``median_abs_z``, ``within_1sigma`` and
        ``within_3sigma`` (fractions of |teff_cal − t_true| / teff_cal_err),
        ``worst`` (name and z of the largest deviation), and for the
        blackbody colour temperature ``t_bb_compared``,
        ``t_bb_median_offset_K`` (median T_bb − T_true) and
        ``t_bb_median_abs_fraction`` (median |T_bb − T_true| / T_true).
    """
    true_t = {str(n): float(t) for n, t in zip(truth["name"], truth["t_true"])}
    names = [str(n) for n in results["name"]]
    tt = np.array([true_t.get(n, np.nan) for n in names])
    t = _floats(results["teff_cal"])
    err = _floats(results["teff_cal_err"])
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.abs(t - tt) / err
    ok = np.isfinite(z) & (err > 0)
    out = {"column": "teff_cal", "compared": int(ok.sum())}
    if ok.any():
        worst = int(np.nanargmax(np.where(ok, z, -np.inf)))
        out.update({"median_abs_z": float(np.median(z[ok])), "within_1sigma": float(np.mean(z[ok] <= 1)),
                    "within_3sigma": float(np.mean(z[ok] <= 3)),
                    "worst": {"name": names[worst], "z": float(z[worst])}})
    t_bb = _floats(results["t_bb"])
    bb = np.isfinite(t_bb) & np.isfinite(tt)
    out["t_bb_compared"] = int(bb.sum())
    if bb.any():
        out["t_bb_median_offset_K"] = float(np.median(t_bb[bb] - tt[bb]))
        out["t_bb_median_abs_fraction"] = float(np.median(np.abs(t_bb[bb] - tt[bb]) / tt[bb]))
    return out


def _showcase_fit(row, bands, law, rv):
    """Engine result (one-row QTable) and typed magnitudes of one star, as in the catalogue run."""
    from .engine import estimate

    typed, mags, errs = [], {}, {}
    for b in bands:
        m = float(_floats(row[b]))
        e = float(_floats(row[b + "_err"])) if b + "_err" in row.colnames else math.nan
        if math.isfinite(m) and abs(m) < 40:
            typed.append((b, m, e if math.isfinite(e) else None))
            mags[b] = [m]
            if math.isfinite(e):
                errs[b] = [e]
    opts = {k: float(_floats(row[k])) for k in ("ebv", "ebv_err", "parallax", "parallax_err", "feh")
            if k in row.colnames}
    table = estimate(mags, errs, law=law, rv=rv, **opts)
    return table, typed


def _separation_deg(ra1, dec1, ra2, dec2):
    """Angle between two directions on the sky (all in degrees), haversine form."""
    p1, p2 = math.radians(dec1), math.radians(dec2)
    h = math.sin((p2 - p1) / 2) ** 2 + math.cos(p1) * math.cos(p2) * math.sin(math.radians(ra2 - ra1) / 2) ** 2
    return math.degrees(2 * math.asin(min(1.0, math.sqrt(h))))


def _chart_subset(plan, showcase, skip=(), n_extra=CHART_TARGETS):
    """Names for the altitude chart: the showcase star and others spread through the night.

    ``skip`` names stars to leave out (the showcase's cluster companions
    share its track and would hide it).
    """
    seen, order = set(skip), []
    for r in plan:
        name = str(r["target"])
        if name in seen or name == showcase or not str(r["best_time"]):
            continue
        seen.add(name)
        order.append((str(r["best_time"]), name))
    order.sort()
    if len(order) > n_extra:
        idx = np.linspace(0, len(order) - 1, n_extra).round().astype(int)
        order = [order[i] for i in idx]
    return [showcase] + [n for _, n in order]


# -------------------------------------------------------------------- tour
def run_tour(out_dir=DEFAULT_OUT, *, replace=False, demo_dir=None, quiet=False, stream=None):
    """Run the whole demo: temperatures, figures and the night plan.

    Parameters
    ----------
    out_dir : path-like
        Output folder (created; must be empty unless ``replace``).
    replace : bool
        Allow a non-empty output folder; files of the same name are replaced.
    demo_dir : path-like, optional
        The demo folder (default: found by :func:`find_demo_dir`).
    quiet : bool
        Print nothing.
    stream : file, optional
        Where the summary goes (default stdout).

    Returns
    -------
    dict
        Counts, the comparison with the truth, plan facts, Sun warnings and
        the ``files`` written (name → path); also written as ``summary.json``.
    """
    demo = find_demo_dir(demo_dir)
    sc = load_scenario(demo)
    out = prepare_output(out_dir, replace)
    with Sidecar() as side:  # figures drawn on a second core while the next step computes
        summary = _tour_steps(demo, sc, out, side)
    if not quiet:
        print_summary(summary, stream or sys.stdout)
    return summary


def _tour_steps(demo, sc, out, side):
    """The steps of `run_tour` (figures through ``side``, a `Sidecar`); returns the summary."""
    from astropy.table import Table

    from . import plots
    from .catalog import run_catalogue
    from .engine import BLACKBODY_NOTE
    from .engine import flags as fl
    from .observing.figures import plot_night, plot_snr_curves
    from .observing.instrument import load_instrument
    from .observing.plan import night_tracks, parse_targets, plan_night, plan_target, target_photometry

    law, rv, snr = sc["extinction_law"], float(sc["r_v"]), float(sc["snr_goal"])
    files = {}

    # 1. temperatures for every row, written as a table file
    files["temperatures"] = str(out / "temperatures.ecsv")
    run = run_catalogue(sc["targets"], files["temperatures"], law=law, rv=rv, overwrite=True, quiet=True)
    results = Table.read(files["temperatures"], format="ascii.ecsv")
    targets = _read_csv(sc["targets"])
    t_bb = _floats(results["t_bb"])
    flags = np.asarray(results["flags"], dtype=np.int64)
    unsolved = [(str(n), fl.describe(f)) for n, t, f in zip(results["name"], t_bb, flags) if not math.isfinite(t)]

    # 2. against the generating values
    truth = None
    if Path(sc["truth"]).is_file():
        truth = truth_comparison(results, _read_csv(sc["truth"]))

    # 3. figures of the run and of one star
    star = sc["showcase_star"]
    rows = [i for i, n in enumerate(targets["name"]) if str(n) == star]
    if not rows:
        raise StelltempError(f"showcase star {star} is not in {sc['targets']}")
    star_row = targets[rows[0]]
    files["catalogue_figure"] = str(out / "catalogue_diagram.png")
    side.run(plots.plot_catalogue_results, results, files["catalogue_figure"], law=law, rv=rv, replace=True)
    files["colour_figure"] = str(out / "blackbody_colours.png")
    side.run(plots.plot_colour_temperature, list(COLOUR_BANDS), files["colour_figure"], law=law, rv=rv, replace=True)
    bands = [b for b in results.meta.get("passbands", "").split(",") if b] or \
        [c for c in targets.colnames if c in SPECTRUM_BANDS]
    fit_table, typed = _showcase_fit(star_row, bands, law, rv)
    files["fit_figure"] = str(out / f"fit_{star}.png")
    side.run(plots.plot_star_fit, fit_table, typed, files["fit_figure"], law=law, rv=rv, replace=True)
    star_t = float(fit_table["t_bb"][0].value)
    star_ebv = float(fit_table["ebv_used"][0].value) if "ebv_used" in fit_table.colnames else 0.0
    fitted = [k for k, m, _ in typed if m is not None and math.isfinite(float(m))]  # the bands of the fit
    files["spectrum_figure"] = str(out / f"spectrum_{star}.png")
    side.run(plots.plot_spectrum_with_passbands, star_t, fitted or list(SPECTRUM_BANDS), files["spectrum_figure"],
             replace=True, ebv=star_ebv if math.isfinite(star_ebv) else 0.0, law=law, rv=rv)

    # 4. the night plan
    instrument = load_instrument(sc["instrument"])
    # counts from each star's own photometry: every filter's rate anchored to the star's measured magnitude
    # in that band, with the engine's blackbody temperature and the E(B−V) it used for the colour terms
    ebv_used = _floats(results["ebv_used"])
    plan_in = targets.copy(copy_data=True)
    plan_in["teff"] = np.where(np.isfinite(t_bb), np.round(t_bb, 0), np.nan)
    if "ebv" in plan_in.colnames:
        plan_in["ebv"] = np.where(np.isfinite(ebv_used), ebv_used, _floats(plan_in["ebv"]))
    plan_targets = parse_targets(plan_in)
    plan = plan_night(instrument, plan_targets, sc["date"], snr=snr)
    by_name = {t["name"]: t for t in plan_targets}
    saved = plan.copy(copy_data=True)
    saved.meta = table_ready(plan)["meta"]
    saved.meta["note"] = ("count rates anchored to each star's measured magnitude in every filter's band, colour "
                          "terms from its blackbody (T_bb from the temperature run) reddened by its E(B-V); "
                          "invented demo data")
    files["plan"] = str(out / "plan.ecsv")
    save_table(saved, files["plan"], "ascii.ecsv", replace=True)
    centre = by_name[star]
    companions = {t["name"] for t in plan_targets if not t["error"] and  # they share the showcase's track
                  _separation_deg(centre["ra_deg"], centre["dec_deg"], t["ra_deg"], t["dec_deg"]) < 1.0}
    chart_names = _chart_subset(plan, star, skip=companions)
    tracks = night_tracks(instrument, [by_name[n] for n in chart_names if n in by_name], sc["date"])
    reason = (f"the showcase star {star} (its {len(companions)} cluster companions share its track) and "
              f"{len(chart_names) - 1} others spread through the night by best time") if companions else \
        f"the showcase star {star} and {len(chart_names) - 1} others spread through the night by best time"
    files["night_figure"] = str(out / "night_altitude.png")
    side.run(plot_night, tracks, files["night_figure"], plan.meta["min_altitude_deg"], replace=True, plan=plan,
             chosen=chart_names, reason=reason)
    star_plan = plan[plan["target"] == star]
    airmass = float(np.nanmin(np.asarray(star_plan["min_airmass"], float))) if len(star_plan) else 1.0
    p = by_name[star]
    one = plan_target(instrument, teff=p["teff"], photometry=target_photometry(instrument, p), ebv=p["ebv"], snr=snr,
                      airmass=airmass if math.isfinite(airmass) else 1.0, name=star)
    files["snr_figure"] = str(out / f"snr_{star}.png")
    side.run(plot_snr_curves, one, files["snr_figure"], replace=True)

    # 5. the night's reduction to the standard system (when the demo has the night's files)
    reduction = _reduction_step(demo, out, sc["instrument"], files)

    exposure = np.asarray(plan["exposure"], float)
    summary = {
        "scenario": sc["title"],
        "date": sc["date"],
        "demo_dir": str(demo),
        "stars": int(run.rows),
        "solved": int(run.successes),
        "calibrated": int(np.isfinite(_floats(results["teff_cal"])).sum()),
        "without_temperature": [{"name": n, "flags": f} for n, f in unsolved],
        "truth": truth,
        "plan": {"rows": len(plan), "targets": len(set(plan["target"])), "filters": list(instrument.filters),
                 "snr_goal": snr, "dark_start_utc": plan.meta.get("dark_start"),
                 "dark_end_utc": plan.meta.get("dark_end"),
                 "rows_with_exposure": int(np.count_nonzero(np.isfinite(exposure) & (exposure > 0))),
                 "rows_not_ok_saturation": int(np.count_nonzero(np.asarray(plan["saturation"]) != "ok")),
                 "rows_with_advice": int(np.count_nonzero(np.char.str_len(np.asarray(plan["advice"], str)) > 0))},
        "sun_warnings": list(plan.meta.get("sun_warnings", [])),
        "reduction": reduction,
        "note": BLACKBODY_NOTE,
        "files": {k: str(v) for k, v in files.items()},
    }
    files["summary"] = str(out / "summary.json")
    summary["files"]["summary"] = files["summary"]
    side.finish()  # every figure written before the summary that lists them
    with atomic_path(files["summary"], overwrite=True) as tmp:
        tmp.write_text(json.dumps(json_ready(summary), indent=1, ensure_ascii=False) + "\n", encoding="utf-8")
    return summary


#: the invented night of instrumental photometry (catalogs_demo/make_night.py)
NIGHT_FILES = {"observations": "night_observations.csv", "standards": "night_standards.csv",
               "truth": "night_truth.csv"}


def _reduction_step(demo, out, instrument, files):
    """Fit the demo night's transformation, transform its targets, compare with the truth (or None)."""
    from .catalog.tableio import read_table
    from .reduction.workflow import standardise_night

    paths = {k: Path(demo) / v for k, v in NIGHT_FILES.items()}
    if not (paths["observations"].is_file() and paths["standards"].is_file()):
        return None
    for key, name in (("transformation", "night_transformation.toml"), ("night_targets", "night_targets.ecsv"),
                      ("residual_figure", "night_residuals.png")):
        files[key] = str(out / name)
    s = standardise_night(paths["observations"], paths["standards"], instrument, files["transformation"],
                          targets_out=files["night_targets"], plot_out=files["residual_figure"], replace=True,
                          second_order={"B"})
    fits = [{"filter": f["filter"], "band": f["band"], "colour": f["colour"],
             "colour_term": f["coefficients"]["colour_term"], "colour_term_err": f["errors"]["colour_term"],
             "rms_mag": f["rms_mag"], "n_used": f["n_used"], "rejected": len(f["rejected"])}
            for f in s["transformation"]["filters"]]
    predicted = {r["filter"]: r["predicted"] for r in s["comparison_with_prediction"]
                 if r["coefficient"] == "colour_term"}
    for f in fits:
        f["colour_term_predicted"] = predicted.get(f["filter"])
    result = {"filters": fits, "targets": s["targets"]["rows"], "notes": s["notes"]}
    if paths["truth"].is_file():
        t = read_table(files["night_targets"])
        truth = read_table(paths["truth"])
        z = []
        for band in [f["band"] for f in fits]:
            true = {str(n): float(v) for n, v in zip(truth["star"], truth[f"{band}_true"])}
            z += [(float(m) - true[str(n)]) / float(e) for n, m, e in zip(t["star"], t[band], t[f"{band}_err"])
                  if str(n) in true]
        z = np.abs(np.array(z))
        result["truth"] = {"compared": int(z.size), "within_1sigma": float(np.mean(z < 1)),
                           "within_3sigma": float(np.mean(z < 3))}
    return result


_FILE_NOTES = {
    "temperatures": "temperature, 68 % interval and flags for every star",
    "catalogue_figure": "colour temperature against observed B−V, warning flags ringed, blackbody curves at the stars' E(B−V)",
    "colour_figure": "blackbody colours against temperature, with calibrated relations",
    "fit_figure": "one star's magnitudes with the fitted reddened blackbody",
    "spectrum_figure": "that star's blackbody, reddened and not, under the passbands, Wien peak marked",
    "plan": "best window, airmass and exposure per target and filter",
    "night_figure": "what to observe when: each target's window by best time, altitudes of a chosen few, the Moon",
    "snr_figure": "S/N against exposure time per filter for one star, goal and non-linearity marked",
    "transformation": "the night's fitted transformation (coefficients, covariance, provenance)",
    "night_targets": "the night's targets in standard magnitudes, with covariance",
    "residual_figure": "standard-star residuals against colour and airmass",
    "summary": "this summary as JSON",
}


def print_summary(s, stream):
    """The tour's closing report, a dozen lines."""
    w = lambda text="": print(text, file=stream)  # noqa: E731
    w(f"stelltemp tour: {s['scenario']}, evening of {s['date']}")
    w("  (every star, number and name in the demo is invented)")
    w(f"temperatures  {s['stars']} stars read, {s['solved']} with a blackbody colour temperature, "
      f"{s.get('calibrated', 0)} with a calibrated T_eff")
    for miss in s["without_temperature"]:
        w(f"              no temperature for {miss['name']} (flags: {miss['flags'] or 'none'})")
    tr = s["truth"]
    if tr and tr.get("compared"):
        w(f"              calibrated T_eff against the invented truth: median |teff_cal - T_true|/sigma = "
          f"{tr['median_abs_z']:.2f}; {tr['within_1sigma']:.0%} within 1 sigma, "
          f"{tr['within_3sigma']:.0%} within 3 sigma ({tr['compared']} stars)")
    if tr and tr.get("t_bb_compared"):
        w(f"              T_bb is a blackbody colour temperature, not T_eff: it lies a median "
          f"{tr['t_bb_median_offset_K']:+.0f} K ({tr['t_bb_median_abs_fraction']:.1%} in size) from T_true")
    p = s["plan"]
    w(f"night plan    {p['rows']} rows: {p['targets']} targets x {len(p['filters'])} filters "
      f"({', '.join(p['filters'])}) for S/N {p['snr_goal']:g}; "
      f"{p['rows_with_exposure']} with an exposure time")
    if p["dark_start_utc"]:
        w(f"              dark from {p['dark_start_utc'][11:16]} to {p['dark_end_utc'][11:16]} UTC; "
          f"{p['rows_not_ok_saturation']} row(s) near saturation, {p['rows_with_advice']} with advice "
          "(see plan.ecsv)")
    red = s.get("reduction")
    if red:
        terms = ", ".join(f"{f['filter']} {f['colour_term']:+.3f}±{f['colour_term_err']:.3f}"
                          + (f" (pred. {f['colour_term_predicted']:+.3f})" if f["colour_term_predicted"] is not None
                             else "") for f in red["filters"])
        w(f"reduction     colour terms {terms}")
        line = f"              {red['targets']} target visits on the standard system"
        if red.get("truth"):
            line += (f"; against the invented truth {red['truth']['within_1sigma']:.0%} within 1 sigma, "
                     f"{red['truth']['within_3sigma']:.0%} within 3 sigma")
        w(line)
    if s["sun_warnings"]:
        for warning in s["sun_warnings"]:
            w(f"Sun           {warning}")
    else:
        w("Sun           no planned time in daylight or twilight and no target near the Sun")
    import textwrap

    w(textwrap.fill(s["note"], width=100, initial_indent="note          ", subsequent_indent=" " * 14))
    w("files")
    for key, path in s["files"].items():
        w(f"  {path:42s} {_FILE_NOTES.get(key, '')}")
    w("next          stelltemp catalogue YOUR_TABLE.csv -o results.ecsv   "
      f"(columns named as in {Path(s['demo_dir']) / 'targets.csv'})")


# --------------------------------------------------------------------- CLI
