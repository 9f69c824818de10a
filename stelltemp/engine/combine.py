"""Calibrated effective temperature from several colours, with their full covariance.

Each empirical relation i (:mod:`stelltemp.calibrations`) turns one
dereddened colour X_i = m_blue − m_red − ΔC_i(E) into a temperature T_i.
The relations of one star are not independent: colours share bands (six of
the eight Casagrande et al. 2010 colours contain V), they share one
reddening and one [Fe/H].  Linearised about the nominal inputs,

    T_i = T + v_i (E − E_lin) + s_i D_i·δm + g_i δ[Fe/H] + ε_i

with s_i = ∂T_i/∂X_i, v_i = s_i ∂ΔC_i/∂E (the reddening vector of the
colour, from a blackbody at the star's colour temperature through the
passbands), D_i the ±1 row picking the two bands, g_i = ∂T_i/∂[Fe/H] and
ε_i the relation's published scatter.  The covariance of the T_i is

    C = S D Σ_m Dᵀ S + g gᵀ σ_[Fe/H]² + Σ_scatter  [+ v vᵀ σ_E²  when E(B−V) is given]

where Σ_scatter is diagonal between different relations (independent
calibrations) but a relation that enters twice keeps its full scatter
(σ_i σ_j for the same relation key).  The estimate is generalised least
squares (Aitken 1935, Proc. R. Soc. Edinburgh 55, 42):

* E(B−V) given (with its error): one parameter T, design column of ones;
  T̂ = (1ᵀC⁻¹y)/(1ᵀC⁻¹1), var T̂ = 1/(1ᵀC⁻¹1).
* E(B−V) fitted from the calibrations: parameters (T, E), design columns
  (1, v), with the given E(B−V) ± σ_E as a prior when σ_E > 0 and no prior
  otherwise (then three or more relations are needed); iterated about the
  new E so the dereddening stays exact.  This is the reddening that makes
  the colours agree.

χ² = rᵀC⁻¹r (+ the prior term) with n_used − n_par (+1 with a prior)
degrees of freedom measures whether the colours of one star agree within
their errors.

The Monte Carlo path draws the same quantities (magnitudes, E(B−V),
[Fe/H], one scatter term per relation), evaluates every relation exactly
at the drawn colour, and applies the same linear estimator; its 68 %
interval agrees with the analytic one where the relations are close to
linear over the errors.

Not included: the error of the blackbody colour temperature at which the
colour excess is evaluated (a second-order effect: ΔC changes by < 0.01
mag per 1,000 K at E(B−V) = 1), and correlations between the scatters of
different relations calibrated on the same stars.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from .. import bandgrid as bg
from .. import kernels
from ..calibrations import coverage_notes, relations
from . import flags as fl
from ..patterns import unique_rows

#: Gauss–Newton iterations: each linearises the relations at the current T_eff (and, when
#: E(B−V) is fitted, re-evaluates the colour excess exactly at the current E(B−V))
_ITERATIONS = 10
#: Newton steps inverting a relation (T_eff → colour) at the current estimate
_INVERSE_STEPS = 4
#: convergence: largest change of T_eff (K) and E(B−V) (mag) between iterations
_TOL_T, _TOL_E = 0.1, 1e-5
#: passes before the estimates of a star that does not settle are collected (the start-up
#: transient of the iteration)
_SETTLING_PASSES = 2
#: a star whose estimates after the settling passes span more than twice this share of its
#: error is flagged as not settled
UNSETTLED_SHARE = 0.1
#: relations needed to fit E(B−V) from the calibrations alone (no prior)
MIN_RELATIONS_FREE_EBV = 3


class PerRelation:
    """Each relation's own T_eff and error (``teff``, ``err``, K, shape (n_stars, n_candidates), NaN
    where not used), made when first read from the kept relations' columns ``cols``.

    Most calls never read them (only ``estimate(cal_detail=True)`` does), and two fresh
    (n, r) arrays cost a fifth of a 5-band call.
    """

    def __init__(self, n, r, cols=(), used=None, y=None, c_diag=None):
        self._shape, self._cols, self._used, self._y, self._c_diag = (n, r), cols, used, y, c_diag

    def _full(self, kept):
        out = np.full(self._shape, np.nan)
        if len(self._cols):
            out[:, self._cols] = np.where(self._used, kept(), np.nan)
        return out

    @functools.cached_property
    def teff(self):
        return self._full(lambda: self._y)

    @functools.cached_property
    def err(self):
        return self._full(lambda: np.sqrt(self._c_diag))


@dataclass
class CalibratedTeff:
    """Per-star result of :func:`calibrated_teff` (arrays over stars).

    Attributes
    ----------
    teff, teff_err : ndarray
        GLS T_eff and its 1σ error, K (NaN where no relation applied).
    teff_lo, teff_hi : ndarray
        68 % interval, K: teff ∓ teff_err, or the Monte Carlo percentiles.
    ebv, ebv_err : ndarray
        E(B−V) fitted from the calibrations and its error, mag (NaN unless fitted).
    chi2, dof : ndarray
        Agreement of the relations: χ² of the combination and its degrees of
        freedom (NaN / 0 when dof = 0).
    p_value : ndarray
        P(χ²_dof ≥ chi2); NaN when dof = 0.
    n_used : ndarray of int
    used : ndarray of bool, shape (n_stars, n_relations)
    keys : tuple of str
        Relation keys of the columns of ``used``, ``teff_each``, ``err_each``.
    teff_each, err_each : ndarray, shape (n_stars, n_relations)
        Each relation's own temperature and its total 1σ error (photometry,
        E(B−V) when given, [Fe/H], scatter), K; NaN where not used.
    outside : ndarray of bool
        A measured colour went unused although its relations cover the star's T_eff.
    not_settled : ndarray of bool
        The iteration had not settled after its last pass and its estimates
        after the first passes span more than 2 × `UNSETTLED_SHARE` of the
        error: ``teff`` is the middle of that span and ``teff_err`` includes
        half of it.
    notes : ndarray of str
        Per star, the luminosity class assumed and why no relation applied
        ('' when there is nothing to say).
    ebv_share : ndarray
        Share of the variance of ``teff`` that the E(B−V) error adds
        (1 − variance with E(B−V) held fixed / variance; with E(B−V) fitted,
        its fitted error counts), 0…1.
    """

    teff: np.ndarray
    teff_err: np.ndarray
    teff_lo: np.ndarray
    teff_hi: np.ndarray
    ebv: np.ndarray
    ebv_err: np.ndarray
    chi2: np.ndarray
    dof: np.ndarray
    p_value: np.ndarray
    n_used: np.ndarray
    used: np.ndarray
    keys: tuple
    per_relation: PerRelation
    outside: np.ndarray
    notes: np.ndarray
    ebv_share: np.ndarray = None
    not_settled: np.ndarray = None

    @property
    def teff_each(self):
        return self.per_relation.teff

    @property
    def err_each(self):
        return self.per_relation.err

    @property
    def flags(self):
        """OUTSIDE_CALIBRATION, NO_CALIBRATION and NOT_SETTLED bits, one integer per star."""
        mask = np.where(self.outside, fl.OUTSIDE_CALIBRATION, 0).astype(np.int64)
        mask |= np.where(self.n_used == 0, fl.NO_CALIBRATION, 0)
        if self.not_settled is not None:
            mask |= np.where(self.not_settled, fl.NOT_SETTLED, 0)
        return mask

    def used_names(self):
        """Comma-separated relation keys used, per star (str objects, one shared per pattern)."""
        if not len(self.keys):
            return np.full(len(self.teff), "", dtype=object)
        patterns, inverse = unique_rows(self.used)
        keys = np.array(self.keys, dtype=object)
        return np.array([",".join(keys[row]) for row in patterns], dtype=object)[inverse]


def candidate_relations(keys):
    """Relations whose two passbands are among ``keys`` (in registry order)."""
    have = set(keys)
    return tuple(r for r in relations() if r.blue in have and r.red in have)


def colour_excess(keys, t_bb, ebv, law, rv):
    """Per band: excess ΔM = M(T, E) − M(T, 0), ∂M/∂E and ∂ΔM/∂ln T, arrays (n_stars, n_bands)."""
    n = len(t_bb)
    # the log of the compiled passes (`kernels.calibrate_cells`), so both give the same bits
    lnt = kernels.c_log(np.where(np.isfinite(t_bb), t_bb, 5800.0))
    e_used = np.clip(np.where(np.isfinite(ebv), ebv, 0.0), bg.E_MIN, bg.E_MAX)
    ex = np.empty((n, len(keys)))
    de = np.empty((n, len(keys)))
    dt = np.empty((n, len(keys)))
    for b, key in enumerate(keys):
        table = bg.band_table(key, law, rv)
        reddened, dt_red, de[:, b] = table.evaluate(lnt, e_used)
        intrinsic, dt_int, _ = table.evaluate(lnt, np.zeros(n), want_de=False)
        ex[:, b] = reddened - intrinsic
        dt[:, b] = dt_red - dt_int
    return ex, de, dt


class _Setup:
    """The relations of a run and the fixed matrices that describe them."""

    def __init__(self, keys, rels=None):
        self.keys = tuple(keys)
        self.rels = candidate_relations(keys) if rels is None else tuple(rels)
        index = {k: i for i, k in enumerate(keys)}
        r = len(self.rels)
        self.blue = np.array([index[rel.blue] for rel in self.rels], dtype=np.intp)
        self.red = np.array([index[rel.red] for rel in self.rels], dtype=np.intp)
        self.pick = np.zeros((r, len(keys)))  # D: colour = D · m
        self.pick[np.arange(r), self.blue] += 1.0
        self.pick[np.arange(r), self.red] -= 1.0
        # a relation entered twice keeps its full scatter: σ_i σ_j for the same key
        self.same = np.array([[a.key == b.key for b in self.rels] for a in self.rels],
                             bool).reshape(r, r)
        # one scatter draw per distinct relation key (Monte Carlo)
        unique = {}
        self.scatter_slot = np.array([unique.setdefault(rel.key, len(unique)) for rel in self.rels],
                                     dtype=np.intp)
        self.n_slots = len(unique)

    def subset(self, keep):
        """The same run restricted to the relations where ``keep`` is True."""
        return _Setup(self.keys, [rel for rel, k in zip(self.rels, keep) if k])


def _scatter(setup, t):
    """Each relation's published scatter at the stars' temperatures, K, shape (n, r)."""
    t = np.where(np.isfinite(t), t, 5800.0)
    return np.column_stack([rel.scatter_at(t) for rel in setup.rels])


def _evaluate(setup, m, ex, de, dt, feh, logg, allowed=None):
    """Each relation at the dereddened colours: T_i, slopes, reddening vectors, mask.

    ``allowed`` (n, r), when given, limits the relations each star may use.
    """
    n = m.shape[0]
    r = len(setup.rels)
    x = m[:, setup.blue] - m[:, setup.red] - (ex[:, setup.blue] - ex[:, setup.red])
    kx = de[:, setup.blue] - de[:, setup.red]
    kt = dt[:, setup.blue] - dt[:, setup.red]
    t = np.full((n, r), np.nan)
    s = np.full((n, r), np.nan)
    g = np.full((n, r), np.nan)
    used = np.zeros((n, r), bool)
    for i, rel in enumerate(setup.rels):
        cand = rel.applies_to(logg) & np.isfinite(x[:, i])
        ti, si, gi, inside = rel.at(x[:, i], feh, logg)
        ok = cand & inside & np.isfinite(ti) & np.isfinite(si)
        if allowed is not None:
            ok &= allowed[:, i]
        used[:, i] = ok
        t[:, i] = np.where(ok, ti, np.nan)
        s[:, i] = np.where(ok, si, 0.0)
        g[:, i] = np.where(ok & np.isfinite(gi), gi, 0.0)
    return x, kx, kt, t, s, g, used


def _linearise_at(setup, t_hat, x, y, s, g, used, feh, logg):
    """Relations linearised at the colour each would give at the current T_eff.

    Slopes taken at the observed colour make the weights depend on the
    noise and bias the combination; taken at the model colour X_m = f⁻¹(T̂)
    the pseudo-observation ỹ = T̂ + s(X_m)·(X − X_m) is linear in the data
    (Gauss–Newton in colour space).  Where the inversion leaves the
    relation's range, the observed-colour values are kept.
    """
    y, s, g = y.copy(), s.copy(), g.copy()
    jit = kernels.jit_for(len(t_hat))
    if jit is not None:  # the same steps per star, compiled (the same bits)
        for i, rel in enumerate(setup.rels):
            jit["linearise_relation"](x[:, i], t_hat, feh, logg, used[:, i], _INVERSE_STEPS,
                                      *rel._kernel_args, y[:, i], s[:, i], g[:, i])
        return y, s, g
    for i, rel in enumerate(setup.rels):
        rows = np.nonzero(used[:, i] & np.isfinite(t_hat))[0]
        if rows.size == 0:
            continue
        target = t_hat[rows]
        z = feh[rows]
        lg = logg[rows]
        lo, hi = rel.colour_range
        xm = np.clip(x[rows, i], lo, hi)
        ti, si, gi = (np.empty(rows.size) for _ in range(3))
        inside = np.empty(rows.size, bool)
        active = np.arange(rows.size)
        for _ in range(_INVERSE_STEPS):
            at = rel.at(xm[active], z[active], lg[active])
            with np.errstate(invalid="ignore", divide="ignore"):
                step = np.clip(xm[active] + (target[active] - at[0]) / at[1], lo, hi)
            # an exact fixed point: the remaining steps would change nothing, and the
            # evaluation just made is the one at the final colour
            done = step == xm[active]
            for out, value in zip((ti, si, gi, inside), at):
                out[active[done]] = value[done]
            xm[active] = step
            active = active[~done]
        if active.size:
            for out, value in zip((ti, si, gi, inside), rel.at(xm[active], z[active], lg[active])):
                out[active] = value
        good = inside & (np.abs(ti - target) < 0.5) & np.isfinite(si)
        rows, xm, si, gi = rows[good], xm[good], si[good], gi[good]
        y[rows, i] = t_hat[rows] + si * (x[rows, i] - xm)
        s[rows, i] = si
        g[rows, i] = np.where(np.isfinite(gi), gi, 0.0)
    return y, s, g


def _covariance(setup, s, g, used, sig_m, feh_err, scatter, order=None):
    """C without the reddening term; unused rows and columns replaced by the identity.

    With ``order`` (n, w) the per-relation arrays are a star's relations in
    that order (`_used_first`), and C is built in it.
    """
    var_m = np.where(np.isfinite(sig_m), sig_m, 0.0) ** 2
    pick, same = setup.pick[None], setup.same[None]
    if order is not None:
        pick, same = setup.pick[order], setup.same[order[:, :, None], order[:, None, :]]
    # each pick row holds one +1 and one -1, so every entry is a sum of at most two exact
    # products: the same bits in any order of summation (as `kernels.combine_cells` builds it)
    phot = (pick * var_m[:, None, :]) @ np.swapaxes(pick, 1, 2)
    c = s[:, :, None] * s[:, None, :] * phot
    c += np.where(same, scatter[:, :, None] * scatter[:, None, :], 0.0)
    c += g[:, :, None] * g[:, None, :] * (feh_err**2)[:, None, None]
    both = used[:, :, None] & used[:, None, :]
    eye = np.eye(used.shape[1])[None]
    return np.where(both, c, 0.0) + np.where(used[:, :, None], 0.0, eye)


def _used_first(used):
    """Per star, its used relations in ascending order, then the others: (n, w) indices.

    w is the most relations any star uses.  Solving on these w columns gives
    the bits of the full padded system (an unused relation's identity row
    adds exact zeros to every sum) with far fewer operations, and is the
    order in which `kernels.combine_cells` takes a star's relations.

    Examples
    --------
    >>> _used_first(np.array([[False, True, True], [True, False, False]])).tolist()
    [[1, 2], [0, 1]]
    """
    order = np.argsort(~used, axis=1, kind="stable")
    return order[:, :max(int(used.sum(axis=1).max(initial=0)), 1)]


def _cholesky_solve(c, rhs):
    """X with C X = B for every star: Cholesky factor, forward and back substitution.

    ``c`` (n, r, r) symmetric positive definite, ``rhs`` (n, r, q).  Every
    sum runs in ascending index order, one product at a time, exactly as
    `kernels.combine_cells` runs it for one star, so the two agree bit for
    bit and a star's result does not depend on the size of its call.  A
    matrix that is not positive definite gives NaN.
    """
    n, r, _ = c.shape
    # stars along the last axis: every operation below reads and writes contiguous rows
    c = np.ascontiguousarray(np.moveaxis(c, 0, -1))
    rhs = np.ascontiguousarray(np.moveaxis(rhs, 0, -1))
    low = np.zeros((r, r, n))
    with np.errstate(invalid="ignore", divide="ignore"):
        for j in range(r):
            d = c[j, j].copy()
            for k in range(j):
                d -= low[j, k] * low[j, k]
            low[j, j] = np.sqrt(d)
            for i in range(j + 1, r):
                acc = c[i, j].copy()
                for k in range(j):
                    acc -= low[i, k] * low[j, k]
                low[i, j] = acc / low[j, j]
        z = np.empty_like(rhs)
        for i in range(r):
            acc = rhs[i].copy()
            for k in range(i):
                acc -= low[i, k] * z[k]
            z[i] = acc / low[i, i]
        x = np.empty_like(rhs)
        for i in range(r - 1, -1, -1):
            acc = z[i].copy()
            for k in range(i + 1, r):
                acc -= low[k, i] * x[k]
            x[i] = acc / low[i, i]
    return np.ascontiguousarray(np.moveaxis(x, -1, 0))


def _dot(a, b):
    """Σ_k a_k b_k over the last axis, in ascending order (as the compiled kernel sums)."""
    acc = np.zeros(a.shape[:-1])
    for k in range(a.shape[-1]):
        acc += a[..., k] * b[..., k]
    return acc


def _gls(c, design, y, used, prior_prec, prior_d, extra=None):
    """Generalised least squares per star, with an optional Gaussian prior on parameter 1.

    All stars are solved at once on the full set of relations: a relation a
    star does not use has an identity row and column in ``c`` (see
    `_covariance`) and a zero design row and datum, so it adds nothing, and
    a star's numbers do not depend on the other stars of the call (a file
    run in chunks equals one call).  C is factorised by Cholesky
    (`_cholesky_solve`); the p × p information matrix (p ≤ 2) is inverted
    in closed form.  `kernels.combine_cells` is the same computation,
    compiled, one star at a time.

    Returns estimate (n, p), covariance (n, p, p), χ², the linear
    estimator (estimate = Ly @ y + Lp · prior_d, Ly zero for unused
    relations) and aᵀC⁻¹a of the first design column (without the prior);
    with ``extra`` (n, r), also C⁻¹·extra from the same factorisation.
    """
    n, r, p = design.shape
    if n == 0:
        return (np.full((0, p), np.nan), np.full((0, p, p), np.nan), np.full(0, np.nan),
                np.zeros((0, p, r)), np.zeros((0, p)), np.zeros(0)) + ((np.zeros((0, r)),) if extra is not None else ())
    a = np.where(used[:, :, None], design, 0.0)
    yy = np.where(used, y, 0.0)
    sides = [a, yy[:, :, None]] + ([] if extra is None else [extra[:, :, None]])
    sol = _cholesky_solve(c, np.concatenate(sides, axis=2))  # each column substituted on its own
    za, w = sol[:, :, :p], sol[:, :, p]
    i00 = _dot(a[:, :, 0], za[:, :, 0])
    with np.errstate(divide="ignore", invalid="ignore"):
        if p == 1:
            det = i00
            cv = (1.0 / i00).reshape(n, 1, 1)
        else:
            i01, i10 = _dot(a[:, :, 0], za[:, :, 1]), _dot(a[:, :, 1], za[:, :, 0])
            i11 = _dot(a[:, :, 1], za[:, :, 1]) + prior_prec
            det = i00 * i11 - i01 * i10
            cv = np.stack([np.stack([i11 / det, -i01 / det], -1),
                           np.stack([-i10 / det, i00 / det], -1)], 1)
    ok = (det > 0) & used.any(axis=1)
    cv[~ok] = np.eye(p)
    if p == 1:
        l_y = cv[:, 0, 0, None, None] * np.swapaxes(za, 1, 2)
        l_p = np.zeros((n, 1))
    else:
        l_y = np.stack([cv[:, q, 0, None] * za[:, :, 0] + cv[:, q, 1, None] * za[:, :, 1] for q in (0, 1)], 1)
        l_p = cv[:, :, 1] * prior_prec[:, None]
    e = np.stack([_dot(l_y[:, q], yy) + l_p[:, q] * prior_d for q in range(p)], -1)
    # r = y − A e and C⁻¹r = w − Z e: χ² = rᵀC⁻¹r without a second solve
    if p == 1:
        resid = yy - a[:, :, 0] * e[:, 0, None]
        white = w - za[:, :, 0] * e[:, 0, None]
    else:
        resid = yy - (a[:, :, 0] * e[:, 0, None] + a[:, :, 1] * e[:, 1, None])
        white = w - (za[:, :, 0] * e[:, 0, None] + za[:, :, 1] * e[:, 1, None])
    chi2 = _dot(resid, white)
    if p > 1:
        chi2 = chi2 + prior_prec * (e[:, 1] - prior_d) ** 2
    e[~ok] = np.nan
    cv[~ok] = np.nan
    chi2[~ok] = np.nan
    none = ~used.any(axis=1)  # no relation: nothing estimated
    l_y[none] = 0.0
    l_p[none] = 0.0
    if extra is not None:
        return e, cv, chi2, l_y, l_p, i00, sol[:, :, p + 1]
    return e, cv, chi2, l_y, l_p, i00


def _combine_pass(setup, s, g, used, sig_m, feh_err, scatter, a, v, y, fit_ebv, ebv_err, prior_prec,
                  prior_d):
    """One pass of the combination: covariance, GLS and what the result columns need.

    With ``fit_ebv`` the parameters are (T, E) with design columns (a, v)
    and the prior ``prior_prec`` on E; else T alone, the given E(B−V) error
    entering C as v vᵀ σ_E².  Returns estimate, covariance, χ², Ly, Lp (see
    `_gls`), the diagonal of C (each relation's own variance) and aᵀC₀⁻¹a,
    C₀ being C without the reddening term (for `_reddening_share`).  Large
    calls run `kernels.combine_cells`, which gives the same bits.
    """
    k, r = s.shape
    var_m = np.where(np.isfinite(sig_m), sig_m, 0.0) ** 2
    e2 = np.zeros(k) if fit_ebv else ebv_err**2
    jit = kernels.jit_for(k)
    if jit is not None:
        p = 2 if fit_ebv else 1
        out = (np.empty((k, p)), np.empty((k, p, p)), np.empty(k), np.empty((k, p, r)), np.empty((k, p)),
               np.empty((k, r)), np.empty(k))
        f = np.ascontiguousarray
        jit["combine_cells"](f(s), f(g), f(used), f(var_m), setup.blue, setup.red, f(setup.same), f(scatter),
                             f(feh_err**2), f(a), f(v), f(y), bool(fit_ebv), f(e2), f(prior_prec),
                             f(prior_d), *out)
        return out
    # the numpy twin: each star's used relations first, the others left out (the same bits)
    order = _used_first(used)
    s, g, scatter, a, v, y, used = (np.take_along_axis(q, order, 1) for q in (s, g, scatter, a, v, y, used))
    c = _covariance(setup, s, g, used, sig_m, feh_err, scatter, order)
    if fit_ebv:
        est, cov, chi2, ly, lp, info = _gls(c, np.stack([a, v], axis=-1), y, used, prior_prec, prior_d)
        return (est, cov, chi2, _unpack(ly, order, r, 0.0), lp,
                _unpack(np.einsum("nii->ni", c), order, r, 1.0), info)
    vv = np.where(used, v, 0.0)
    c_red = c + vv[:, :, None] * vv[:, None, :] * e2[:, None, None]
    # aᵀC₀⁻¹a with C₀ = C − σ_E² v vᵀ (Sherman–Morrison: no second factorisation); C⁻¹v
    # comes from the factorisation of the fit, as one more right-hand side
    est, cov, chi2, ly, lp, info, cv_v = _gls(c_red, a[:, :, None], y, used, np.zeros(k), np.zeros(k), extra=vv)
    av, vcv = _dot(np.where(used, a, 0.0), cv_v), _dot(vv, cv_v)
    with np.errstate(divide="ignore", invalid="ignore"):
        known = info + e2 * (av * av) / (1.0 - e2 * vcv)
    return (est, cov, chi2, _unpack(ly, order, r, 0.0), lp, _unpack(np.einsum("nii->ni", c_red), order, r, 1.0),
            np.where(e2 > 0, known, info))


def _unpack(packed, order, r, fill):
    """Values over a star's relations in `_used_first` order back on all r relations (``fill``
    for those it does not use); ``packed`` (n, w) or (n, p, w)."""
    out = np.full(packed.shape[:-1] + (r,), fill)
    index = order if packed.ndim == 2 else np.broadcast_to(order[:, None, :], packed.shape)
    np.put_along_axis(out, index, packed, -1)
    return out


def calibrated_teff(m, sig_m, keys, t_bb, ebv, ebv_err, *, fit_ebv=False, feh=None, feh_err=None,
                    logg=None, law="G23", rv=3.1, monte_carlo=0, seed=None):
    """T_eff from every calibrated colour of each star, combined with their full covariance.

    Parameters
    ----------
    m, sig_m : ndarray, shape (n_stars, n_bands)
        Observed magnitudes (NaN: not measured) and their 1σ errors, mag.
    keys : sequence of str
        Passband keys of the columns.
    t_bb : ndarray (n_stars,)
        Blackbody colour temperature, K, at which the colour excess of the
        reddening law is evaluated through the passbands.
    ebv, ebv_err : ndarray (n_stars,)
        E(B−V) and its 1σ error, mag.  With ``fit_ebv`` they are the prior
        (σ_E = 0: no prior).
    fit_ebv : bool
        Fit E(B−V) from the calibrations (the reddening that makes the
        colours agree).
    feh, feh_err : ndarray or None
        [Fe/H] and its 1σ error, dex (None/NaN: solar, 0.0, without error).
    logg : ndarray or None
        log g (cgs); None/NaN: dwarf relations.
    law, rv
        Extinction law and R_V.
    monte_carlo : int
        Draws per star for the Monte Carlo interval (0: analytic).
    seed : int or None

    Returns
    -------
    CalibratedTeff

    Examples
    --------
    >>> import numpy as np
    >>> m = np.array([[10.64, 10.0, 8.5]])  # B, V, Ks of a solar-type star
    >>> res = calibrated_teff(m, np.full((1, 3), 0.02), ["B_JC", "V_JC", "Ks_2MASS"],
    ...                       np.array([5800.0]), np.array([0.0]), np.array([0.0]))
    >>> str(res.used_names()[0]), int(res.n_used[0])
    ('c10_bv,c10_vk', 2)
    >>> bool(5600 < res.teff[0] < 5900 and 20 < res.teff_err[0] < 40)
    True
    """
    m = np.asarray(m, float)
    sig_m = np.asarray(sig_m, float)
    n = m.shape[0]
    setup = _Setup(keys)
    r = len(setup.rels)
    ebv = np.where(np.isfinite(ebv), ebv, 0.0)
    ebv_err = np.where(np.isfinite(ebv_err) & (ebv_err > 0), ebv_err, 0.0)
    feh_err = np.zeros(n) if feh_err is None else np.where(np.isfinite(feh_err), feh_err, 0.0)
    feh_given = feh
    feh = np.zeros(n) if feh is None else np.where(np.isfinite(feh), feh, 0.0)
    logg = np.full(n, np.nan) if logg is None else np.broadcast_to(np.asarray(logg, float), (n,))
    nan = np.full(n, np.nan)
    if r == 0:
        return _nothing(n, setup, np.zeros(n, bool),
                        np.full(n, "no calibration: no calibrated colour among these passbands"))

    prior_prec = np.where(ebv_err > 0, 1.0 / np.where(ebv_err > 0, ebv_err, 1.0) ** 2, 0.0)
    e_lin = ebv.copy()
    t_ref = np.where(np.isfinite(t_bb) & (t_bb > 0), t_bb, 5800.0)
    free = fit_ebv & (prior_prec == 0)
    if np.any(free):
        e_lin = np.where(free, _start_ebv(setup, m, sig_m, keys, t_ref, feh, feh_err, logg, law, rv),
                         e_lin)
    iterate = _iterate if kernels.jit_for(n) is None else _iterate_compiled
    setup0 = setup
    setup, keep, (x0, x0_col), last, moving, seen_lo, seen_hi, e_lin = iterate(
        setup, m, sig_m, keys, feh, feh_err, logg, law, rv, fit_ebv, ebv, ebv_err, prior_prec, e_lin, t_ref,
        detail=bool(monte_carlo))
    if last is None:
        notes = _notes(setup0, x0, x0_col, logg, feh_given, fit_ebv, prior_prec, np.zeros(n, int))
        return _nothing(n, setup0, np.zeros(n, bool), notes)
    x, kx, y, s, used, sc, v, n_used, bad, est, cov, chi2, ly, lp, c_diag, info_known = (
        last[name] for name in ("x", "kx", "y", "s", "used", "sc", "v", "n_used", "bad", "est",
                                "cov", "chi2", "ly", "lp", "c_diag", "info_known"))
    teff = np.where(bad, np.nan, est[:, 0])
    teff_err = np.where(bad, np.nan, np.sqrt(cov[:, 0, 0]))
    # a star still moving after the last pass: tabulated relations have kinks, and where the
    # weights jump at a node the iteration can cycle through two to six values for ever; quote
    # the middle of the range it went through after the first passes, with half that range in
    # the error (flagged when it matters), not whichever value the last pass happened to give
    unsettled = moving & np.isfinite(teff) & np.isfinite(seen_lo)
    half = np.where(unsettled, (seen_hi - seen_lo) / 2, 0.0)
    not_settled = unsettled & (half > UNSETTLED_SHARE * teff_err)
    teff = np.where(unsettled, (seen_lo + seen_hi) / 2, teff)
    teff_err = np.where(unsettled, np.hypot(teff_err, half), teff_err)
    n_par = 2 if fit_ebv else 1
    dof = np.where(bad, 0, n_used - n_par + (fit_ebv & (prior_prec > 0)))
    dof = np.maximum(dof, 0)
    chi2 = np.where(dof > 0, chi2, np.nan)
    from .chisq import chi2_survival as chdtrc  # P(χ² ≥ x); scipy.special costs 0.25 s to import

    with np.errstate(invalid="ignore"):
        p_value = np.where(dof > 0, chdtrc(np.maximum(dof, 1), chi2), np.nan)
    if fit_ebv:
        ebv_fit = np.where(bad, np.nan, e_lin + est[:, 1])
        ebv_fit_err = np.where(bad, np.nan, np.sqrt(cov[:, 1, 1]))
    else:
        ebv_fit = ebv_fit_err = nan
    # per relation, over every candidate of the run (the same columns in every block of rows)
    cols = np.flatnonzero(keep)
    used_all = np.zeros((n, len(setup0.rels)), bool)
    used_all[:, cols] = used

    lo, hi = teff - teff_err, teff + teff_err
    if monte_carlo and np.any(~bad):
        lo, hi = _monte_carlo(setup, int(monte_carlo), seed, teff, x, kx, s, used, sig_m, feh,
                              feh_err, logg, sc, ebv_err, fit_ebv, ly, lp)
        lo = np.where(bad, np.nan, lo)
        hi = np.where(bad, np.nan, hi)

    share = np.where(bad, np.nan, _reddening_share(info_known, teff_err))
    notes = _notes(setup0, x0, x0_col, logg, feh_given, fit_ebv, prior_prec, n_used)
    return CalibratedTeff(teff, teff_err, lo, hi, ebv_fit, ebv_fit_err, chi2, dof, p_value, n_used,
                          used_all, tuple(rel.key for rel in setup0.rels),
                          PerRelation(n, len(setup0.rels), cols, used, y, c_diag),
                          _outside(setup0, x0, x0_col, used_all, teff, feh, logg), notes, share, not_settled)



def _iterate(setup, m, sig_m, keys, feh, feh_err, logg, law, rv, fit_ebv, ebv, ebv_err, prior_prec,
             e_lin, t_ref, detail=True):
    """The Gauss–Newton passes of `calibrated_teff`, in numpy, over all stars at once.

    Returns the run's relations (those no star can use left out), which of
    the candidates they are (``keep``), the colours of the first pass (and
    for each candidate, the column of them that holds its colour), the
    quantities of each star's last pass (a dict of arrays; None when no
    relation is left), whether it was still moving, the range of its
    estimates after the settling passes and the final E(B−V) of the
    linearisation.  `_iterate_compiled` is the same computation, one star
    at a time, compiled; without ``detail`` it leaves out what only the
    Monte Carlo reads (``x``, ``kx``, ``s``, ``sc``, ``v``, ``ly``, ``lp``:
    None), here all computed anyway.
    """
    n = m.shape[0]
    r = len(setup.rels)
    e_lin = e_lin.copy()
    t_hat = None
    allowed = None
    rows = np.arange(n)  # the stars still moving: a converged star is not computed again
    last = {}  # per star, the quantities of its latest pass
    for it in range(_ITERATIONS):
        if it:
            # the excess of a blackbody at the current T_eff, not at T_bb (which can be far off,
            # and is noisy: the excess changes by 0.02-0.05 mag per 1,000 K at E(B-V) = 1)
            t_ref = np.where(np.isfinite(t_hat), t_hat, t_ref)
            rows = np.flatnonzero(moving)
        tr, el, fz, lg = t_ref[rows], e_lin[rows], feh[rows], logg[rows]
        ex, de, dt = colour_excess(keys, tr, el, law, rv)
        x, kx, kt, y, s, g, used = _evaluate(setup, m[rows], ex, de, dt, fz, lg,
                                             None if allowed is None else allowed[rows])
        if it == 0:
            setup0, x0 = setup, x
            # relations no star can use drop out of the matrices; with E(B-V) given, a star keeps
            # the relations of this first pass (so each row's result is independent of the others)
            keep = used.any(axis=0) if not fit_ebv else np.column_stack(
                [rel.applies_to(logg) & np.isfinite(x[:, i]) for i, rel in enumerate(setup.rels)]
            ).reshape(n, -1).any(axis=0)
            if not keep.all():
                setup = setup.subset(keep)
                r = len(setup.rels)
                x, kx, kt, y, s, g, used = (q[:, keep] for q in (x, kx, kt, y, s, g, used))
            allowed = None if fit_ebv else used.copy()
            if r == 0:
                return setup, keep, (x0, np.arange(x0.shape[1])), None, None, None, None, e_lin
        if t_hat is not None:
            y, s, g = _linearise_at(setup, t_hat[rows], x, y, s, g, used, fz, lg)
        sc = _scatter(setup, tr)
        v = s * kx
        # the excess itself depends on T: ∂T_i/∂T = 1 + s_i ∂ΔC_i/∂T (about t_ref)
        a = np.where(used, 1.0 + s * kt / tr[:, None], 1.0)
        y = y - (1.0 - a) * tr[:, None]
        n_used = used.sum(axis=1)
        pp = prior_prec[rows]
        # with E(B-V) given, it and its error are one shared term of every relation (in C)
        est, cov, chi2, ly, lp, c_diag, info_known = _combine_pass(
            setup, s, g, used, sig_m[rows], feh_err[rows], sc, a, v, y, fit_ebv, ebv_err[rows],
            pp if fit_ebv else np.zeros(rows.size), ebv[rows] - el if fit_ebv else np.zeros(rows.size))
        if fit_ebv:
            bad = (n_used == 0) | ((pp == 0) & (n_used < MIN_RELATIONS_FREE_EBV))
            step_e = np.where(bad | ~np.isfinite(est[:, 1]), 0.0, est[:, 1])
        else:
            bad = n_used == 0
            step_e = np.zeros(rows.size)
        now = dict(x=x, kx=kx, y=y, s=s, used=used, sc=sc, v=v, n_used=n_used, bad=bad,
                   est=est, cov=cov, chi2=chi2, ly=ly, lp=lp, c_diag=c_diag, info_known=info_known)
        if it == 0:
            last = dict(now, x=x.copy())  # x0 (the first pass) stays as it is
        elif rows.size == n:  # every star moved: this pass is the latest of all (no scatter)
            last = now
        else:
            for name, value in now.items():
                last[name][rows] = value
        new_t = np.where(bad, np.nan, est[:, 0])
        if t_hat is None:
            t_hat = new_t
            moving = np.ones(n, bool)
            # the range of each star's estimates once past the first passes (see `unsettled` below)
            seen_lo, seen_hi = np.full(n, np.nan), np.full(n, np.nan)
        else:
            old = t_hat[rows]
            if it >= _SETTLING_PASSES:
                seen_lo[rows] = np.fmin(seen_lo[rows], new_t)
                seen_hi[rows] = np.fmax(seen_hi[rows], new_t)
            step_t = np.where(np.isfinite(new_t - old), new_t - old, 0.0)
            # a star that has converged keeps its linearisation point from then on, so its
            # result does not depend on how long the other stars of the call need (its next
            # pass would repeat this one: it is not computed again)
            still = (np.abs(step_t) >= _TOL_T) | (np.abs(step_e) >= _TOL_E)
            moving[rows] = still
            t_hat[rows] = np.where(still, new_t, old)
        if not moving.any() or it == _ITERATIONS - 1:
            break
        e_lin[rows] = np.where(moving[rows], np.clip(el + step_e, bg.E_MIN, bg.E_MAX), el)
    return setup, keep, (x0, np.arange(x0.shape[1])), last, moving, seen_lo, seen_hi, e_lin


def _iterate_compiled(setup, m, sig_m, keys, feh, feh_err, logg, law, rv, fit_ebv, ebv, ebv_err, prior_prec,
                      e_lin, t_ref, detail=True):
    """`_iterate` by `kernels.calibrate_cells`: every pass of a star fused in one loop (the same bits).

    The kernel runs on the candidate relations that apply to some star (and
    on any other whose colour no such relation has); the ones no star could
    use are left out afterwards, as `_iterate` leaves them out after its
    first pass (they add nothing to any sum, so no bit changes).
    """
    n, nb = m.shape
    p = 2 if fit_ebv else 1
    f = np.ascontiguousarray
    applies_all = np.column_stack([rel.applies_to(logg) for rel in setup.rels]).reshape(n, len(setup.rels))
    # a relation that applies to no star of the call (a giant relation without log g) adds nothing
    # to any sum and is dropped after the first pass anyway: it stays out of the kernel when another
    # relation has its colour, whose first-pass colours x0 are then its own (the same bits)
    run, colour_of = _relations_to_run(setup, applies_all.any(axis=0))
    everyone = setup
    if not run.all():
        setup = setup.subset(run)
    applies = applies_all[:, run]
    r = len(setup.rels)
    # what only the Monte Carlo reads: per star, or the rows of one block the kernel works in
    rows = n if detail else kernels.BLOCK
    out = dict(x0=np.empty((n, r)), first_used=np.empty((n, r), bool), x=np.empty((rows, r)),
               kx=np.empty((rows, r)), y=np.empty((n, r)), s=np.empty((rows, r)), used=np.empty((n, r), bool),
               sc=np.empty((rows, r)), v=np.empty((rows, r)), n_used=np.empty(n, np.int64), bad=np.empty(n, bool),
               est=np.empty((n, p)), cov=np.empty((n, p, p)), chi2=np.empty(n), ly=np.empty((rows, p, r)),
               lp=np.empty((rows, p)), c_diag=np.empty((n, r)), info_known=np.empty(n), moving=np.empty(n, bool),
               seen_lo=np.empty(n), seen_hi=np.empty(n), e_lin=np.empty(n))
    var_m = np.where(np.isfinite(sig_m), sig_m, 0.0) ** 2
    kernels.jit_for(n)["calibrate_cells"](
        f(m), f(var_m), f(feh), f(feh_err**2), f(logg), f(applies), f(t_ref), f(e_lin), f(ebv), f(ebv_err**2),
        f(prior_prec), bool(fit_ebv), *bg.table_stack(keys, law, rv), setup.blue, setup.red, f(setup.same),
        *_relation_stack(setup.rels), _ITERATIONS, _INVERSE_STEPS, _TOL_T, _TOL_E, _SETTLING_PASSES,
        bg.E_MIN, bg.E_MAX, MIN_RELATIONS_FREE_EBV, *out.values())
    x0 = out.pop("x0")  # of the run: a dropped candidate's colours are those of column colour_of
    first = out.pop("first_used")
    moving, seen_lo, seen_hi, e_lin = (out.pop(name) for name in ("moving", "seen_lo", "seen_hi", "e_lin"))
    out["n_used"] = out["n_used"].astype(int)
    if not detail and rows != n:
        out.update(dict.fromkeys(("x", "kx", "s", "sc", "v", "ly", "lp")))
    # of the candidates: the relations the run keeps (a dropped one never applies, so is never kept)
    keep = np.zeros(run.size, bool)
    keep[run] = (applies & np.isfinite(x0)).any(axis=0) if fit_ebv else first.any(axis=0)
    if not keep[run].all():
        setup = everyone.subset(keep)
        for name in ("x", "kx", "y", "s", "used", "sc", "v", "c_diag"):
            if out[name] is not None:
                out[name] = out[name].compress(keep[run], axis=1)  # twice as fast as [:, keep]
        if out["ly"] is not None:
            out["ly"] = out["ly"].compress(keep[run], axis=2)
    if not keep.any():
        return setup, keep, (x0, colour_of), None, None, None, None, e_lin
    return setup, keep, (x0, colour_of), out, moving, seen_lo, seen_hi, e_lin


def _relations_to_run(setup, live):
    """Which candidates the kernel runs (``live`` ones, and any whose colour no live one has), and
    for each candidate the column of the run that holds its colour.

    Examples
    --------
    >>> s = _Setup(["B_JC", "V_JC"])
    >>> [rel.key for rel in s.rels]
    ['c10_bv', 'ghb09_bv_giant', 'pm13_bv_hot']
    >>> _relations_to_run(s, np.array([True, False, True]))
    (array([ True, False,  True]), array([0, 0, 1]))
    """
    first = {}
    for i, rel in enumerate(setup.rels):
        if live[i]:
            first.setdefault(rel.bands, i)
    run = np.array([bool(live[i]) or rel.bands not in first for i, rel in enumerate(setup.rels)], bool)
    column = np.cumsum(run) - 1  # a candidate's column among the run
    colour_of = np.array([column[i] if run[i] else column[first[rel.bands]] for i, rel in enumerate(setup.rels)],
                         np.intp)
    return run, colour_of


def _relation_stack(rels):
    """The relations' packed arrays (`Relation._packed`) stacked, padded to the widest, for the kernel.

    ``(scatter, scatter_frac, forms, bounds, needs_logg, coef, pows, counts,
    xs, ts, slopes, n_nodes)``; the kernel takes each relation's first
    ``counts`` terms and ``n_nodes`` nodes.
    """
    packs = [rel._packed for rel in rels]
    r = len(rels)
    width = max(pk[2].shape[1] for pk in packs)
    n_nodes = np.array([pk[5].size for pk in packs], np.intp)
    coef, pows = np.zeros((r, 3, width)), np.zeros((r, 3, width, 3), np.int64)
    xs, ts = np.zeros((r, n_nodes.max())), np.zeros((r, n_nodes.max()))
    slopes = np.zeros((r, n_nodes.max() - 1))
    for i, (_, _, c, pw, _, x, t, sl) in enumerate(packs):
        coef[i, :, :c.shape[1]] = c
        pows[i, :, :c.shape[1]] = pw
        xs[i, :x.size], ts[i, :t.size], slopes[i, :sl.size] = x, t, sl
    return (np.array([rel.scatter for rel in rels], float), np.array([rel.scatter_frac for rel in rels], float),
            np.array([pk[0] for pk in packs], np.int64), np.stack([pk[1] for pk in packs]),
            np.array([rel.needs_logg for rel in rels], bool), coef, pows,
            np.stack([pk[4] for pk in packs]), xs, ts, slopes, n_nodes)


def _reddening_share(info_known, teff_err):
    """Share of the variance of T_eff that is owed to the E(B−V) error, per star.

    It is the variance the error adds: 1 − σ²(T | E(B−V) known) / σ²(T),
    where σ²(T | E known) = 1 / (aᵀ C₀⁻¹ a) is the generalised least squares
    variance with the reddening term left out of the covariance C₀ (and, with
    E(B−V) fitted, E(B−V) held fixed).  The E(B−V) part of the variance at
    the final weights, (L·v)² σ_E², is not this number: a large E(B−V) error
    moves the weights towards a reddening-free combination that amplifies
    the relations' scatter, and that extra scatter is owed to the reddening
    too.

    Parameters
    ----------
    info_known : ndarray (n,)
        aᵀ C₀⁻¹ a, K⁻² (a the design column of T_eff, ∂T_i/∂T; C₀ the
        covariance of the relations without the reddening term), as
        `_combine_pass` returns it.
    teff_err : ndarray (n,)
        1σ error of T_eff with everything included, K.

    Returns
    -------
    ndarray (n,), between 0 and 1 (NaN where there is no estimate).

    Examples
    --------
    Two independent relations of 100 K each give 70.7 K without the
    reddening term; with it the error is 100 K:

    >>> import numpy as np
    >>> share = _reddening_share(np.array([2 / 100.0**2]), np.array([100.0]))
    >>> round(float(share[0]), 3)
    0.5
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        share = 1.0 - 1.0 / (info_known * np.square(teff_err))
    return np.clip(share, 0.0, 1.0)


