"""Fitting the transformation equations to the night's standard stars.

Per filter, the equation of :mod:`stelltemp.reduction.equations` is fitted
by weighted least squares to every usable measurement of a standard star,
with the standard values' own errors carried as an effective variance
(σ² = σ_inst² + Σ_j a_j² σ_j², a_j the equation's slope on standard
magnitude j at the current coefficients), with one-at-a-time outlier
rejection (:mod:`stelltemp.reduction.wls`); measurements of the same
standard share its catalogue errors, so the fit is a generalised least
squares with that covariance, and optionally with Gaussian
priors on any coefficient (for example the extinction from the instrument
file, or a colour term predicted from the passbands,
:mod:`stelltemp.reduction.predict`).

When the fit's χ² per degree of freedom exceeds 1 the covariance is scaled
by it (the errors were too small for the scatter seen; common practice);
the factor is reported.  Filters are fitted independently, so coefficients
of different filters are uncorrelated here (the same standard-star error
entering two filters' fits is neglected in that covariance).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import StelltempError
from .equations import PARAMETER_UNITS, PARAMETERS, BandSetup, design_matrix, parameter_names
from .observations import Observations
from .wls import robust_fit

__all__ = ["FilterFit", "Transformation", "fit_filter", "fit_transformation",
           "MIN_AIRMASS_SPAN", "MIN_COLOUR_SPAN", "DEFAULT_CLIP"]

#: below this airmass range the extinction cannot be separated from the zero point
MIN_AIRMASS_SPAN = 0.1
#: below this colour range (mag) the colour term cannot be measured
MIN_COLOUR_SPAN = 0.2
#: rejection threshold, robust σ
DEFAULT_CLIP = 3.5


@dataclass
class FilterFit:
    """The fitted transformation of one filter.

    Attributes
    ----------
    setup : BandSetup
    names : tuple of str
        Coefficient names (``zero_point``, ``extinction``, ``colour_term``
        and optionally ``colour_extinction``).
    values : ndarray
        Coefficients (units in :data:`stelltemp.reduction.equations.PARAMETER_UNITS`).
    covariance : ndarray
        Their covariance (scaled by χ²/dof when that exceeds 1).
    chi2, dof : float, int
    error_scale : float
        √(χ²/dof) applied to the errors (1 when not applied).
    rms : float
        Unweighted rms of the kept residuals, mag.
    points : dict of arrays
        Per measurement of a standard: ``star``, ``airmass``, ``colour``,
        ``residual`` (mag), ``sigma`` (effective error, mag), ``z``,
        ``kept`` (bool), ``reason`` (why it was set aside, "" if kept).
    priors : dict
        Coefficient → (value, σ) used as priors.
    notes : list of str
    """

    setup: BandSetup
    names: tuple
    values: np.ndarray
    covariance: np.ndarray
    chi2: float
    dof: int
    error_scale: float
    rms: float
    points: dict
    priors: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    stored_n_used: int | None = None  # a fit read from a file keeps only its rejected points

    @property
    def errors(self):
        """1σ errors of the coefficients."""
        return np.sqrt(np.diag(self.covariance))

    def coefficient(self, name):
        """Value of one coefficient (0 for a term that was not fitted)."""
        return float(self.values[self.names.index(name)]) if name in self.names else 0.0

    @property
    def n_used(self):
        """Measurements the coefficients rest on."""
        return self.stored_n_used if self.stored_n_used is not None else int(np.sum(self.points["kept"]))

    @property
    def rejected(self):
        """[(star, airmass, reason)] of the measurements set aside."""
        p = self.points
        return [(str(s), float(x), str(r)) for s, x, r, k in zip(p["star"], p["airmass"], p["reason"], p["kept"])
                if not k]

    def summary(self):
        """Plain dict (for JSON and the transformation file)."""
        return {
            "filter": self.setup.filter, "band": self.setup.band, "colour": self.setup.colour_name,
            "coefficients": {n: float(v) for n, v in zip(self.names, self.values)},
            "errors": {n: float(e) for n, e in zip(self.names, self.errors)},
            "units": {n: PARAMETER_UNITS[PARAMETERS.index(n)] for n in self.names},
            "covariance": self.covariance.tolist(),
            "chi2": float(self.chi2), "dof": int(self.dof), "error_scale": float(self.error_scale),
            "rms_mag": float(self.rms), "n_used": self.n_used,
            "rejected": [{"star": s, "airmass": x, "reason": r} for s, x, r in self.rejected],
            "priors": {k: list(v) for k, v in self.priors.items()}, "notes": list(self.notes),
        }


@dataclass
class Transformation:
    """Fitted transformation of every filter, with what went into it."""

    fits: dict
    provenance: dict = field(default_factory=dict)

    @property
    def setups(self):
        return [f.setup for f in self.fits.values()]

    def parameter_vector(self):
        """All coefficients in one vector, the filters' blocks in order, and its block-diagonal covariance."""
        values = np.concatenate([f.values for f in self.fits.values()])
        cov = np.zeros((values.size, values.size))
        i = 0
        for f in self.fits.values():
            n = f.values.size
            cov[i:i + n, i:i + n] = f.covariance
            i += n
        return values, cov

    def summary(self):
        return {"provenance": dict(self.provenance), "filters": [f.summary() for f in self.fits.values()]}


