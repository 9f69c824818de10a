"""One night's reduction from files: fit, write the transformation, transform the targets.

This is the API behind the ``standardise`` subcommand; every check of the
outputs happens before any work starts (no file is replaced without
``replace=True``, none is half-written: :mod:`stelltemp.safeio`).
"""

from __future__ import annotations

import datetime as _dt
from pathlib import Path

import numpy as np

from ..errors import StelltempError

__all__ = ["standardise_night", "apply_stored_transformation", "PREDICTED_MODES", "EXTINCTION_PRIOR_SIGMA"]

PREDICTED_MODES = ("check", "fallback", "prior", "off")
#: width (mag per airmass) given to the instrument file's extinction when used as a prior
EXTINCTION_PRIOR_SIGMA = 0.05


def _check_outputs(outputs, replace, inputs):
    from ..catalog.tableio import check_output

    seen = {}
    for label, path in outputs.items():
        if path is None:
            continue
        p = Path(path)
        key = p.resolve()
        if key in seen:
            raise StelltempError(f"{path}: given both as {seen[key]} and as {label}")
        seen[key] = label
        if key in {Path(i).resolve() for i in inputs}:
            raise StelltempError(f"{path}: the {label} output would replace an input")
        if label in ("targets", "temperatures"):
            check_output(p, replace)
        else:
            if p.exists() and not replace:
                raise StelltempError(f"{p}: already exists (allow replacing it explicitly)")
            if not (p.parent if str(p.parent) else Path(".")).is_dir():
                raise StelltempError(f"{p.parent}: no such folder")


def _setups(instrument, filters_seen, second_order):
    from .equations import default_setups

    names = [n for n in instrument.filters if n in filters_seen]
    unknown = sorted(set(filters_seen) - set(instrument.filters))
    if unknown:
        raise StelltempError(f"observations use filter(s) {', '.join(unknown)} that the instrument file "
                             f"does not describe (has: {', '.join(instrument.filters)})")
    if second_order == "all":
        so = True
    else:
        so = set(second_order or ())
        bad = so - set(names)
        if bad:
            raise StelltempError(f"--second-order names filter(s) not observed: {', '.join(sorted(bad))}")
    return default_setups({n: instrument.filters[n].passband.key for n in names}, second_order=so)


