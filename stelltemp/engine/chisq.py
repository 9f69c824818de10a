"""The chi-squared survival function for whole degrees of freedom, in numpy.

``Q(k, x) = P(χ²_k ≥ x)`` is the regularised upper incomplete gamma
function ``Γ(k/2, x/2) / Γ(k/2)``.  For whole ``k`` it has a finite form
(Abramowitz & Stegun 1964, eqs. 26.4.4 and 26.4.5), with ``h = x / 2``:

* even ``k = 2m``:  ``Q = e^(−h) Σ_{i<m} h^i / i!``
* odd ``k = 2m+1``: ``Q = erfc(√h) + e^(−h) Σ_{i<m} h^(i+½) / Γ(i + 3/2)``

Every term is positive, so the sums lose nothing to cancellation; each term
is formed as ``exp(i ln h − h − ln Γ)``, which cannot overflow.  A test
compares it with ``scipy.special.chdtrc`` (agreement to 1e-12 relative).
It exists because importing ``scipy.special`` costs a quarter of a second,
most of a short catalogue run's budget.
"""

import math

import numpy as np

from .. import kernels

__all__ = ["chi2_survival"]

#: largest number of degrees of freedom taken (the engine's fits have a few)
MAX_DOF = 1000

_erfc_each = np.frompyfunc(math.erfc, 1, 1)


def _erfc(x):
    """erfc of an array: the C library's, element by element (compiled for large arrays, the same bits)."""
    x = np.ascontiguousarray(x, dtype=float)
    jit = kernels.jit_for(x.size)
    if jit is None:
        return _erfc_each(x).astype(float)
    out = np.empty(x.shape)
    jit["erfc_cells"](x.ravel(), out.ravel())
    return out


def chi2_survival(dof, x):
    """P(χ² ≥ x) for ``dof`` degrees of freedom (whole numbers 1 … `MAX_DOF`), elementwise.

    Parameters
    ----------
    dof : int or array_like of int
        Degrees of freedom, broadcast against ``x``.
    x : float or array_like
        Values of χ²; negative or NaN values give NaN, ``inf`` gives 0.

    Returns
    -------
    ndarray of float

    Examples
    --------
    >>> float(chi2_survival(2, 2.0)) == math.exp(-1.0)
    True
    >>> float(chi2_survival(1, 0.0))
    1.0
    """
    dof, x = np.broadcast_arrays(np.asarray(dof), np.asarray(x, dtype=float))
    if dof.size and (dof.dtype.kind not in "iub" and not np.all(dof == np.round(dof))):
        raise ValueError("chi2_survival needs whole degrees of freedom")
    k = dof.astype(np.int64)
    if k.size and (k.min() < 1 or k.max() > MAX_DOF):
        raise ValueError(f"chi2_survival needs 1 to {MAX_DOF} degrees of freedom")
    out = np.full(x.shape, np.nan)
    good = x >= 0
    h = x / 2.0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
        for kk in np.unique(k[good]):
            sel = good & (k == kk)
            out[sel] = _survival_whole(int(kk), h[sel])
    return out if out.ndim else out[()]


def _survival_whole(k, h):
    """Q(k, 2h) for one whole ``k``: the finite sums of the module docstring.

    Terms follow by recurrence from the first (``t_i = t_{i−1} h / p_i``, a
    few roundings each); where ``e^(−h)`` would underflow (``h`` > 700) they
    are formed in logarithms instead, which costs some relative accuracy
    only far below 1e-290.
    """
    m, odd = divmod(k, 2)
    big = h > 700.0
    finite = np.isfinite(h)
    if odd:
        q = _erfc(np.sqrt(h))
        powers = [i + 0.5 for i in range(m)]
        term = 2.0 * np.sqrt(h / math.pi) * np.exp(-h)  # h^½ e^(−h) / Γ(3/2)
    else:
        q = np.exp(-h)  # the i = 0 term
        powers = [float(i) for i in range(1, m)]
        term = q
    log_h = np.log(h)
    for j, p in enumerate(powers):
        if j or not odd:
            term = term * h / p
        in_logs = np.exp(p * log_h - h - math.lgamma(p + 1.0))
        q = q + np.where(finite, np.where(big, in_logs, term), 0.0)
    return q
