"""The numba-compiled kernels behind :mod:`stelltemp.kernels` (see its notes).

Imported only when the first large call loads numba.  Every kernel, and every
compiled helper a kernel calls, is a module-level function: numba's on-disk
cache (``cache=True``) finds a module-level function again in a new process,
while functions built inside another function capture their helpers as
closure cells, whose pickled form differs in every process, so each process
compiled them afresh (about 7 s at the first large call of a run, and in
every Dask worker).
"""

import numba
import numpy as np

from .kernels import BLOCK

_OPTIONS = dict(cache=True, nogil=True, error_model="numpy", fastmath=False)


def _njit(**extra):
    return numba.njit(**_OPTIONS, **extra)


@_njit(inline="always")
def cell_cubic(patches, base, s):
    """Coefficients q0…q3 of the cell's cubic in t, the E(B−V) direction summed at s."""
    q0 = patches[base + 0] + s * (patches[base + 1] + s * (patches[base + 2] + s * patches[base + 3]))
    q1 = patches[base + 4] + s * (patches[base + 5] + s * (patches[base + 6] + s * patches[base + 7]))
    q2 = patches[base + 8] + s * (patches[base + 9] + s * (patches[base + 10] + s * patches[base + 11]))
    q3 = patches[base + 12] + s * (patches[base + 13] + s * (patches[base + 14] + s * patches[base + 15]))
    return q0, q1, q2, q3

@_njit(inline="always")
def node_colour(nodes, kk, as0, as1, bs0, bs1):
    """Colour of temperature node kk at the star's E(B−V) (cubic Hermite in E)."""
    return nodes[2 * kk] * as0 + nodes[2 * kk + 2] * as1 + nodes[2 * kk + 1] * bs0 + nodes[2 * kk + 3] * bs1

@_njit(inline="always")
def clamped_cell(v, last):
    """Cell index of grid coordinate v, clamped to 0…last, and the position in the cell."""
    j = int(np.floor(v))
    if j < 0:
        j = 0
    elif j > last:
        j = last
    return j, v - j

@_njit()
def invert_cells(c, e, nodes, patches, nt, ne, lnt0, h_t, e0, h_e,
                 rj, rj_e0, rj_h, e_min, e_max, steps, bad, no_sol, edge,
                 lnt, slope, flags):
    n = c.size
    n_rj = rj.size
    for k in range(n):
        ck = c[k]
        ek = e[k]
        lnt[k] = np.nan
        slope[k] = np.nan
        e_ok = np.isfinite(ek) and ek >= e_min and ek <= e_max
        if not (e_ok and np.isfinite(ck)):
            flags[k] = bad
            continue
        j, s = clamped_cell((ek - e0) / h_e, ne - 2)
        s2 = s * s
        s3 = s2 * s
        as0 = 2 * s3 - 3 * s2 + 1
        as1 = 3 * s2 - 2 * s3
        bs0 = s3 - 2 * s2 + s
        bs1 = s3 - s2
        # node colours at the star's own E(B−V): cold end (i = 0) and hot end
        kk = j
        c_cold = node_colour(nodes, kk, as0, as1, bs0, bs1)
        kk = (nt - 1) * ne + j
        c_hot = node_colour(nodes, kk, as0, as1, bs0, bs1)
        if ck < c_hot:
            # Rayleigh–Jeans colour at this E, linear on its uniform grid
            m, f = clamped_cell((ek - rj_e0) / rj_h, n_rj - 2)
            limit = rj[m] + f * (rj[m + 1] - rj[m])
            flags[k] = no_sol if ck < limit else edge
            continue
        if ck > c_cold:
            flags[k] = edge
            continue
        flags[k] = 0
        # branch-free bisection: the largest node i with colour(i) > c
        lo = 0
        span = nt - 1
        while span > 1:
            half = span >> 1
            kk = (lo + half) * ne + j
            cm = node_colour(nodes, kk, as0, as1, bs0, bs1)
            lo += half * (cm > ck)
            span -= half
        i = min(lo, nt - 2)
        # the cell's cubic in t with the E direction summed: q0 + q1 t + q2 t² + q3 t³
        base = (i * (ne - 1) + j) * 16
        q0, q1, q2, q3 = cell_cubic(patches, base, s)
        f1 = q0 + q1 + q2 + q3
        t = (ck - q0) / (f1 - q0)
        t = min(max(t, 0.0), 1.0)
        for _ in range(steps):
            p = q0 + t * (q1 + t * (q2 + t * q3)) - ck
            dp = q1 + t * (2 * q2 + 3 * t * q3)
            t_new = min(max(t - p / dp, 0.0), 1.0)
            if t_new == t:  # converged: further steps change nothing
                break
            t = t_new
        dp = q1 + t * (2 * q2 + 3 * t * q3)
        lnt[k] = lnt0 + (i + t) * h_t
        slope[k] = dp / h_t