def _outside(setup, x, col, used, teff, feh, logg):
    """Stars with a measured colour left unused although their T_eff is one its relations cover.

    A colour with no relation for the star's temperature (U−B of a cool
    star, V−Ic of an A star) is simply not calibrated there; a colour whose
    relations do cover the star's calibrated T_eff but whose observed value
    fell outside them points at the photometry or the reddening.
    ``x[:, col[i]]`` is the colour of relation i.
    """
    n = x.shape[0]
    out = np.zeros(n, bool)
    covered, had = {}, {}
    # the temperatures at a relation's colour limits depend on [Fe/H] and log g alone: once for
    # all stars when every star has the same (the usual assumed solar [Fe/H], no log g)
    one_feh, one_logg = _same_for_all(feh), _same_for_all(logg)
    shared = one_feh is not None and one_logg is not None
    for i, rel in enumerate(setup.rels):
        cand = rel.applies_to(logg) & np.isfinite(x[:, col[i]])
        if not cand.any():
            continue
        ends = [rel.teff(np.full(1, c), one_feh, one_logg)[0] if shared else rel.teff(np.full(n, c), feh, logg)[0]
                for c in rel.colour_range]
        lo, hi = np.fmin(*ends), np.fmax(*ends)
        with np.errstate(invalid="ignore"):
            inside_t = cand & (teff >= lo) & (teff <= hi)
        covered[rel.bands] = covered.get(rel.bands, False) | inside_t
        had[rel.bands] = had.get(rel.bands, False) | used[:, i]
    for pair, c in covered.items():
        out |= c & ~had[pair]
    return out