def _standard_values(obs_star, standards, keys):
    """(n, len(keys)) magnitudes and errors of the standards (NaN where absent)."""
    m = np.full((len(obs_star), len(keys)), np.nan)
    e = np.full_like(m, np.nan)
    for i, s in enumerate(obs_star):
        entry = standards.get(s)
        if entry is None:
            continue
        for j, k in enumerate(keys):
            if k in entry:
                m[i, j], e[i, j] = entry[k]
    return m, e


def fit_filter(obs: Observations, standards: dict, setup: BandSetup, *, priors=None, clip=DEFAULT_CLIP,
               scale_errors=True) -> FilterFit:
    """Fit one filter's transformation to the standards among ``obs``.

    Parameters
    ----------
    obs : Observations
        All measurements; those of ``setup.filter`` on stars in ``standards`` are used.
    standards : dict
        {star: {passband key: (mag, err)}} (see
        :func:`stelltemp.reduction.observations.standards_from_table`).
    setup : BandSetup
    priors : dict, optional
        Coefficient name → (value, σ): a Gaussian prior on that coefficient.
    clip : float
        Outlier threshold in robust σ (``inf``: no rejection).
    scale_errors : bool
        Scale the covariance by χ²/dof when it exceeds 1.

    Returns
    -------
    FilterFit
    """
    from ..passbands import get_passband

    priors = dict(priors or {})
    names = parameter_names(setup)
    for k in priors:
        if k not in names:
            raise StelltempError(f"filter {setup.filter}: prior on unknown or unfitted coefficient '{k}' "
                                 f"(fitted: {', '.join(names)})")
        v, s = priors[k]
        if not (np.isfinite(v) and np.isfinite(s) and s > 0):
            raise StelltempError(f"filter {setup.filter}: prior on {k} needs a finite value and σ > 0")
    band, blue, red = (get_passband(k).key for k in (setup.band, *setup.colour))
    sel = np.flatnonzero((obs.filter == setup.filter) & np.isin(obs.star, list(standards)))
    if sel.size == 0:
        raise StelltempError(f"filter {setup.filter}: no measurements of standard stars")
    keys = [band, blue, red]
    m_std, e_std = _standard_values(obs.star[sel], standards, keys)
    e_std = np.where(np.isfinite(e_std) & (e_std >= 0), e_std, np.nan)
    usable = obs.usable()[sel]
    have = np.all(np.isfinite(m_std), axis=1) & np.all(np.isfinite(e_std), axis=1)
    reason = np.where(~usable, "unusable measurement (magnitude, error or airmass missing or impossible)", "")
    missing = ", ".join(keys)
    reason = np.where(usable & ~have, f"standard list lacks one of {missing}", reason)
    ok = usable & have
    x = obs.airmass[sel]
    colour = m_std[:, 1] - m_std[:, 2]
    y = obs.mag[sel] - m_std[:, 0]
    a = design_matrix(np.where(ok, x, 1.0), np.where(ok, colour, 0.0), setup.second_order)
    n_par = len(names)
    n_ok = int(np.sum(ok))
    dof_needed = n_par + 1 - len(priors)
    if n_ok < max(dof_needed, 1):
        raise StelltempError(f"filter {setup.filter}: {n_ok} usable standard measurements, need at least "
                             f"{max(dof_needed, 1)} for {n_par} coefficients and {len(priors)} priors")
    if np.ptp(x[ok]) < MIN_AIRMASS_SPAN and "extinction" not in priors:
        raise StelltempError(f"filter {setup.filter}: standards span only {np.ptp(x[ok]):.2f} in airmass "
                             f"(need {MIN_AIRMASS_SPAN}); give a prior on the extinction (e.g. the instrument file's)")
    if np.ptp(colour[ok]) < MIN_COLOUR_SPAN and "colour_term" not in priors:
        raise StelltempError(f"filter {setup.filter}: standards span only {np.ptp(colour[ok]):.2f} mag in "
                             f"{setup.colour_name} (need {MIN_COLOUR_SPAN}); give a prior on the colour term "
                             "(e.g. the predicted one)")

    # effective variance: ∂(residual)/∂M is −1 for the band, −s for blue, +s for red (s = c + k''X);
    # a band that is also a colour band collects both.  Measurements of the same standard share its
    # errors: their covariance is Σ_k d_ik d_jk σ_k² (generalised least squares).
    err_of = {k: np.nan_to_num(e_std[:, j]) for j, k in enumerate(keys)}
    var_inst = obs.err[sel] ** 2
    same_star = obs.star[sel][:, None] == obs.star[sel][None, :]

    def variance_real(beta):
        s = np.zeros(sel.size) if beta is None else beta[2] + (beta[3] * x if setup.second_order else 0.0)
        d = dict.fromkeys(keys, 0.0)
        d[band] = d[band] + 1.0
        d[blue] = d[blue] + s
        d[red] = d[red] - s
        shared = sum(np.outer(d[k] * err_of[k], d[k] * err_of[k]) for k in d)
        return np.diag(var_inst) + np.where(same_star, shared, 0.0)

    prior_names = list(priors)
    pa = np.zeros((len(prior_names), n_par))
    for i, k in enumerate(prior_names):
        pa[i, names.index(k)] = 1.0
    py = np.array([priors[k][0] for k in prior_names], float)
    pv = np.array([priors[k][1] for k in prior_names], float) ** 2
    design = np.vstack([a, pa])
    yy = np.concatenate([np.where(ok, y, 0.0), py])
    use = np.concatenate([ok, np.ones(len(prior_names), bool)])
    protect = np.concatenate([np.zeros(sel.size, bool), np.ones(len(prior_names), bool)])

    n_real = sel.size

    def variance(beta):
        v = np.zeros((n_real + len(pv),) * 2)
        v[:n_real, :n_real] = variance_real(beta)
        v[n_real:, n_real:] = np.diag(pv)
        return v

    res = robust_fit(design, yy, variance, use, protect=protect, clip=clip,
                     min_left=n_par + 2 - len(prior_names))
    kept = res["use"][: sel.size]
    z = res["z"][: sel.size]
    rejected = res["rejected"][: sel.size]
    reason = np.where(rejected, [f"residual {zz:+.1f} sigma beyond {clip:g} x robust scale {res['scale']:.2f}"
                                 for zz in z], reason)
    chi2 = float(res["chi2"])  # includes the prior rows, which count as points in dof too
    dof = int(np.sum(kept)) + len(prior_names) - n_par
    notes = []
    cov = res["cov"]
    scale = 1.0
    if scale_errors and dof > 0 and chi2 / dof > 1.0:
        scale = float(np.sqrt(chi2 / dof))
        cov = cov * scale**2
        notes.append(f"errors scaled by sqrt(chi2/dof) = {scale:.2f}")
    if dof <= 0:
        notes.append("no degrees of freedom left: the errors rest on the stated measurement errors only")
    resid = res["residual"][: sel.size]
    rms = float(np.sqrt(np.mean(resid[kept] ** 2))) if np.any(kept) else float("nan")
    points = {"star": obs.star[sel], "airmass": x, "colour": colour, "residual": np.where(ok, resid, np.nan),
              "sigma": res["sigma"][: sel.size], "z": np.where(ok, z, np.nan), "kept": kept,
              "reason": reason.astype(str), "index": sel}
    return FilterFit(setup, tuple(names), res["beta"], cov, chi2, dof, scale, rms, points, priors, notes)