@_njit()
def evaluate_cells(lnt, ebv, patches, nt, ne, lnt0, h_t, e0, h_e, want_de, value, d_lnt, d_e):
    n = lnt.size
    for k in range(n):
        u = (lnt[k] - lnt0) / h_t
        v = (ebv[k] - e0) / h_e
        # as numpy's fmin(fmax(x, 0), n − 2): NaN goes to cell 0 and stays in t or s
        uu = u if u > 0.0 else 0.0
        vv = v if v > 0.0 else 0.0
        i = int(min(uu, nt - 2.0))
        j = int(min(vv, ne - 2.0))
        t = u - i
        s = v - j
        base = (i * (ne - 1) + j) * 16
        q0, q1, q2, q3 = cell_cubic(patches, base, s)
        value[k] = q0 + t * (q1 + t * (q2 + t * q3))
        d_lnt[k] = (q1 + t * (2 * q2 + 3 * t * q3)) / h_t
        if want_de:
            r0 = patches[base + 1] + s * (2 * patches[base + 2] + 3 * s * patches[base + 3])
            r1 = patches[base + 5] + s * (2 * patches[base + 6] + 3 * s * patches[base + 7])
            r2 = patches[base + 9] + s * (2 * patches[base + 10] + 3 * s * patches[base + 11])
            r3 = patches[base + 13] + s * (2 * patches[base + 14] + 3 * s * patches[base + 15])
            d_e[k] = (r0 + t * (r1 + t * (r2 + t * r3))) / h_e

@_njit()
def cholesky_solve(c, rhs, q, r, low, z, x):
    """x[:r, :q] with c x = rhs (r × r, Cholesky); NaN when c is not positive definite."""
    for j in range(r):
        d = c[j, j]
        for k in range(j):
            d -= low[j, k] * low[j, k]
        low[j, j] = np.sqrt(d)
        for i in range(j + 1, r):
            acc = c[i, j]
            for k in range(j):
                acc -= low[i, k] * low[j, k]
            low[i, j] = acc / low[j, j]
    for col in range(q):
        for i in range(r):
            acc = rhs[i, col]
            for k in range(i):
                acc -= low[i, k] * z[k, col]
            z[i, col] = acc / low[i, i]
        for i in range(r - 1, -1, -1):
            acc = z[i, col]
            for k in range(i + 1, r):
                acc -= low[k, i] * x[k, col]
            x[i, col] = acc / low[i, i]

