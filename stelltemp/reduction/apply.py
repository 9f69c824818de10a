"""Standard magnitudes and colours of targets from a fitted transformation.

Each measurement i of a star, in filter f at airmass X_i, gives one linear
equation in the star's unknown standard magnitudes M (the equation of
:mod:`stelltemp.reduction.equations` turned round)::

    m_i − z_f − k'_f X_i = M_f + (c_f + k''_f X_i) (M_blue − M_red)

All of a star's measurements (or those of one visit) are solved together by
weighted least squares, so the colour in every colour term is the star's own
standard colour, found at the same time, and repeated measurements or
several airmasses are combined.  The covariance of the result is the
photometric part (AᵀWA)⁻¹ plus the transformation's part J Σ_p Jᵀ, with J
the derivative of M with respect to all fitted coefficients (first order)
and Σ_p their covariance.  Because every star shares the same
coefficients, the results of different stars are correlated:
:meth:`StandardPhotometry.covariance` gives the full matrix.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from astropy.table import Table

from ..errors import StelltempError
from .fit import Transformation
from .observations import Observations

__all__ = ["StandardPhotometry", "apply_transformation"]


@dataclass
class StandardPhotometry:
    """Targets on the standard system.

    Attributes
    ----------
    table : astropy.table.Table
        One row per star (and visit): ``star``, ``visit``, for each standard
        band its magnitude and ``<key>_err`` (mag, all errors included), each
        colour of the colour terms and its error, ``n_meas``, ``chi2``,
        ``dof`` of the star's own solution, ``cov`` (band × band covariance,
        mag²) and ``note``.
    bands : list of str
        Passband keys, in the order of the covariance blocks.
    jacobians : list of ndarray
        Per row, ∂M/∂p (bands × coefficients; NaN rows for a failed star).
    parameter_covariance : ndarray
        Σ_p of the coefficients.
    """

    table: Table
    bands: list
    jacobians: list
    parameter_covariance: np.ndarray
    photometric_covariance: list

    def covariance(self):
        """Full covariance (mag²) of all rows' magnitudes, rows × bands flattened (row-major).

        Diagonal blocks are each row's ``cov``; off-diagonal blocks come
        from the shared coefficients, J_a Σ_p J_bᵀ.
        """
        nb = len(self.bands)
        jac = np.concatenate(self.jacobians, axis=0) if self.jacobians else np.zeros((0, 0))
        full = jac @ self.parameter_covariance @ jac.T
        for i, c in enumerate(self.photometric_covariance):
            full[i * nb:(i + 1) * nb, i * nb:(i + 1) * nb] += c
        return full


def _groups(obs: Observations, stars):
    keys = {}
    for i, (s, v) in enumerate(zip(obs.star, obs.visit)):
        if stars is not None and s not in stars:
            continue
        keys.setdefault((s, v), []).append(i)
    return keys


def apply_transformation(obs: Observations, transformation: Transformation, stars=None) -> StandardPhotometry:
    """Standard magnitudes, colours and their covariance for the stars in ``obs``.

    Parameters
    ----------
    obs : Observations
        Measurements in the transformation's filters; other filters are ignored.
    transformation : Transformation
        From :func:`stelltemp.reduction.fit.fit_transformation` (or read from a file).
    stars : collection of str, optional
        Only these stars (default: every star in ``obs``).

    Returns
    -------
    StandardPhotometry
        A row per star and visit; a star whose measurements cannot fix all
        bands gets NaN and a note (rows in = rows out per star and visit).
    """
    fits = transformation.fits
    setups = [f.setup for f in fits.values()]
    bands = list(dict.fromkeys(s.band for s in setups))
    for s in setups:
        for k in s.colour:
            if k not in bands:
                raise StelltempError(f"filter {s.filter}: colour band {k} is not the standard band of any "
                                     f"fitted filter ({', '.join(bands)})")
    nb = len(bands)
    pvec, pcov = transformation.parameter_vector()
    offset, i = {}, 0
    for name, f in fits.items():
        offset[name] = i
        i += f.values.size
    usable = obs.usable()
    groups = _groups(obs, None if stars is None else set(stars))
    colours = list(dict.fromkeys(s.colour for s in setups))
    rows = {"star": [], "visit": [], "n_meas": [], "chi2": [], "dof": [], "note": []}
    mags, covs, jacs, phots = [], [], [], []
    for (star, visit), idx in groups.items():
        idx = [j for j in idx if obs.filter[j] in fits]
        good = [j for j in idx if usable[j]]
        note = []
        if len(good) < len(idx):
            note.append(f"{len(idx) - len(good)} unusable measurement(s) set aside")
        have = {fits[obs.filter[j]].setup.band for j in good}
        missing = [b for b in bands if b not in have]
        m, cov, jac, phot, chi2, dof = (np.full(nb, np.nan), np.full((nb, nb), np.nan),
                                        np.full((nb, pvec.size), np.nan), np.full((nb, nb), np.nan),
                                        np.nan, 0)
        if missing:
            note.append(f"no usable measurement for {', '.join(missing)}: no standard magnitudes")
        else:
            m, cov, jac, phot, chi2, dof = _solve_star(obs, good, fits, bands, offset, pvec.size, pcov)
            if not np.all(np.isfinite(m)):
                note.append("singular system: no standard magnitudes")
        rows["star"].append(star)
        rows["visit"].append(visit)
        rows["n_meas"].append(len(good))
        rows["chi2"].append(chi2)
        rows["dof"].append(dof)
        rows["note"].append("; ".join(note))
        mags.append(m)
        covs.append(cov)
        jacs.append(jac)
        phots.append(phot)
    n = len(mags)
    mags = np.array(mags).reshape(n, nb)
    covs = np.array(covs).reshape(n, nb, nb)
    t = Table()
    t["star"] = np.array(rows["star"], dtype=str)
    t["visit"] = np.array(rows["visit"], dtype=str)
    for j, b in enumerate(bands):
        t[b] = mags[:, j]
        t[b].unit = "mag"
        t[f"{b}_err"] = np.sqrt(covs[:, j, j])
        t[f"{b}_err"].unit = "mag"
    for blue, red in colours:
        jb, jr = bands.index(blue), bands.index(red)
        name = f"{blue}-{red}"
        t[name] = mags[:, jb] - mags[:, jr]
        t[name].unit = "mag"
        t[f"{name}_err"] = np.sqrt(covs[:, jb, jb] + covs[:, jr, jr] - 2 * covs[:, jb, jr])
        t[f"{name}_err"].unit = "mag"
    t["n_meas"] = np.array(rows["n_meas"], int)
    t["chi2"] = np.array(rows["chi2"], float)
    t["dof"] = np.array(rows["dof"], int)
    t["cov"] = covs
    t["cov"].unit = "mag2"
    t["note"] = np.array(rows["note"], dtype=str)
    t.meta["bands"] = bands
    t.meta["cov_order"] = ",".join(bands)
    t.meta["errors"] = ("each error includes the transformation's coefficient errors; rows share them, so "
                        "results of different stars are correlated (the engine treats bands as independent)")
    return StandardPhotometry(t, bands, jacs, pcov, phots)


def _solve_star(obs, idx, fits, bands, offset, n_par, pcov):
    nb = len(bands)
    pos = {b: j for j, b in enumerate(bands)}
    n = len(idx)
    a = np.zeros((n, nb))
    y = np.zeros(n)
    w = np.zeros(n)
    dcol = []  # per measurement: (filter, X)
    for r, j in enumerate(idx):
        f = fits[obs.filter[j]]
        s = f.setup
        x = obs.airmass[j]
        slope = f.coefficient("colour_term") + f.coefficient("colour_extinction") * x
        a[r, pos[s.band]] += 1.0
        a[r, pos[s.colour[0]]] += slope
        a[r, pos[s.colour[1]]] -= slope
        y[r] = obs.mag[j] - f.coefficient("zero_point") - f.coefficient("extinction") * x
        w[r] = 1.0 / obs.err[j] ** 2
        dcol.append((f, x))
    normal = a.T @ (a * w[:, None])
    if n < nb or np.linalg.matrix_rank(normal) < nb:
        nan = np.full(nb, np.nan)
        return nan, np.full((nb, nb), np.nan), np.full((nb, n_par), np.nan), np.full((nb, nb), np.nan), np.nan, 0
    g = np.linalg.inv(normal)
    m = g @ (a.T @ (w * y))
    r = y - a @ m
    chi2 = float(np.sum(w * r * r))
    # ∂(y − A M)/∂p at fixed M, per measurement
    d = np.zeros((n, n_par))
    for row, (f, x) in enumerate(dcol):
        o = offset[f.setup.filter]
        colour = m[pos[f.setup.colour[0]]] - m[pos[f.setup.colour[1]]]
        partial = {"zero_point": -1.0, "extinction": -x, "colour_term": -colour, "colour_extinction": -x * colour}
        for k, name in enumerate(f.names):
            d[row, o + k] = partial[name]
    jac = g @ (a.T * w) @ d
    cov = g + jac @ pcov @ jac.T
    return m, cov, jac, g, chi2, n - nb
