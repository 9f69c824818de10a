"""The batched combination equals a plain one-star-at-a-time computation.

`stelltemp.engine.combine` solves every star's generalised least squares in
one batched pass (unused relations padded with identity rows) and stops
computing a star once it has converged.  These tests hold it to the direct
per-star formulas (Aitken 1935, Proc. R. Soc. Edinburgh 55, 42: T̂ =
(AᵀC⁻¹A)⁻¹AᵀC⁻¹y on the relations the star uses) and to calls made one star
at a time, to 1e-9 relative.
"""

import numpy as np
import pytest

from stelltemp import bandgrid as bg
from stelltemp.engine import combine
from stelltemp.patterns import distinct_int_rows, unique_rows

KEYS5 = ["B_JC", "V_JC", "Ic_JC", "J_2MASS", "Ks_2MASS"]


def _direct_gls(c, design, y, used, prec, prior_d):
    """One star at a time, only the rows and columns it uses (the textbook estimator)."""
    n, r, p = design.shape
    est = np.full((n, p), np.nan)
    cov = np.full((n, p, p), np.nan)
    chi2 = np.full(n, np.nan)
    for k in range(n):
        cols = np.flatnonzero(used[k])
        if cols.size == 0:
            continue
        ci = np.linalg.inv(c[k][np.ix_(cols, cols)])
        a = design[k][cols]
        info = a.T @ ci @ a
        rhs = a.T @ ci @ y[k, cols]
        if p > 1:
            info[1, 1] += prec[k]
            rhs[1] += prec[k] * prior_d[k]
        if np.linalg.det(info) <= 0:
            continue
        cv = np.linalg.inv(info)
        e = cv @ rhs
        res = y[k, cols] - a @ e
        chi2[k] = res @ ci @ res + (prec[k] * (e[1] - prior_d[k]) ** 2 if p > 1 else 0.0)
        est[k], cov[k] = e, cv
    return est, cov, chi2


@pytest.mark.parametrize("p", [1, 2])
def test_batched_gls_equals_the_direct_estimator(p):
    rng = np.random.default_rng(7)
    n, r = 3000, 6
    used = rng.random((n, r)) < 0.6
    root = rng.normal(0, 1, (n, r, r))
    c = root @ np.swapaxes(root, 1, 2) + r * np.eye(r)
    both = used[:, :, None] & used[:, None, :]
    c = np.where(both, c, 0.0) + np.where(used[:, :, None], 0.0, np.eye(r))  # as _covariance pads
    design = np.where(used[:, :, None], rng.normal(1, 0.3, (n, r, p)), rng.normal(0, 5, (n, r, p)))
    y = np.where(used, rng.normal(5000, 300, (n, r)), np.nan)
    prec = np.where(rng.random(n) < 0.5, rng.uniform(10, 1000, n), 0.0)
    prior_d = rng.normal(0, 0.1, n)
    est, cov, chi2, ly, lp, _ = combine._gls(c, design, y, used, prec, prior_d)
    want_est, want_cov, want_chi2 = _direct_gls(c, design, y, used, prec, prior_d)
    # well posed: as many relations as parameters (or the prior); else singular to rounding
    posed = used.sum(axis=1) + (prec > 0) * (p > 1) >= p
    ok = np.isfinite(want_est[:, 0]) & posed
    assert ok.sum() > n // 2
    np.testing.assert_array_equal(np.isfinite(est[:, 0])[posed], ok[posed])
    assert not np.isfinite(est[~used.any(axis=1)]).any()
    np.testing.assert_allclose(est[ok], want_est[ok], rtol=1e-9, atol=0)
    np.testing.assert_allclose(cov[ok], want_cov[ok], rtol=1e-9, atol=1e-12 * np.abs(want_cov[ok]).max())
    np.testing.assert_allclose(chi2[ok], want_chi2[ok], rtol=1e-9, atol=1e-9)
    # the linear estimator reproduces the estimate and ignores the relations a star does not use
    lin = np.einsum("npr,nr->np", ly, np.where(used, y, 0.0)) + lp * prior_d[:, None]
    np.testing.assert_allclose(lin[ok], est[ok], rtol=1e-9)
    assert np.all(ly[~np.broadcast_to(used[:, None, :], ly.shape)] == 0.0)