@_njit()
def combine_cells(s, g, used, var_m, blue, red, same, scatter, feh_var, a, v, y, fit, ebv_var,
                  prior_prec, prior_d, est, cov, chi2, l_y, l_p, c_diag, info_known):
    n, r = s.shape
    p = 2 if fit else 1
    c = np.empty((r, r))
    rhs = np.empty((r, 3))
    low = np.zeros((r, r))
    z = np.empty((r, 3))
    sol = np.empty((r, 3))
    idx = np.empty(r, np.intp)
    for k in range(n):
        # only the relations this star uses: the numpy twin pads the others with identity
        # rows, which add exact zeros to every sum (same bits, fewer operations)
        u = 0
        for i in range(r):
            c_diag[k, i] = 1.0
            if used[k, i]:
                idx[u] = i
                u += 1
        for ii in range(u):
            i = idx[ii]
            bi, ri = blue[i], red[i]
            vi = v[k, i]
            for jj in range(u):
                j = idx[jj]
                bj, rj = blue[j], red[j]
                # D Σ_m Dᵀ: the bands the two colours share, with their signs
                phot = 0.0
                if bi == bj:
                    phot += var_m[k, bi]
                if bi == rj:
                    phot -= var_m[k, bi]
                if ri == bj:
                    phot -= var_m[k, ri]
                if ri == rj:
                    phot += var_m[k, ri]
                cij = s[k, i] * s[k, j] * phot
                cij += scatter[k, i] * scatter[k, j] if same[i, j] else 0.0
                cij += g[k, i] * g[k, j] * feh_var[k]
                cij = cij + 0.0
                c[ii, jj] = cij if fit else cij + vi * v[k, j] * ebv_var[k]
            c_diag[k, i] = c[ii, ii]
            rhs[ii, 0] = a[k, i]
            rhs[ii, 1] = vi
            rhs[ii, 2] = y[k, i]
        cholesky_solve(c, rhs, 3, u, low, z, sol)
        i00 = 0.0
        av = 0.0
        va = 0.0
        vv = 0.0
        for ii in range(u):
            i00 += rhs[ii, 0] * sol[ii, 0]
        for ii in range(u):
            av += rhs[ii, 0] * sol[ii, 1]
        for ii in range(u):
            va += rhs[ii, 1] * sol[ii, 0]
        for ii in range(u):
            vv += rhs[ii, 1] * sol[ii, 1]
        if fit:
            i11 = vv + prior_prec[k]
            det = i00 * i11 - av * va
            cv00, cv01, cv10, cv11 = i11 / det, -av / det, -va / det, i00 / det
        else:
            det = i00
            cv00, cv01, cv10, cv11 = 1.0 / i00, 0.0, 0.0, 0.0
        ok = det > 0 and u > 0
        if not ok:
            cv00, cv01, cv10, cv11 = 1.0, 0.0, 0.0, 1.0
        for q in range(p):
            l_p[k, q] = 0.0
            for i in range(r):
                l_y[k, q, i] = 0.0
        for ii in range(u):
            i = idx[ii]
            if fit:
                l_y[k, 0, i] = cv00 * sol[ii, 0] + cv01 * sol[ii, 1]
                l_y[k, 1, i] = cv10 * sol[ii, 0] + cv11 * sol[ii, 1]
            else:
                l_y[k, 0, i] = cv00 * sol[ii, 0]
        if fit and u > 0:
            l_p[k, 0] = cv01 * prior_prec[k]
            l_p[k, 1] = cv11 * prior_prec[k]
        e0 = 0.0
        for ii in range(u):
            e0 += l_y[k, 0, idx[ii]] * rhs[ii, 2]
        e0 = e0 + l_p[k, 0] * prior_d[k]
        e1 = 0.0
        if fit:
            for ii in range(u):
                e1 += l_y[k, 1, idx[ii]] * rhs[ii, 2]
            e1 = e1 + l_p[k, 1] * prior_d[k]
        # r = y − A e and C⁻¹r = w − Z e
        x2 = 0.0
        for ii in range(u):
            if fit:
                resid = rhs[ii, 2] - (rhs[ii, 0] * e0 + rhs[ii, 1] * e1)
                white = sol[ii, 2] - (sol[ii, 0] * e0 + sol[ii, 1] * e1)
            else:
                resid = rhs[ii, 2] - rhs[ii, 0] * e0
                white = sol[ii, 2] - sol[ii, 0] * e0
            x2 += resid * white
        if fit:
            x2 = x2 + prior_prec[k] * (e1 - prior_d[k]) ** 2
        info_known[k] = i00
        if not fit and ebv_var[k] > 0:
            # aᵀC₀⁻¹a with C₀ = C − σ_E² v vᵀ (Sherman–Morrison: no second factorisation)
            info_known[k] = i00 + ebv_var[k] * (av * av) / (1.0 - ebv_var[k] * vv)
        if ok:
            est[k, 0] = e0
            cov[k, 0, 0] = cv00
            chi2[k] = x2
            if fit:
                est[k, 1] = e1
                cov[k, 0, 1] = cv01
                cov[k, 1, 0] = cv10
                cov[k, 1, 1] = cv11
        else:
            chi2[k] = np.nan
            for q in range(p):
                est[k, q] = np.nan
                for q2 in range(p):
                    cov[k, q, q2] = np.nan


