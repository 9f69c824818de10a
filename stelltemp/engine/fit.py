"""Multi-band blackbody fit: temperature, angular diameter and optionally E(B−V).

Model for band k: m_k = M_k(ln T, E) + a, with M_k the reddened
blackbody magnitude of unit solid angle (:mod:`stelltemp.bandgrid`) and
a = −2.5 log10(π θ² / 4) for angular diameter θ.  The fit minimises

    χ² = Σ_k (m_k − M_k − a)² / σ_k²  [+ (E − E₀)² / σ_E²  when E is free with a prior]

by Gauss–Newton with the offset a profiled out (variable projection),
vectorised over stars, with step halving where χ² would rise.  Missing bands of a star
get zero weight, so rows with different available bands share one pass.
The start comes from the colour of the widest-baseline pair available,
inverted exactly (:mod:`stelltemp.engine.colour`).

The reported covariance is (JᵀWJ)⁻¹ at the solution, not rescaled by the
reduced χ²; a poor fit is flagged instead (p < 0.001).
"""

import numpy as np

from .. import bandgrid as bg
from .. import kernels
from ..extinction import DEFAULT_LAW, DEFAULT_RV
from ..passbands import get_passband
from . import flags as fl
from .colour import invert_colour

_MAX_ITERATIONS = 30
_MAX_STEP = 0.5  # largest change of ln T in one iteration
_TOL = 1e-10
POOR_FIT_P = fl.POOR_FIT_P


def _start(mags, weights, keys, ebv, law, rv):
    """Starting ln T per star from the widest-baseline available colour."""
    pivots = np.array([get_passband(k).pivot_wavelength.value for k in keys])
    order = np.argsort(pivots)
    n = mags.shape[0]
    lnt = np.full(n, np.log(5800.0))
    have = weights > 0
    done = np.zeros(n, bool)
    # try pairs from the widest baseline inwards; each star takes its first usable pair
    pairs = [(order[i], order[j]) for i in range(len(order)) for j in range(len(order) - 1, i, -1)]
    pairs.sort(key=lambda p: -(pivots[p[1]] - pivots[p[0]]))
    for b, r in pairs:
        rows = ~done & have[:, b] & have[:, r]
        if not rows.any():
            continue
        t, _, _ = invert_colour(mags[rows, b] - mags[rows, r], keys[b], keys[r], ebv[rows], law, rv)
        good = np.isfinite(t)
        idx = np.nonzero(rows)[0]
        lnt[idx[good]] = np.log(t[good])
        # off-grid colours start at the nearer edge
        c = mags[rows, b] - mags[rows, r]
        lnt[idx[~good]] = np.where(c[~good] > 1.0, np.log(bg.T_MIN * 1.5), np.log(bg.T_MAX / 1.5))
        done[idx] = True
        if done.all():
            break
    return lnt


def _rowsum(x):
    """Σ over the last axis (the bands), in ascending order, as `kernels.fit_cells` sums.

    Examples
    --------
    >>> float(_rowsum(np.array([[0.1, 0.2, 0.3]]))[0]) == (0.1 + 0.2) + 0.3
    True
    """
    acc = np.zeros(x.shape[:-1])
    for b in range(x.shape[-1]):
        acc = acc + x[..., b]
    return acc