def standardise_night(observations, standards, instrument, fit_out, *, targets_out=None, temperatures_out=None,
                      plot_out=None, replace=False, second_order=(), clip=None, predicted="check",
                      extinction_prior=False, ebv=None, ebv_err=None, law=None, rv=None, progress=None):
    """Fit the night's transformation and apply it to the targets, writing files.

    Parameters
    ----------
    observations, standards, instrument : path-like
        The measurement table (:mod:`stelltemp.reduction.observations`), the
        standard-star list and the instrument file.
    fit_out : path-like
        Transformation file to write (:mod:`stelltemp.reduction.store`).
    targets_out, temperatures_out, plot_out : path-like, optional
        Standard photometry of the targets (every star not in the standard
        list), the temperature engine's results for them, and the residual
        figure.
    second_order : "all" or collection of filter names
        Filters that get the colour-dependent extinction term.
    clip : float, optional
        Rejection threshold, robust σ (default 3.5).
    predicted : {"check", "fallback", "prior", "off"}
        Compute the colour terms expected from the passbands and compare
        ("check"); also use them as priors where a filter cannot be fitted
        without ("fallback"), or for every filter ("prior"); or skip.
    extinction_prior : bool
        Use the instrument file's extinction coefficients as priors (±0.05 mag per airmass).
    ebv, ebv_err, law, rv : optional
        Reddening for the temperature run (as in :func:`stelltemp.catalog.estimate_table`;
        default E(B−V) = 0, G23, R_V = 3.1).
    progress : callable, optional
        Called with a short text at each step.

    Returns
    -------
    dict
        Summary (coefficients, rejected measurements, comparison with the
        prediction, files written, notes).
    """
    from .. import __version__
    from ..catalog.tableio import read_table
    from ..observing.instrument import load_instrument
    from .fit import DEFAULT_CLIP, fit_transformation
    from .observations import observations_from_table, standards_from_table
    from .store import file_sha256, write_transformation

    say = progress or (lambda text: None)
    if predicted not in PREDICTED_MODES:
        raise StelltempError(f"predicted must be one of {', '.join(PREDICTED_MODES)}, got {predicted!r}")
    clip = DEFAULT_CLIP if clip is None else float(clip)
    if not clip > 0:
        raise StelltempError("the rejection threshold must be > 0 sigma")
    inputs = [observations, standards, instrument]
    for p in inputs:
        if not Path(p).is_file():
            raise StelltempError(f"{p}: no such file")
    _check_outputs({"transformation": fit_out, "targets": targets_out, "temperatures": temperatures_out,
                    "figure": plot_out}, replace, inputs)

    say("reading the instrument, the observations and the standards")
    inst = load_instrument(instrument)
    obs = observations_from_table(read_table(observations), site=inst.site, what=Path(observations).name)
    stds = standards_from_table(read_table(standards), what=Path(standards).name)
    setups = _setups(inst, set(obs.filter), second_order)
    notes = []
    predictions = None
    if predicted != "off":
        say("predicting colour terms from the instrument's passbands")
        from .predict import predict_colour_terms

        predictions = predict_colour_terms(inst, setups)
    priors, fallback = {}, {}
    for s in setups:
        if predicted == "fallback":
            fallback[s.filter] = {"colour_term": predictions[s.filter].prior()}
        pr = {}
        if extinction_prior:
            k = inst.filters[s.filter].extinction_mag_per_airmass
            pr["extinction"] = (k, EXTINCTION_PRIOR_SIGMA)
            notes.append(f"{s.filter}: extinction prior {k:g} ± {EXTINCTION_PRIOR_SIGMA:g} mag/airmass "
                         "from the instrument file")
        if predicted == "prior":
            pr["colour_term"] = predictions[s.filter].prior()
            notes.append(f"{s.filter}: colour-term prior {pr['colour_term'][0]:+.4f} ± {pr['colour_term'][1]:.4f} "
                         "predicted from the passbands")
        if pr:
            priors[s.filter] = pr
    now = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    prov = {"written_utc": now, "tool_version": __version__, "observations": str(observations),
            "observations_sha256": file_sha256(observations), "standards": str(standards),
            "standards_sha256": file_sha256(standards), "instrument": str(instrument),
            "instrument_sha256": file_sha256(instrument), "instrument_title": inst.title}
    say("fitting the transformation")
    tr = fit_transformation(obs, stds, setups, priors=priors, clip=clip, provenance=prov, fallback=fallback)
    comparison = []
    if predictions is not None:
        from .predict import compare_with_prediction

        comparison = compare_with_prediction(tr, predictions)
        for row in comparison:
            if abs(row["difference_sigma"]) > 3:
                notes.append(f"{row['filter']}: fitted {row['coefficient']} {row['fitted']:+.4f} ± {row['error']:.4f} "
                             f"differs from the predicted {row['predicted']:+.4f} by {row['difference_sigma']:+.1f} sigma")
    written = {"transformation": write_transformation(tr, fit_out, replace)}

    targets = sorted(set(obs.star) - set(stds))
    summary_targets = None
    if targets_out or temperatures_out:
        if not targets:
            raise StelltempError("no targets: every star in the observations is in the standard list")
        reddening = {"ebv": ebv, "ebv_err": ebv_err, "law": law, "rv": rv}
        summary_targets = _transform_targets(obs, tr, targets, targets_out, temperatures_out, replace, reddening,
                                             notes, written, say, {"transformation": str(fit_out),
                                                                   "provenance": "stelltemp standardise " + now})
    if plot_out:
        from .figures import plot_fit_residuals

        written["figure"] = plot_fit_residuals(tr, plot_out, replace=replace, predictions=predictions)
    for f in tr.fits.values():
        notes.extend(f"{f.setup.filter}: {n}" for n in f.notes)
    return {"transformation": tr.summary(), "comparison_with_prediction": comparison,
            "predicted": {k: v.summary() for k, v in (predictions or {}).items()},
            "targets": summary_targets, "written": written, "notes": notes}