@_njit()
def relation_block(x, z, g, m, form, bounds, needs_logg, coef, pows, counts, xs, ts, slopes,
                   xp, zp, gp, t, d_x, d_z, ok):
    """`Relation.at` for the first m stars of a block, term by term over the block.

    The same operations per star as `Relation._evaluate` (a power factor
    X⁰ is a product with an exact 1.0, which changes no bit), but each
    term's loop runs over the stars, in registers and vector lanes.
    """
    nan = np.nan
    floor = bounds[6]
    scale = bounds[7]
    if form == 2:  # table: linear in the nodes (np.interp's formula), exact at the nodes
        n = xs.size
        for j in range(m):
            xc = x[j]
            if not (xc >= bounds[0] and xc <= bounds[1]):
                continue  # outside: NaN below, no search
            xc = xs[0] if xc < xs[0] else (xs[n - 1] if xc > xs[n - 1] else xc)
            # branch-free search: the last node at or below xc (searchsorted "right", minus one)
            lo = 0
            span = n
            while span > 1:
                half = span >> 1
                lo += half * (xs[lo + half] <= xc)
                span -= half
            seg = min(lo, n - 2)
            t[j] = ts[lo] if xs[lo] == xc else slopes[seg] * (xc - xs[seg]) + ts[seg]
            d_x[j] = slopes[seg]
            d_z[j] = 0.0
    else:
        for j in range(m):
            ze = z[j] if z[j] >= floor else floor  # the paper's floor (−inf: none)
            xp[0, j] = 1.0
            xp[1, j] = x[j]
            zp[0, j] = 1.0
            zp[1, j] = ze
            gp[0, j] = 1.0
            gp[1, j] = g[j]
        # powers as repeated products, as `Relation._poly` forms them: x³ = (x·x)·x
        for e in range(2, xp.shape[0]):
            for j in range(m):
                xp[e, j] = xp[e - 1, j] * xp[1, j]
        for e in range(2, zp.shape[0]):
            for j in range(m):
                zp[e, j] = zp[e - 1, j] * zp[1, j]
        for e in range(2, gp.shape[0]):
            for j in range(m):
                gp[e, j] = gp[e - 1, j] * gp[1, j]
        for d in range(3):
            acc = t if d == 0 else (d_x if d == 1 else d_z)
            for j in range(m):
                acc[j] = 0.0
            for i in range(counts[d]):
                c = coef[d, i]
                a = pows[d, i, 0]
                b = pows[d, i, 1]
                r = pows[d, i, 2]
                for j in range(m):
                    acc[j] = acc[j] + c * xp[a, j] * zp[b, j] * gp[r, j]
        for j in range(m):
            p = t[j]
            if form == 0:  # θ = scale / T
                p2 = p * p
                t[j] = scale / p
                d_x[j] = -scale * d_x[j] / p2
                d_z[j] = -scale * d_z[j] / p2
                ok[j] = p > 0.0
            else:
                t[j] = scale * p
                d_x[j] = scale * d_x[j]
                d_z[j] = scale * d_z[j]
                ok[j] = t[j] > 0.0
    for j in range(m):
        xj = x[j]
        zj = z[j]
        inside = xj >= bounds[0] and xj <= bounds[1] and zj >= bounds[2] and zj <= bounds[3]
        if needs_logg:
            inside = inside and g[j] >= bounds[4] and g[j] < bounds[5]
        if form != 2:
            inside = inside and ok[j]
        ok[j] = inside
        if not inside:
            t[j] = nan
            d_x[j] = nan
            d_z[j] = nan
        elif zj < floor:  # held at the floor: no [Fe/H] dependence
            d_z[j] = 0.0

@_njit()
def relation_scratch(coef_pows, m):
    """Blocks of the powers of X, [Fe/H] and log g that a relation's terms use."""
    top = np.ones(3, np.int64)
    for d in range(coef_pows.shape[0]):
        for i in range(coef_pows.shape[1]):
            for v in range(3):
                top[v] = max(top[v], coef_pows[d, i, v])
    return np.empty((top[0] + 1, m)), np.empty((top[1] + 1, m)), np.empty((top[2] + 1, m))