def fit_transformation(obs: Observations, standards: dict, setups, *, priors=None, clip=DEFAULT_CLIP,
                       scale_errors=True, provenance=None, fallback=None) -> Transformation:
    """Fit every filter in ``setups`` (see :func:`fit_filter`).

    Parameters
    ----------
    priors : dict, optional
        Filter name → {coefficient: (value, σ)}.
    fallback : dict, optional
        Filter name → {coefficient: (value, σ)}: priors used only when the
        filter cannot be fitted without them (too few standards, too narrow
        a range of colour or airmass); the fit's notes say so.

    Returns
    -------
    Transformation

    Examples
    --------
    Four invented standards at two airmasses, noiseless, V with z = 1.5,
    k' = 0.2 and c = −0.04 in B−V:

    >>> import numpy as np
    >>> from stelltemp.reduction import Observations, default_setups
    >>> bv = {"a": 0.0, "b": 0.5, "c": 1.0, "d": 1.5}
    >>> stds = {s: {"V_JC": (10.0, 0.01), "B_JC": (10.0 + c, 0.01)} for s, c in bv.items()}
    >>> rows = [(s, f, x) for s in bv for f in "BV" for x in (1.0, 2.0)]
    >>> mag = [10.0 + (bv[s] if f == "B" else 0) + 1.5 + 0.2 * x + (0.05 if f == "B" else -0.04) * bv[s]
    ...        for s, f, x in rows]
    >>> obs = Observations.from_arrays([r[0] for r in rows], [r[1] for r in rows], mag, 0.01,
    ...                                [r[2] for r in rows])
    >>> tr = fit_transformation(obs, stds, default_setups({"B": "B_JC", "V": "V_JC"}))
    >>> np.round(tr.fits["V"].values, 4).tolist()
    [1.5, 0.2, -0.04]
    """
    priors = priors or {}
    unknown = set(priors) - {s.filter for s in setups}
    if unknown:
        raise StelltempError(f"priors for filters not being fitted: {', '.join(sorted(unknown))}")
    fallback = fallback or {}
    fits = {}
    for s in setups:
        given = dict(priors.get(s.filter) or {})
        try:
            fits[s.filter] = fit_filter(obs, standards, s, priors=given, clip=clip, scale_errors=scale_errors)
        except StelltempError as exc:
            extra = {k: v for k, v in (fallback.get(s.filter) or {}).items() if k not in given}
            if not extra:
                raise
            fits[s.filter] = fit_filter(obs, standards, s, priors={**given, **extra}, clip=clip,
                                        scale_errors=scale_errors)
            fits[s.filter].notes.append(f"fallback priors on {', '.join(extra)} used because: {exc}")
    prov = {"method": "generalised least squares, Harris, FitzGerald & Reed (1981, PASP 93, 507) form",
            "clip_sigma": clip, "error_scaling": "chi2/dof when > 1" if scale_errors else "none",
            "airmass": obs.airmass_source}
    prov.update(provenance or {})
    return Transformation(fits, prov)