def _transform_targets(obs, tr, targets, targets_out, temperatures_out, replace, reddening, notes, written, say,
                       meta):
    """Apply ``tr`` to ``targets``, write their table and optionally their temperatures; a summary dict."""
    from ..catalog.tableio import write_table
    from .apply import apply_transformation

    say(f"transforming {len(targets)} target(s)")
    sp = apply_transformation(obs, tr, stars=targets)
    table = sp.table
    table.meta.update(meta)
    summary = {"rows": len(table), "without_result": int(np.sum(table["note"] != ""))}
    if targets_out:
        out = table
        if Path(targets_out).suffix.lower() not in (".ecsv", ".fits", ".fit"):
            out = table.copy()
            out.remove_column("cov")
            notes.append("the targets' band-by-band covariance is kept only in ECSV or FITS files")
        written["targets"] = write_table(out, targets_out, overwrite=replace) or str(targets_out)
    if temperatures_out:
        say("running the temperature engine")
        from ..catalog import estimate_table

        eng_in = table[["star", "visit"] + [c for b in sp.bands for c in (b, f"{b}_err")]]
        red = {k: v for k, v in reddening.items() if v is not None}
        res = estimate_table(eng_in, **red)
        res.meta["note_reduction"] = table.meta["errors"]
        written["temperatures"] = write_table(res, temperatures_out, overwrite=replace) or str(temperatures_out)
        summary["t_bb_median_K"] = float(np.nanmedian(np.asarray(res["t_bb"], float)))
    return summary


def apply_stored_transformation(observations, transformation, instrument, *, targets_out=None,
                                temperatures_out=None, replace=False, ebv=None, ebv_err=None, law=None, rv=None,
                                progress=None):
    """Standard magnitudes of every star in ``observations`` from a transformation file.

    For a night without its own standards, or to re-apply a fit: the file
    (:mod:`stelltemp.reduction.store`) gives the coefficients and their
    covariance; the instrument file gives the site for airmasses computed
    from time and position.  Outputs as in :func:`standardise_night`.

    Returns
    -------
    dict
        ``transformation`` (as read), ``targets``, ``written``, ``notes``.
    """
    from ..catalog.tableio import read_table
    from ..observing.instrument import load_instrument
    from .observations import observations_from_table
    from .store import read_transformation

    say = progress or (lambda text: None)
    if not (targets_out or temperatures_out):
        raise StelltempError("nothing to write: give the targets or temperatures output")
    inputs = [observations, transformation, instrument]
    for p in inputs:
        if not Path(p).is_file():
            raise StelltempError(f"{p}: no such file")
    _check_outputs({"targets": targets_out, "temperatures": temperatures_out}, replace, inputs)
    say("reading the transformation, the instrument and the observations")
    tr = read_transformation(transformation)
    inst = load_instrument(instrument)
    obs = observations_from_table(read_table(observations), site=inst.site, what=Path(observations).name)
    missing = sorted(set(tr.fits) - set(obs.filter))
    notes = [f"no measurements in filter(s) {', '.join(missing)} of the transformation"] if missing else []
    other = sorted(set(obs.filter) - set(tr.fits))
    if other:
        notes.append(f"filter(s) {', '.join(other)} not in the transformation: their measurements are ignored")
    written = {}
    now = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    summary = _transform_targets(obs, tr, sorted(set(obs.star)), targets_out, temperatures_out, replace,
                                 {"ebv": ebv, "ebv_err": ebv_err, "law": law, "rv": rv}, notes, written, say,
                                 {"transformation": str(transformation),
                                  "provenance": "stelltemp standardise (stored transformation) " + now})
    return {"transformation": tr.summary(), "comparison_with_prediction": [], "predicted": {},
            "targets": summary, "written": written, "notes": notes}