def _final(m, w, mod, d_t, d_e, e, ebv0, prior_w, too_few, fit_ebv):
    """At the solution: the offset a, χ², the covariance of (ln T, a[, E]) and ∂ln T/∂E (E fixed).

    Every sum runs over the bands in order, as `kernels.fit_final` sums.
    """
    n = m.shape[0]
    n_par = 3 if fit_ebv else 2
    with np.errstate(invalid="ignore", divide="ignore"):
        a = _rowsum(w * (m - mod)) / _rowsum(w)
    resid = m - mod - a[:, None]
    current = _rowsum(w * resid * resid)
    if fit_ebv:
        current = current + prior_w * (e - ebv0) ** 2
    cols = [d_t, np.ones_like(d_t)] + ([d_e] if fit_ebv else [])
    weighted = [col * w for col in cols]  # the columns of J·W
    normal = np.empty((n, n_par, n_par))
    for i in range(n_par):
        for j in range(n_par):
            normal[:, i, j] = _rowsum(weighted[i] * cols[j])
    if fit_ebv:
        normal[:, 2, 2] += prior_w
    normal[too_few] = np.eye(n_par)
    cov = _inverse_symmetric(normal)
    cov[too_few] = np.nan
    # with E(B−V) fixed: how the best ln T moves per unit E, −[N⁻¹ Jᵀ W ∂M/∂E]_lnT
    dlnt_de = np.zeros(n)
    if not fit_ebv:
        for b in range(m.shape[1]):
            for q in range(n_par):
                dlnt_de = dlnt_de + (cov[:, 0, q] * weighted[q][:, b]) * d_e[:, b]
        dlnt_de = -dlnt_de
    return a, current, cov, dlnt_de


def _inverse_symmetric(a):
    """Inverses of a stack of symmetric 2×2 or 3×3 matrices by cofactors (NaN where singular)."""
    if a.shape[-1] == 2:
        det = a[:, 0, 0] * a[:, 1, 1] - a[:, 0, 1] ** 2
        inv = np.empty_like(a)
        inv[:, 0, 0], inv[:, 1, 1] = a[:, 1, 1], a[:, 0, 0]
        inv[:, 0, 1] = inv[:, 1, 0] = -a[:, 0, 1]
    else:
        cof = np.empty_like(a)
        for i in range(3):
            for j in range(3):
                r = [x for x in range(3) if x != i]
                c = [x for x in range(3) if x != j]
                minor = a[:, r[0], c[0]] * a[:, r[1], c[1]] - a[:, r[0], c[1]] * a[:, r[1], c[0]]
                cof[:, j, i] = (-1) ** (i + j) * minor
        det = np.einsum("nj,nj->n", a[:, 0, :], cof[:, :, 0])
        inv = cof
    with np.errstate(divide="ignore", invalid="ignore"):
        singular = ~(np.abs(det) > 1e-300)
        inv = inv / np.where(singular, np.nan, det)[:, None, None]
    return inv