@_njit()
def relation_cells(x, z, g, form, bounds, needs_logg, coef, pows, counts, xs, ts, slopes,
                   t, d_x, d_z, inside):
    n = x.size
    xp, zp, gp = relation_scratch(pows, BLOCK)
    for k0 in range(0, n, BLOCK):
        m = min(BLOCK, n - k0)
        relation_block(x[k0:k0 + m], z[k0:k0 + m], g[k0:k0 + m], m, form, bounds, needs_logg, coef, pows,
                       counts, xs, ts, slopes, xp, zp, gp, t[k0:k0 + m], d_x[k0:k0 + m], d_z[k0:k0 + m],
                       inside[k0:k0 + m])

@_njit()
def linearise_relation(x, t_hat, z, g, used, steps, form, bounds, needs_logg, coef, pows, counts,
                       xs, ts, slopes, y, s, gz):
    lo = bounds[0]
    hi = bounds[1]
    xp, zp, gp = relation_scratch(pows, BLOCK)
    # a block of stars to invert: where each came from, its colour now and its inputs
    where = np.empty(BLOCK, np.intp)
    xm, zb, gb, tb = np.empty(BLOCK), np.empty(BLOCK), np.empty(BLOCK), np.empty(BLOCK)
    at_t, at_s, at_g, at_ok = np.empty(BLOCK), np.empty(BLOCK), np.empty(BLOCK), np.empty(BLOCK, np.bool_)
    # per star of the block (by its first slot): the final colour and evaluation
    fin_x, fin_t, fin_s, fin_g = np.empty(BLOCK), np.empty(BLOCK), np.empty(BLOCK), np.empty(BLOCK)
    fin_ok = np.empty(BLOCK, np.bool_)
    slot = np.empty(BLOCK, np.intp)
    n = x.size
    k = 0
    while k < n:
        m = 0
        while k < n and m < BLOCK:
            if used[k] and np.isfinite(t_hat[k]):
                where[m] = k
                v = x[k]
                xm[m] = lo if v < lo else (hi if v > hi else v)
                zb[m] = z[k]
                gb[m] = g[k]
                tb[m] = t_hat[k]
                slot[m] = m
                m += 1
            k += 1
        total = m
        for _ in range(steps):
            if m == 0:
                break
            relation_block(xm, zb, gb, m, form, bounds, needs_logg, coef, pows, counts, xs, ts, slopes,
                           xp, zp, gp, at_t, at_s, at_g, at_ok)
            # keep the stars still moving at the front; an exact fixed point ends a star's steps
            # with the evaluation just made
            keep = 0
            for j in range(m):
                step = xm[j] + (tb[j] - at_t[j]) / at_s[j]
                step = lo if step < lo else (hi if step > hi else step)
                if step == xm[j]:
                    q = slot[j]
                    fin_x[q], fin_t[q], fin_s[q], fin_g[q], fin_ok[q] = xm[j], at_t[j], at_s[j], at_g[j], at_ok[j]
                else:
                    slot[keep], xm[keep], zb[keep], gb[keep], tb[keep] = slot[j], step, zb[j], gb[j], tb[j]
                    keep += 1
            m = keep
        if m:
            relation_block(xm, zb, gb, m, form, bounds, needs_logg, coef, pows, counts, xs, ts, slopes,
                           xp, zp, gp, at_t, at_s, at_g, at_ok)
            for j in range(m):
                q = slot[j]
                fin_x[q], fin_t[q], fin_s[q], fin_g[q], fin_ok[q] = xm[j], at_t[j], at_s[j], at_g[j], at_ok[j]
        for q in range(total):
            kk = where[q]
            target = t_hat[kk]
            si = fin_s[q]
            if fin_ok[q] and abs(fin_t[q] - target) < 0.5 and np.isfinite(si):
                y[kk] = target + si * (x[kk] - fin_x[q])
                s[kk] = si
                gi = fin_g[q]
                gz[kk] = gi if np.isfinite(gi) else 0.0


KERNELS = {"invert_cells": invert_cells, "evaluate_cells": evaluate_cells, "combine_cells": combine_cells,
           "relation_cells": relation_cells, "linearise_relation": linearise_relation}