def _same_for_all(values):
    """The one value every star has, as a 1-element array (NaN equals NaN), else None.

    Examples
    --------
    >>> _same_for_all(np.array([np.nan, np.nan])), _same_for_all(np.array([0.0, 0.1]))
    (array([nan]), None)
    """
    v = np.asarray(values, float).ravel()
    if v.size == 0:
        return None
    same = np.isnan(v).all() if np.isnan(v[0]) else (v == v[0]).all()
    return v[:1].copy() if same else None


def _nothing(n, setup, outside, notes):
    """A result without any calibrated temperature."""
    nan = np.full(n, np.nan)
    r = len(setup.rels)
    return CalibratedTeff(nan, nan, nan, nan, nan, nan, nan, np.zeros(n, int), nan, np.zeros(n, int),
                          np.zeros((n, r), bool), tuple(rel.key for rel in setup.rels), PerRelation(n, r),
                          outside, notes, nan)


#: E(B−V) grid, mag, scanned for the start of a fit without a prior
_START_GRID = np.arange(0.0, 3.01, 0.1)


def _start_ebv(setup, m, sig_m, keys, t_ref, feh, feh_err, logg, law, rv):
    """Per star, the grid E(B−V) where the most relations apply and agree best (χ² at fixed E)."""
    n = m.shape[0]
    best = np.full(n, -np.inf)
    start = np.zeros(n)
    for e in _START_GRID:
        ex, de, dt = colour_excess(keys, t_ref, np.full(n, e), law, rv)
        _, _, _, y, s, g, used = _evaluate(setup, m, ex, de, dt, feh, logg)
        zero = np.zeros(n)
        chi2 = _combine_pass(setup, s, g, used, sig_m, feh_err, _scatter(setup, t_ref), np.ones(y.shape),
                             np.zeros(y.shape), y, False, zero, zero, zero)[2]
        score = used.sum(axis=1) * 1e6 - np.where(np.isfinite(chi2), chi2, 1e5)
        better = score > best
        best = np.where(better, score, best)
        start = np.where(better, e, start)
    return start


