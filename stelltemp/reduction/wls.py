"""Weighted linear least squares with one-at-a-time outlier rejection, batched.

Every array may carry leading batch axes (many independent fits at once,
e.g. simulated nights); a point is removed from a fit by giving it zero
weight, so all fits in a batch keep one shape.

Rejection (common practice for standard-star solutions): after each fit the
point with the largest normalised residual |r|/σ is rejected if it exceeds
``clip`` times a robust scale, the normalised median absolute deviation of
all normalised residuals (1.4826 × MAD; never below 1, so well-behaved data
are clipped at ``clip`` σ); then the fit is repeated, until no point
qualifies or only ``min_left`` points are left.
"""

from __future__ import annotations

import numpy as np

__all__ = ["solve", "robust_fit", "MAD_TO_SIGMA"]

#: σ of a Gaussian over its median absolute deviation
MAD_TO_SIGMA = 1.4826


def solve(design, y, var, use):
    """Weighted least squares of ``y`` on the columns of ``design``.

    Parameters
    ----------
    design : ndarray, shape (..., n, p)
        Data and their variances (> 0 where used).
    use : ndarray of bool, shape (..., n)
        Points taking part in the fit.

    Returns
    -------
    beta : ndarray (..., p)
    cov : ndarray (..., p, p)
        Covariance of ``beta`` from the stated variances (not rescaled).
    chi2 : ndarray (...)
    dof : ndarray (...)
        Used points minus parameters.

    Examples
    --------
    >>> import numpy as np
    >>> a = np.array([[1.0, 0.0], [1.0, 1.0], [1.0, 2.0]])
    >>> beta, cov, chi2, dof = solve(a, np.array([1.0, 3.0, 5.0]), np.ones(3), np.ones(3, bool))
    >>> np.round(beta, 6).tolist(), int(dof)
    ([1.0, 2.0], 1)
    """
    design = np.asarray(design, float)
    y = np.asarray(y, float)
    var = np.asarray(var, float)
    use = np.asarray(use, bool)
    y0 = np.where(use, y, 0.0)
    if var.ndim == y.ndim + 1:  # a full covariance: generalised least squares
        both = use[..., :, None] & use[..., None, :]
        eye = np.eye(y.shape[-1], dtype=bool)
        v = np.where(both, var, np.where(eye, 1.0, 0.0))
        w = np.where(both, np.linalg.inv(v), 0.0)
    else:
        w = np.where(use, 1.0 / np.where(use, var, 1.0), 0.0)[..., :, None] * np.eye(y.shape[-1])
    aw = w @ design  # W A
    normal = np.swapaxes(design, -1, -2) @ aw
    cov = np.linalg.pinv(normal, hermitian=True)
    beta = np.einsum("...pq,...q->...p", cov, np.einsum("...np,...n->...p", aw, y0))
    r = np.where(use, y - np.einsum("...np,...p->...n", design, beta), 0.0)
    chi2 = np.einsum("...n,...nm,...m->...", r, w, r)
    dof = np.sum(use, axis=-1) - design.shape[-1]
    return beta, cov, chi2, dof


def robust_fit(design, y, variance, use, *, protect=None, clip=3.5, min_left=None, max_iter=None):
    """Fit with iterated effective variances and one-at-a-time rejection.

    Parameters
    ----------
    design : ndarray (..., n, p)
    y : ndarray (..., n)
    variance : callable
        ``variance(beta)`` → variances (..., n) or a covariance (..., n, n) for the current coefficients
        (effective variance: errors of the standard values enter through the
        fitted slopes); a constant array may be wrapped in a lambda.
    use : ndarray of bool (..., n)
        Points usable at the start.
    protect : ndarray of bool (..., n), optional
        Points never rejected (prior pseudo-observations).
    clip : float
        Rejection threshold in robust σ (``inf`` turns rejection off).
    min_left : int, optional
        Fewest real points kept (default: parameters + 2).
    max_iter : int, optional
        Most rejections per fit (default: a third of the points).

    Returns
    -------
    dict
        ``beta``, ``cov``, ``chi2``, ``dof``, ``residual`` (..., n),
        ``sigma`` (..., n) (the effective errors), ``z`` (normalised
        residuals), ``use`` (points kept), ``rejected`` (points removed by
        the clipping), ``scale`` (the robust scale at the end).
    """
    design = np.asarray(design, float)
    y = np.asarray(y, float)
    use0 = np.asarray(use, bool)
    protect = np.zeros_like(use0) if protect is None else np.asarray(protect, bool)
    n, p = design.shape[-2:]
    min_left = p + 2 if min_left is None else min_left
    max_iter = max(n // 3, 1) if max_iter is None else max_iter
    keep = use0.copy()

    def fit(keep):
        beta = solve(design, y, variance(None), keep)[0]
        for _ in range(2):  # effective variance depends (weakly) on the slopes
            var = variance(beta)
            beta, cov, chi2, dof = solve(design, y, var, keep)
        return beta, cov, chi2, dof, var

    beta, cov, chi2, dof, var = fit(keep)
    sd = lambda v: np.sqrt(np.diagonal(v, axis1=-2, axis2=-1) if v.ndim == y.ndim + 1 else v)  # noqa: E731
    scale = np.ones(y.shape[:-1])
    for _ in range(max_iter if np.isfinite(clip) else 0):
        r = y - np.einsum("...np,...p->...n", design, beta)
        z = r / sd(var)
        real = keep & ~protect
        absz = np.where(real, np.abs(z), np.nan)
        with np.errstate(all="ignore"):
            scale = np.maximum(1.0, MAD_TO_SIGMA * np.nanmedian(absz, axis=-1))
        filled = np.where(real, np.abs(z), -np.inf)
        worst = np.argmax(filled, axis=-1)
        zmax = np.take_along_axis(filled, worst[..., None], axis=-1)[..., 0]
        go = (zmax > clip * scale) & (np.sum(real, axis=-1) > min_left)
        if not np.any(go):
            break
        drop = np.zeros_like(keep)
        np.put_along_axis(drop, worst[..., None], go[..., None], axis=-1)
        keep = keep & ~drop
        beta, cov, chi2, dof, var = fit(keep)
    r = y - np.einsum("...np,...p->...n", design, beta)
    return {"beta": beta, "cov": cov, "chi2": chi2, "dof": dof, "residual": r, "sigma": sd(var),
            "z": r / sd(var), "use": keep, "rejected": use0 & ~keep, "scale": scale}