def _stars(n, keys, seed):
    rng = np.random.default_rng(seed)
    t = np.exp(rng.uniform(np.log(3000), np.log(20000), n))
    e = rng.uniform(0, 1, n)
    m = np.stack([bg.band_table(k).evaluate(np.log(t), e, want_de=False)[0] for k in keys], 1)
    m += rng.normal(0, 0.02, m.shape) + rng.uniform(5, 15, (n, 1))
    m[rng.random(m.shape) < 0.05] = np.nan
    sig = rng.uniform(0.005, 0.05, m.shape)
    feh = np.where(rng.random(n) < 0.3, np.nan, rng.uniform(-2, 0.4, n))
    logg = np.where(rng.random(n) < 0.5, np.nan, rng.uniform(1, 5, n))
    return (m, sig, t * rng.normal(1, 0.03, n), e + rng.normal(0, 0.03, n), feh, rng.uniform(0, 0.2, n),
            logg)


FIELDS = ("teff", "teff_err", "ebv", "ebv_err", "chi2", "dof", "n_used", "used", "teff_each", "err_each",
          "outside", "ebv_share")


@pytest.mark.parametrize("fit_ebv, ebv_err", [(False, 0.03), (True, 0.03), (True, 0.0)])
def test_a_call_over_many_stars_equals_calls_one_star_at_a_time(fit_ebv, ebv_err):
    """Converged stars drop out of the iterations; every star must still get its own answer."""
    m, sig, tbb, e, feh, feh_err, logg = _stars(30, KEYS5, 11)
    kw = dict(fit_ebv=fit_ebv, feh=feh, feh_err=feh_err, logg=logg)
    err = np.full(len(e), ebv_err)
    whole = combine.calibrated_teff(m, sig, KEYS5, tbb, e, err, **kw)
    assert np.isfinite(whole.teff).sum() > 10
    for k in range(len(e)):
        one = combine.calibrated_teff(m[k:k + 1], sig[k:k + 1], KEYS5, tbb[k:k + 1], e[k:k + 1], err[k:k + 1],
                                      **{q: v[k:k + 1] for q, v in kw.items() if q != "fit_ebv"},
                                      fit_ebv=fit_ebv)
        cols = [whole.keys.index(key) for key in one.keys]
        for f in FIELDS:
            a, b = np.asarray(getattr(whole, f), float)[k], np.asarray(getattr(one, f), float)[0]
            if a.ndim:
                a = a[cols]
            np.testing.assert_allclose(a, b, rtol=1e-9, atol=1e-12, err_msg=f"{f} of star {k}")
        assert whole.notes[k] == one.notes[0]


def test_unique_rows_matches_numpy():
    rng = np.random.default_rng(3)
    for k in (0, 1, 5, 17, 63, 70):
        bits = rng.random((2000, k)) < 0.2
        pats, inv = unique_rows(bits)
        want, want_inv = np.unique(bits, axis=0, return_inverse=True)
        np.testing.assert_array_equal(pats, want)
        np.testing.assert_array_equal(inv, np.asarray(want_inv).reshape(-1))


def test_distinct_int_rows_matches_numpy():
    rng = np.random.default_rng(4)
    cases = [rng.integers(-3, 4, (3000, 6)),  # packed into one integer
             rng.integers(-2**40, 2**40, (3000, 3)),  # too wide to pack: whole-row sort
             np.zeros((5, 0), np.int64), np.zeros((0, 4), np.int64)]
    cases[0][:, 2] = 7  # a constant column
    for keys in cases:
        first, inv = distinct_int_rows(keys)
        _, want_first, want_inv = np.unique(keys, axis=0, return_index=True, return_inverse=True)
        np.testing.assert_array_equal(first, want_first)
        np.testing.assert_array_equal(inv, np.asarray(want_inv).reshape(-1))