def fit_blackbody(mags, errs, keys, ebv=0.0, ebv_err=np.inf, fit_ebv=False,
                  law=DEFAULT_LAW, rv=DEFAULT_RV):
    """Fit T, θ (and E(B−V)) to magnitudes in several bands, star by star.

    Parameters
    ----------
    mags, errs : ndarray, shape (n_stars, n_bands)
        Magnitudes and 1σ errors; NaN (or a non-positive error) drops a band
        for that star.
    keys : sequence of str
        Passband keys of the columns.
    ebv : float or ndarray (n_stars,)
        E(B−V): fixed value, or the prior centre and start when ``fit_ebv``.
    ebv_err : float or ndarray
        Prior width on E(B−V) when ``fit_ebv`` (inf: no prior).
    fit_ebv : bool
        Fit E(B−V) as a free parameter (needs three or more bands).

    Returns
    -------
    dict of ndarrays (n_stars,)
        ``t`` (K), ``lnt_err``, ``a`` (mag offset −2.5 log10 Ω), ``a_err``,
        ``cov_lnt_a``, ``ebv``, ``ebv_err``, ``cov_lnt_e``, ``dlnt_de`` (sensitivity of
        ln T to a fixed E(B−V)), ``chi2``, ``dof``, ``p_value``,
        ``n_bands``, ``flags``.
    """
    mags = np.atleast_2d(np.asarray(mags, float))
    errs = np.atleast_2d(np.asarray(errs, float))
    n, nb = mags.shape
    keys = list(keys)
    tables = [bg.band_table(k, law, rv) for k in keys]
    ebv0 = np.broadcast_to(np.asarray(ebv, float), (n,)).copy()
    prior_w = np.broadcast_to(np.asarray(ebv_err, float), (n,))
    with np.errstate(divide="ignore", invalid="ignore"):
        prior_w = np.where(np.isfinite(prior_w) & (prior_w > 0), 1.0 / prior_w**2, 0.0)
        usable = np.isfinite(mags) & np.isfinite(errs) & (errs > 0)
        w = np.where(usable, 1.0 / np.where(usable, errs, 1.0) ** 2, 0.0)
    m = np.where(usable, mags, 0.0)
    n_bands = usable.sum(axis=1)
    n_par = 3 if fit_ebv else 2
    flags = np.zeros(n, np.int64)
    bad_e = ~np.isfinite(ebv0) | (ebv0 < bg.E_MIN) | (ebv0 > bg.E_MAX)
    too_few = (n_bands < n_par) | bad_e
    flags[too_few] |= fl.BAD_INPUT
    ebv0 = np.where(bad_e, 0.0, ebv0)

    lnt = _start(m, np.where(too_few[:, None], 0.0, w), keys, ebv0, law, rv)
    e = ebv0.copy()
    lnt_lo, lnt_hi = np.log(bg.T_MIN), np.log(bg.T_MAX)

    # With E(B−V) fixed, each star's cubic in a table cell is kept between
    # iterations and rebuilt only when its temperature changes cell.
    cached_cell = np.full((nb, n), -1, np.intp)
    cached_q = np.zeros((nb, n, 4))

    def model_rows(rows, lnt_rows, e_rows, want_de):
        k = len(rows)
        mod = np.empty((k, nb))
        d_t = np.empty((k, nb))
        d_e = np.empty((k, nb)) if want_de else None
        for b, tab in enumerate(tables):
            if want_de:
                mod[:, b], d_t[:, b], d_e[:, b] = tab.evaluate(lnt_rows, e_rows, want_de=True)
                continue
            cell, t, s = tab.cell(lnt_rows, e_rows)
            stale = np.nonzero(cached_cell[b, rows] != cell)[0]
            if stale.size:
                cached_q[b, rows[stale]] = tab.cubics(cell[stale], s[stale])[0]
                cached_cell[b, rows[stale]] = cell[stale]
            mod[:, b], d_t[:, b] = tab.horner(cached_q[b, rows], t)
        return mod, d_t, d_e

    # Gauss–Newton with the offset a profiled out (variable projection), one
    # model evaluation per iteration; a step that raises χ² is halved instead.
    # Converged stars drop out of the active set.
    jit = kernels.jit_for(n)
    active = np.nonzero(~too_few)[0] if jit is None else np.zeros(0, np.intp)
    if jit is not None:  # the same loop, one star at a time, compiled (the same bits)
        jit["fit_cells"](np.ascontiguousarray(m), np.ascontiguousarray(w), lnt, e, ebv0, np.ascontiguousarray(prior_w),
                         ~too_few, bool(fit_ebv), *bg.table_stack(keys, law, rv), _MAX_ITERATIONS, _TOL, _MAX_STEP,
                         lnt_lo, lnt_hi, bg.E_MIN, bg.E_MAX)
    best = np.full(n, np.inf)  # χ² at the last accepted point
    step_t = np.zeros(n)
    step_e = np.zeros(n)
    for _ in range(_MAX_ITERATIONS):
        if active.size == 0:
            break
        ws, ms = w[active], m[active]
        mod, d_t, d_e = model_rows(active, lnt[active], e[active], fit_ebv)
        wsum = _rowsum(ws)
        a_act = _rowsum(ws * (ms - mod)) / wsum
        r = ms - mod - a_act[:, None]
        chi = _rowsum(ws * r * r)
        if fit_ebv:
            chi = chi + prior_w[active] * (e[active] - ebv0[active]) ** 2
        worse = chi > best[active] * (1 + 1e-12) + 1e-12
        # worse: go back halfway along the last step and evaluate again next round
        idx_w = active[worse]
        step_t[idx_w] /= 2
        step_e[idx_w] /= 2
        lnt[idx_w] -= step_t[idx_w]
        e[idx_w] -= step_e[idx_w]
        ok = ~worse
        idx = active[ok]
        best[idx] = chi[ok]
        # profiled Jacobian: derivative columns minus their weighted means
        wk = ws[ok]
        jt = d_t[ok] - (_rowsum(wk * d_t[ok]) / wsum[ok])[:, None]
        htt = _rowsum(wk * jt * jt)
        gt = _rowsum(wk * jt * r[ok])
        if fit_ebv:
            je = d_e[ok] - (_rowsum(wk * d_e[ok]) / wsum[ok])[:, None]
            hte = _rowsum(wk * jt * je)
            hee = _rowsum(wk * je * je) + prior_w[idx]
            ge = _rowsum(wk * je * r[ok]) + prior_w[idx] * (ebv0[idx] - e[idx])
            det = htt * hee - hte * hte
            with np.errstate(divide="ignore", invalid="ignore"):
                dt = np.where(det > 0, (hee * gt - hte * ge) / det, 0.0)
                de = np.where(det > 0, (htt * ge - hte * gt) / det, 0.0)
        else:
            with np.errstate(divide="ignore", invalid="ignore"):
                dt = np.where(htt > 0, gt / htt, 0.0)
            de = np.zeros_like(dt)
        dt = np.clip(dt, -_MAX_STEP, _MAX_STEP)
        new_t = np.clip(lnt[idx] + dt, lnt_lo, lnt_hi)
        new_e = np.clip(e[idx] + de, bg.E_MIN, bg.E_MAX)
        step_t[idx] = new_t - lnt[idx]
        step_e[idx] = new_e - e[idx]
        lnt[idx] = new_t
        e[idx] = new_e
        moving = (np.abs(step_t) > _TOL) | (np.abs(step_e) > _TOL)
        active = active[moving[active]]

    # the final pass always needs ∂M/∂E, for the reddening sensitivity
    if jit is not None:  # the same steps, one star at a time, compiled (the same bits)
        mod, d_t, d_e = (np.empty((n, nb)) for _ in range(3))
        a, current, dlnt_de, cov = np.empty(n), np.empty(n), np.empty(n), np.empty((n, n_par, n_par))
        jit["fit_final"](m, w, lnt, e, ebv0, np.ascontiguousarray(prior_w), too_few, bool(fit_ebv),
                         *bg.table_stack(keys, law, rv), mod, d_t, d_e, a, current, cov, dlnt_de)
    else:
        mod, d_t, d_e = model_rows(np.arange(n), lnt, e, True)
        a, current, cov, dlnt_de = _final(m, w, mod, d_t, d_e, e, ebv0, prior_w, too_few, fit_ebv)
    dof = n_bands - n_par + (1 if fit_ebv else 0) * (prior_w > 0)
    from .chisq import chi2_survival as chdtrc  # P(χ² ≥ x); scipy.special costs 0.25 s to import

    with np.errstate(invalid="ignore"):
        p_value = np.where(dof > 0, chdtrc(np.maximum(dof, 1), current), np.nan)  # p(χ² ≥ current)
    edge = (lnt <= lnt_lo + 1e-9) | (lnt >= lnt_hi - 1e-9)
    flags[edge & ~too_few] |= fl.AT_GRID_EDGE
    flags[(p_value < POOR_FIT_P) & ~too_few] |= fl.POOR_FIT
    nan = too_few
    return {
        "t": np.where(nan, np.nan, np.exp(lnt)),
        "lnt_err": np.sqrt(cov[:, 0, 0]),
        "a": np.where(nan, np.nan, a),
        "a_err": np.sqrt(cov[:, 1, 1]),
        "cov_lnt_a": cov[:, 0, 1],
        "ebv": np.where(nan, np.nan, e),
        "ebv_err": np.sqrt(cov[:, 2, 2]) if fit_ebv else np.zeros(n),
        "cov_lnt_e": cov[:, 0, 2] if fit_ebv else np.zeros(n),
        "dlnt_de": dlnt_de,
        "model": mod,  # M_k(T, E) of each band at the solution (without the offset a)
        "model_de": d_e,  # ∂M_k/∂E there
        "chi2": np.where(nan, np.nan, current),
        "dof": np.where(nan, 0, dof),
        "p_value": np.where(nan, np.nan, p_value),
        "n_bands": n_bands,
        "flags": flags,
    }