def _monte_carlo(setup, samples, seed, teff, x, kx, s, used, sig_m, feh, feh_err, logg, scatter,
                 ebv_err, fit_ebv, ly, lp):
    """16th and 84th percentiles of the linear estimator over drawn inputs."""
    rng = np.random.default_rng(seed)
    n, r = x.shape
    nb = sig_m.shape[1]
    lo = np.full(n, np.nan)
    hi = np.full(n, np.nan)
    block = max(1, 200_000 // samples)
    for start in range(0, n, block):
        sl = slice(start, min(n, start + block))
        k = sl.stop - sl.start
        dm = rng.standard_normal((k, samples, nb)) * np.where(np.isfinite(sig_m[sl]), sig_m[sl], 0)[:, None, :]
        de = rng.standard_normal((k, samples)) * ebv_err[sl, None]
        dz = rng.standard_normal((k, samples)) * feh_err[sl, None]
        eps = rng.standard_normal((k, samples, setup.n_slots))
        dx = np.einsum("ib,ksb->ksi", setup.pick, dm)
        if not fit_ebv:
            dx = dx - kx[sl, None, :] * de[:, :, None]
        z = feh[sl, None] + dz
        est = np.zeros((k, samples))  # change of the estimate from the nominal data
        for i, rel in enumerate(setup.rels):
            u = used[sl, i]
            if not u.any():
                continue
            x0 = x[sl, i, None]
            lg = logg[sl, None]
            t0, _ = rel.teff(x0, feh[sl, None], lg)
            xi = x0 + dx[:, :, i]
            ti, inside = rel.teff(xi, z, lg)
            # a draw past the end of the validity range: the tangent at the nominal colour
            lin = t0 + s[sl, i, None] * (xi - x0)
            ti = np.where(inside & np.isfinite(ti), ti, lin) - t0
            ti = ti + scatter[sl, i, None] * eps[:, :, setup.scatter_slot[i]]
            est += np.where(u[:, None], ly[sl, 0, i, None] * np.nan_to_num(ti), 0.0)
        if fit_ebv:
            est += lp[sl, 0, None] * de
        q_lo, q_hi = np.percentile(est, [15.865, 84.135], axis=1)
        lo[sl], hi[sl] = teff[sl] + q_lo, teff[sl] + q_hi
    return lo, hi


def _notes(setup, x, col, logg, feh, fit_ebv, prior_prec, n_used):
    """Per star: the class assumed and why no relation applied (`calibrations.coverage_notes`);
    ``x[:, col[i]]`` is the colour of relation i."""
    colours = {}
    for i, rel in enumerate(setup.rels):
        colours.setdefault(rel.bands, x[:, col[i]])
    notes = coverage_notes(colours, feh=feh, logg=logg, applied=n_used > 0).astype(object)
    short = fit_ebv & (prior_prec == 0) & (n_used > 0) & (n_used < MIN_RELATIONS_FREE_EBV)
    for j in np.nonzero(short)[0]:
        text = (f"no calibration: E(B-V) from the calibrations needs {MIN_RELATIONS_FREE_EBV} "
                f"colours or an E(B-V) prior; {n_used[j]} usable")
        notes[j] = f"{notes[j]}; {text}" if notes[j] else text
    return notes  # str objects: fixed-width text would take hundreds of bytes a star
