"""The fitted transformation as a file: a small TOML format of our own.

One file per night and instrument; every number has its unit in the key
name or in the ``units`` table, and the provenance says when, by which
version and from which inputs it was made::

    format = "stelltemp transformation 1"

    [provenance]
    written_utc = "2026-11-09T06:12:00"
    tool_version = "0.1.0"
    observations = "night.csv"          # with sha256 of each input file
    ...

    [[filter]]
    name = "V"
    band = "V_JC"                       # standard band it is transformed to
    colour = ["B_JC", "V_JC"]           # (blue, red) of the colour term
    coefficients = ["zero_point", "extinction", "colour_term"]
    units = ["mag", "mag / airmass", "mag / mag"]
    values = [1.497, 0.184, -0.044]
    errors = [0.007, 0.004, 0.003]
    covariance = [[...], [...], [...]]  # mag², in the order of 'coefficients'
    chi2 = 29.5
    dof = 42
    error_scale = 1.0
    rms_mag = 0.009
    n_used = 45
    rejected = [{ star = "s03", airmass = 1.52, reason = "..." }]

The reader checks the format line, the names and the shapes, and gives back
a :class:`~stelltemp.reduction.fit.Transformation` that
:func:`~stelltemp.reduction.apply.apply_transformation` accepts.
"""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import numpy as np

from ..cache import file_digest
from ..errors import StelltempError
from ..safeio import atomic_path
from .equations import PARAMETER_UNITS, PARAMETERS, BandSetup
from .fit import FilterFit, Transformation

__all__ = ["FORMAT", "transformation_text", "write_transformation", "read_transformation", "file_sha256"]

FORMAT = "stelltemp transformation 1"


#: hex SHA-256 of a file's bytes (for provenance): the one digest function of the package
file_sha256 = file_digest


def _value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        v = float(v)
        return repr(v) if math.isfinite(v) else ("nan" if math.isnan(v) else ("inf" if v > 0 else "-inf"))
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_value(x)}" for k, x in v.items()) + " }"
    if isinstance(v, (list, tuple, np.ndarray)):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def transformation_text(tr: Transformation) -> str:
    """The file's text for a transformation."""
    lines = ["# Photometric transformation to the standard system, written by stelltemp.",
             "# Equation (Harris, FitzGerald & Reed 1981, PASP 93, 507 form):",
             "#   inst_mag = M + zero_point + extinction*X + colour_term*C + colour_extinction*X*C",
             f"format = {_value(FORMAT)}", "", "[provenance]"]
    for k, v in tr.provenance.items():
        if isinstance(v, dict):
            continue
        lines.append(f"{k} = {_value(v if isinstance(v, (int, float, bool, list, tuple)) else str(v))}")
    for fit in tr.fits.values():
        s = fit.summary()
        lines += ["", "[[filter]]", f"name = {_value(fit.setup.filter)}", f"band = {_value(fit.setup.band)}",
                  f"colour = {_value(list(fit.setup.colour))}",
                  f"coefficients = {_value(list(fit.names))}",
                  f"units = {_value([PARAMETER_UNITS[PARAMETERS.index(n)] for n in fit.names])}",
                  f"values = {_value(list(fit.values))}", f"errors = {_value(list(fit.errors))}",
                  f"covariance = {_value([list(r) for r in fit.covariance])}",
                  f"chi2 = {_value(fit.chi2)}", f"dof = {_value(fit.dof)}",
                  f"error_scale = {_value(fit.error_scale)}", f"rms_mag = {_value(fit.rms)}",
                  f"n_used = {_value(fit.n_used)}", f"rejected = {_value(s['rejected'])}",
                  f"priors = {_value({k: list(v) for k, v in fit.priors.items()})}",
                  f"notes = {_value(list(fit.notes))}"]
    return "\n".join(lines) + "\n"


def write_transformation(tr: Transformation, path, replace=False):
    """Write the file atomically; an existing file is replaced only with ``replace=True``."""
    text = transformation_text(tr)
    try:
        with atomic_path(path, replace) as tmp:
            Path(tmp).write_text(text, encoding="utf-8")
    except OSError as exc:
        raise StelltempError(f"cannot write {path}: {exc.strerror or exc}") from None
    return str(path)


def read_transformation(path) -> Transformation:
    """Read a transformation file written by :func:`write_transformation`."""
    p = Path(path)
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except OSError as exc:
        raise StelltempError(f"cannot read {p}: {exc.strerror or exc}") from None
    except tomllib.TOMLDecodeError as exc:
        raise StelltempError(f"{p.name}: not valid TOML: {exc}") from None
    if data.get("format") != FORMAT:
        raise StelltempError(f"{p.name}: not a stelltemp transformation file (format line missing or different)")
    fits = {}
    for i, f in enumerate(data.get("filter", [])):
        where = f"{p.name}: [[filter]] #{i + 1}"
        try:
            names = tuple(f["coefficients"])
            values = np.asarray(f["values"], float)
            cov = np.asarray(f["covariance"], float)
            setup = BandSetup(str(f["name"]), str(f["band"]), tuple(f["colour"]), "colour_extinction" in names)
        except (KeyError, TypeError, ValueError) as exc:
            raise StelltempError(f"{where}: missing or malformed entry ({exc})") from None
        if names != PARAMETERS[: len(names)] or len(names) < 3:
            raise StelltempError(f"{where}: coefficients must be {', '.join(PARAMETERS[:3])} [, colour_extinction]")
        if values.shape != (len(names),) or cov.shape != (len(names),) * 2 or not np.all(np.isfinite(values)):
            raise StelltempError(f"{where}: values and covariance do not match the coefficients")
        rejected = f.get("rejected", [])
        points = {"star": np.array([r.get("star", "") for r in rejected], dtype=str),
                  "airmass": np.array([r.get("airmass", np.nan) for r in rejected], float),
                  "reason": np.array([r.get("reason", "") for r in rejected], dtype=str),
                  "kept": np.zeros(len(rejected), bool)}
        fit = FilterFit(setup, names, values, cov, float(f.get("chi2", np.nan)), int(f.get("dof", 0)),
                        float(f.get("error_scale", 1.0)), float(f.get("rms_mag", np.nan)), points,
                        {k: tuple(v) for k, v in f.get("priors", {}).items()}, list(f.get("notes", [])),
                        int(f.get("n_used", 0)))
        fits[setup.filter] = fit
    if not fits:
        raise StelltempError(f"{p.name}: no [[filter]] entries")
    prov = dict(data.get("provenance", {}))
    prov["read_from"] = str(p)
    return Transformation(fits, prov)
