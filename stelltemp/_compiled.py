"""The numba-compiled kernels behind :mod:`stelltemp.kernels` (see its notes).

Imported only when the first large call loads numba.  Every kernel, and every
compiled helper a kernel calls, is a module-level function: numba's on-disk
cache (``cache=True``) finds a module-level function again in a new process,
while functions built inside another function capture their helpers as
closure cells, whose pickled form differs in every process, so each process
compiled them afresh (about 7 s at the first large call of a run, and in
every Dask worker).
"""

import math

import numba
import numba.core.cpu
import numpy as np

from .kernels import BLOCK

_OPTIONS = dict(cache=True, nogil=True, error_model="numpy", fastmath=False)
# The compute functions are compiled without numba's reference-counting runtime: with it, each
# array view or array handed to an inlined helper inside a per-star loop costs an atomic
# incref/decref call pair that its pruning pass often cannot remove (about 100 ns a star in
# the combination, 10x its arithmetic).  Such a function cannot allocate, so each kernel that
# needs work arrays is a thin wrapper (`_njit_alloc`) that allocates them and calls its core.
_NO_RUNTIME = {"_nrt": False} if hasattr(numba.core.cpu.CPUTargetOptions, "_nrt") else {}


def _njit(**extra):
    """Compile a compute function (no allocation inside)."""
    return numba.njit(**_OPTIONS, **_NO_RUNTIME, **extra)


def _njit_alloc(**extra):
    """Compile a function that allocates arrays (the work arrays of a kernel's core)."""
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

@_njit_alloc()
def invert_cells(c, e, nodes, patches, nt, ne, lnt0, h_t, e0, h_e,
                 rj, rj_e0, rj_h, e_min, e_max, steps, bad, no_sol, edge,
                 lnt, slope, flags):
    """Allocates the work arrays of a block of stars and runs `invert_rows`."""
    invert_rows(c, e, nodes, patches, nt, ne, lnt0, h_t, e0, h_e, rj, rj_e0, rj_h, e_min, e_max, steps,
                bad, no_sol, edge, lnt, slope, flags,
                (np.empty(BLOCK, np.intp), np.empty(BLOCK), np.empty(BLOCK, np.intp), np.empty(BLOCK),
                 np.empty((BLOCK, 4)), np.empty(BLOCK, np.intp), np.empty((BLOCK, 4)), np.empty(BLOCK),
                 np.empty(BLOCK, np.intp)))


@_njit()
def invert_rows(c, e, nodes, patches, nt, ne, lnt0, h_t, e0, h_e,
                rj, rj_e0, rj_h, e_min, e_max, steps, bad, no_sol, edge,
                lnt, slope, flags, work):
    """`invert_colour` star by star (the same steps as `colour._invert_block`), in blocks of `BLOCK`.

    The bisection runs level by level over the block's stars, and the Newton
    steps step by step over those still moving: each star's steps are its
    own, in its own order (the same bits), but the steps of different stars,
    which do not depend on each other, overlap in the processor instead of
    one star's chain of dependent reads and divisions after another.
    """
    n = c.size
    n_rj = rj.size
    # per star of the block: its row, colour, E cell and position, Hermite weights in E, T node (the
    # bisection's low end, then its cell), the cell's cubic in t, the position in it; the stars still moving
    where, cks, cell_e, pos_e, weights, lo, cubic, t_in, moving = work
    for k0 in range(0, n, BLOCK):
        m = 0
        for k in range(k0, min(n, k0 + BLOCK)):
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
            c_cold = node_colour(nodes, j, as0, as1, bs0, bs1)
            c_hot = node_colour(nodes, (nt - 1) * ne + j, as0, as1, bs0, bs1)
            if ck < c_hot:
                # Rayleigh–Jeans colour at this E, linear on its uniform grid
                mm, f = clamped_cell((ek - rj_e0) / rj_h, n_rj - 2)
                limit = rj[mm] + f * (rj[mm + 1] - rj[mm])
                flags[k] = no_sol if ck < limit else edge
                continue
            if ck > c_cold:
                flags[k] = edge
                continue
            flags[k] = 0
            where[m], cks[m], cell_e[m], pos_e[m], lo[m] = k, ck, j, s, 0
            weights[m, 0], weights[m, 1], weights[m, 2], weights[m, 3] = as0, as1, bs0, bs1
            m += 1
        # branch-free bisection: the largest node i with colour(i) > c
        span = nt - 1
        while span > 1:
            half = span >> 1
            for q in range(m):
                cm = node_colour(nodes, (lo[q] + half) * ne + cell_e[q], weights[q, 0], weights[q, 1],
                                 weights[q, 2], weights[q, 3])
                lo[q] += half * (cm > cks[q])
            span -= half
        for q in range(m):
            i = min(lo[q], nt - 2)
            lo[q] = i
            # the cell's cubic in t with the E direction summed: q0 + q1 t + q2 t² + q3 t³
            q0, q1, q2, q3 = cell_cubic(patches, (i * (ne - 1) + cell_e[q]) * 16, pos_e[q])
            cubic[q, 0], cubic[q, 1], cubic[q, 2], cubic[q, 3] = q0, q1, q2, q3
            f1 = q0 + q1 + q2 + q3
            t = (cks[q] - q0) / (f1 - q0)
            t_in[q] = min(max(t, 0.0), 1.0)
            moving[q] = q
        # Newton steps in t, also step by step over the stars still moving
        na = m
        for _ in range(steps):
            keep = 0
            for a in range(na):
                q = moving[a]
                t = t_in[q]
                q0, q1, q2, q3 = cubic[q, 0], cubic[q, 1], cubic[q, 2], cubic[q, 3]
                p = q0 + t * (q1 + t * (q2 + t * q3)) - cks[q]
                dp = q1 + t * (2 * q2 + 3 * t * q3)
                t_new = min(max(t - p / dp, 0.0), 1.0)
                if t_new != t:  # else converged: further steps change nothing
                    t_in[q] = t_new
                    moving[keep] = q
                    keep += 1
            na = keep
        for q in range(m):
            k, t = where[q], t_in[q]
            lnt[k] = lnt0 + (lo[q] + t) * h_t
            _, slope[k] = cubic_in_t(cubic[q, 0], cubic[q, 1], cubic[q, 2], cubic[q, 3], t, h_t)

@_njit(inline="always")
def temperature_cell(lnt, nt, lnt0, h_t):
    """A table's T cell of ln T and the position in it (as numpy's fmin(fmax(u, 0), n − 2): NaN goes
    to cell 0 and stays in the position)."""
    u = (lnt - lnt0) / h_t
    uu = u if u > 0.0 else 0.0
    i = int(min(uu, nt - 2.0))
    return i, u - i

@_njit(inline="always")
def cubic_in_t(q0, q1, q2, q3, t, h_t):
    """Value and ∂/∂lnT of a cell's cubic in t."""
    return q0 + t * (q1 + t * (q2 + t * q3)), (q1 + t * (2 * q2 + 3 * t * q3)) / h_t

@_njit(inline="always")
def reddening_cell(ebv, ne, e0, h_e):
    """A table's E(B−V) cell and the position in it (as `temperature_cell`)."""
    v = (ebv - e0) / h_e
    vv = v if v > 0.0 else 0.0
    j = int(min(vv, ne - 2.0))
    return j, v - j

@_njit(inline="always")
def table_point(lnt, ebv, patches, nt, ne, lnt0, h_t, e0, h_e, want_de):
    """Value, ∂/∂lnT and ∂/∂E (0.0 unless ``want_de``) of a bicubic Hermite table at one point."""
    i, t = temperature_cell(lnt, nt, lnt0, h_t)
    j, s = reddening_cell(ebv, ne, e0, h_e)
    base = (i * (ne - 1) + j) * 16
    q0, q1, q2, q3 = cell_cubic(patches, base, s)
    value, d_lnt = cubic_in_t(q0, q1, q2, q3, t, h_t)
    d_e = 0.0
    if want_de:
        r0 = patches[base + 1] + s * (2 * patches[base + 2] + 3 * s * patches[base + 3])
        r1 = patches[base + 5] + s * (2 * patches[base + 6] + 3 * s * patches[base + 7])
        r2 = patches[base + 9] + s * (2 * patches[base + 10] + 3 * s * patches[base + 11])
        r3 = patches[base + 13] + s * (2 * patches[base + 14] + 3 * s * patches[base + 15])
        d_e = (r0 + t * (r1 + t * (r2 + t * r3))) / h_e
    return value, d_lnt, d_e

@_njit_alloc()
def unreddened_cubics(patches, offsets, tab_shape, tab_grid):
    """Each band's cubics in t at E(B−V) = 0, one per T cell, (bands, cells, 4).

    They are `cell_cubic` at the E cell and position that `table_point`
    finds for E(B−V) = 0 (0.5 / 0.1 is not exactly 5, so the position is not
    0), so `excess_block` gives `band_point`'s bits at E = 0 from 32 bytes
    a cell instead of the cell's 128, in a few kB instead of the table's MB.
    """
    nb = tab_shape.shape[0]
    cells = 1
    for b in range(nb):
        cells = max(cells, tab_shape[b, 0] - 1)
    rows = np.empty((nb, cells, 4))
    for b in range(nb):
        nt, ne = tab_shape[b, 0], tab_shape[b, 1]
        j, s = reddening_cell(0.0, ne, tab_grid[b, 2], tab_grid[b, 3])
        band = patches[offsets[b]:offsets[b + 1]]
        for i in range(nt - 1):
            rows[b, i, 0], rows[b, i, 1], rows[b, i, 2], rows[b, i, 3] = cell_cubic(band, (i * (ne - 1) + j) * 16, s)
    return rows

@_njit(inline="always")
def excess_block(na, lnt, ebv, patches, offsets, tab_shape, tab_grid, unreddened, ex, de, dt):
    """Each band's colour excess (at (ln T, E) minus at (ln T, 0)), its ∂/∂E and its ∂/∂lnT for the
    first ``na`` stars of a block, into ``ex[b, q]``, ``de[b, q]``, ``dt[b, q]``.

    A band at a time over the stars: the loop over stars has no calls, so the processor overlaps
    consecutive stars' independent table reads (it does not run in vector lanes: see
    DEVELOPERS.md on gathers); the same operations per star, so the same bits.  E(B−V) = 0 from
    the band's `unreddened_cubics`, which give `table_point`'s bits there.
    """
    for b in range(tab_shape.shape[0]):
        band = patches[offsets[b]:offsets[b + 1]]
        nt, ne = tab_shape[b, 0], tab_shape[b, 1]
        lnt0, h_t, e0, h_e = tab_grid[b, 0], tab_grid[b, 1], tab_grid[b, 2], tab_grid[b, 3]
        for q in range(na):
            red_v, red_t, red_e = table_point(lnt[q], ebv[q], band, nt, ne, lnt0, h_t, e0, h_e, True)
            i, t = temperature_cell(lnt[q], nt, lnt0, h_t)
            int_v, int_t = cubic_in_t(unreddened[b, i, 0], unreddened[b, i, 1], unreddened[b, i, 2],
                                      unreddened[b, i, 3], t, h_t)
            ex[b, q] = red_v - int_v
            de[b, q] = red_e
            dt[b, q] = red_t - int_t

@_njit()
def evaluate_cells(lnt, ebv, patches, nt, ne, lnt0, h_t, e0, h_e, want_de, value, d_lnt, d_e):
    for k in range(lnt.size):
        value[k], d_lnt[k], de = table_point(lnt[k], ebv[k], patches, nt, ne, lnt0, h_t, e0, h_e, want_de)
        if want_de:
            d_e[k] = de

@_njit()
def cholesky_solve(c, rhs, r, low, z, x):
    """x[:r, :3] with c x = rhs (r × r, Cholesky); NaN when c is not positive definite.

    The three right-hand sides are substituted side by side: each column's
    operations are those of substituting it alone, in the same order (the
    same bits), but the three chains of dependent divisions overlap in the
    processor instead of running one after another.
    """
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
    for i in range(r):
        a0, a1, a2 = rhs[i, 0], rhs[i, 1], rhs[i, 2]
        for k in range(i):
            a0, a1, a2 = less_multiple(a0, a1, a2, low[i, k], z, k)
        d = low[i, i]
        z[i, 0], z[i, 1], z[i, 2] = a0 / d, a1 / d, a2 / d
    for i in range(r - 1, -1, -1):
        a0, a1, a2 = z[i, 0], z[i, 1], z[i, 2]
        for k in range(i + 1, r):
            a0, a1, a2 = less_multiple(a0, a1, a2, low[k, i], x, k)
        d = low[i, i]
        x[i, 0], x[i, 1], x[i, 2] = a0 / d, a1 / d, a2 / d

@_njit(inline="always")
def less_multiple(a0, a1, a2, f, rows, k):
    """(a0, a1, a2) minus f times row k of ``rows`` (three columns)."""
    return a0 - f * rows[k, 0], a1 - f * rows[k, 1], a2 - f * rows[k, 2]

@_njit(inline="always")
def combine_star(s, g, used, var_m, blue, red, same, scatter, feh_var, a, v, y, fit, ebv_var,
                 prior_prec, prior_d, est, cov, l_y, l_p, c_diag, c, rhs, low, z, sol, idx):
    """One star of `combine_cells` (its rows as 1-D arrays); returns (χ², aᵀC₀⁻¹a)."""
    r = s.size
    p = 2 if fit else 1
    # only the relations this star uses: the numpy twin pads the others with identity
    # rows, which add exact zeros to every sum (same bits, fewer operations)
    u = 0
    for i in range(r):
        c_diag[i] = 1.0
        if used[i]:
            idx[u] = i
            u += 1
    for ii in range(u):
        i = idx[ii]
        bi, ri = blue[i], red[i]
        vi = v[i]
        # the lower triangle only, all that `cholesky_solve` reads: the numpy twin's full matrix is
        # exactly symmetric (each entry a sum of at most two nonzero terms, in either order the same)
        for jj in range(ii + 1):
            j = idx[jj]
            bj, rj = blue[j], red[j]
            # D Σ_m Dᵀ: the bands the two colours share, with their signs
            phot = 0.0
            if bi == bj:
                phot += var_m[bi]
            if bi == rj:
                phot -= var_m[bi]
            if ri == bj:
                phot -= var_m[ri]
            if ri == rj:
                phot += var_m[ri]
            cij = s[i] * s[j] * phot
            cij += scatter[i] * scatter[j] if same[i, j] else 0.0
            cij += g[i] * g[j] * feh_var
            cij = cij + 0.0
            c[ii, jj] = cij if fit else cij + vi * v[j] * ebv_var
        c_diag[i] = c[ii, ii]
        rhs[ii, 0] = a[i]
        rhs[ii, 1] = vi
        rhs[ii, 2] = y[i]
    cholesky_solve(c, rhs, u, low, z, sol)
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
        i11 = vv + prior_prec
        det = i00 * i11 - av * va
        cv00, cv01, cv10, cv11 = i11 / det, -av / det, -va / det, i00 / det
    else:
        det = i00
        cv00, cv01, cv10, cv11 = 1.0 / i00, 0.0, 0.0, 0.0
    ok = det > 0 and u > 0
    if not ok:
        cv00, cv01, cv10, cv11 = 1.0, 0.0, 0.0, 1.0
    for q in range(p):
        l_p[q] = 0.0
        for i in range(r):
            l_y[q, i] = 0.0
    for ii in range(u):
        i = idx[ii]
        if fit:
            l_y[0, i] = cv00 * sol[ii, 0] + cv01 * sol[ii, 1]
            l_y[1, i] = cv10 * sol[ii, 0] + cv11 * sol[ii, 1]
        else:
            l_y[0, i] = cv00 * sol[ii, 0]
    if fit and u > 0:
        l_p[0] = cv01 * prior_prec
        l_p[1] = cv11 * prior_prec
    e0 = 0.0
    for ii in range(u):
        e0 += l_y[0, idx[ii]] * rhs[ii, 2]
    e0 = e0 + l_p[0] * prior_d
    e1 = 0.0
    if fit:
        for ii in range(u):
            e1 += l_y[1, idx[ii]] * rhs[ii, 2]
        e1 = e1 + l_p[1] * prior_d
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
        x2 = x2 + prior_prec * (e1 - prior_d) ** 2
    info_known = i00
    if not fit and ebv_var > 0:
        # aᵀC₀⁻¹a with C₀ = C − σ_E² v vᵀ (Sherman–Morrison: no second factorisation)
        info_known = i00 + ebv_var * (av * av) / (1.0 - ebv_var * vv)
    if ok:
        est[0] = e0
        cov[0, 0] = cv00
        if fit:
            est[1] = e1
            cov[0, 1] = cv01
            cov[1, 0] = cv10
            cov[1, 1] = cv11
        return x2, info_known
    for q in range(p):
        est[q] = np.nan
        for q2 in range(p):
            cov[q, q2] = np.nan
    return np.nan, info_known


@_njit_alloc()
def combine_cells(s, g, used, var_m, blue, red, same, scatter, feh_var, a, v, y, fit, ebv_var,
                  prior_prec, prior_d, est, cov, chi2, l_y, l_p, c_diag, info_known):
    combine_rows(s, g, used, var_m, blue, red, same, scatter, feh_var, a, v, y, fit, ebv_var,
                 prior_prec, prior_d, est, cov, chi2, l_y, l_p, c_diag, info_known, combine_scratch(s.shape[1]))


@_njit()
def combine_rows(s, g, used, var_m, blue, red, same, scatter, feh_var, a, v, y, fit, ebv_var,
                 prior_prec, prior_d, est, cov, chi2, l_y, l_p, c_diag, info_known, work):
    """The loop of `combine_cells` over its work arrays."""
    n = s.shape[0]
    c, rhs, low, z, sol, idx = work
    for k in range(n):
        chi2[k], info_known[k] = combine_star(
            s[k], g[k], used[k], var_m[k], blue, red, same, scatter[k], feh_var[k], a[k], v[k], y[k], fit,
            ebv_var[k], prior_prec[k], prior_d[k], est[k], cov[k], l_y[k], l_p[k], c_diag[k],
            c, rhs, low, z, sol, idx)


@_njit_alloc()
def combine_scratch(r):
    """Work arrays of `combine_star` for r relations."""
    return (np.empty((r, r)), np.empty((r, 3)), np.zeros((r, r)), np.empty((r, 3)), np.empty((r, 3)),
            np.empty(r, np.intp))


@_njit(inline="always")
def inside_range(x, z, g, bounds, needs_logg):
    """Whether colour x, [Fe/H] z (and log g g) lie in a relation's validity ranges."""
    inside = x >= bounds[0] and x <= bounds[1] and z >= bounds[2] and z <= bounds[3]
    if needs_logg:
        inside = inside and g >= bounds[4] and g < bounds[5]
    return inside


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
            # the last node at or below xc (searchsorted "right", minus one), as a count of the nodes
            # at or below it: no branch to mispredict, and the loop runs in vector lanes (a binary
            # search compiled to jumps that went the wrong way half the time)
            lo = 0
            for q in range(1, n):
                lo += xs[q] <= xc
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
        zj = z[j]
        inside = inside_range(x[j], zj, g[j], bounds, needs_logg)
        if form != 2:
            inside = inside and ok[j]
        ok[j] = inside
        if not inside:
            t[j] = nan
            d_x[j] = nan
            d_z[j] = nan
        elif zj < floor:  # held at the floor: no [Fe/H] dependence
            d_z[j] = 0.0

@_njit_alloc()
def relation_scratch(coef_pows, m):
    """Blocks of the powers of X, [Fe/H] and log g that a relation's terms use."""
    top = np.ones(3, np.int64)
    for d in range(coef_pows.shape[0]):
        for i in range(coef_pows.shape[1]):
            for v in range(3):
                top[v] = max(top[v], coef_pows[d, i, v])
    return np.empty((top[0] + 1, m)), np.empty((top[1] + 1, m)), np.empty((top[2] + 1, m))

@_njit_alloc()
def relation_cells(x, z, g, form, bounds, needs_logg, coef, pows, counts, xs, ts, slopes,
                   t, d_x, d_z, inside):
    relation_rows(x, z, g, form, bounds, needs_logg, coef, pows, counts, xs, ts, slopes,
                  t, d_x, d_z, inside, relation_scratch(pows, BLOCK))


@_njit()
def relation_rows(x, z, g, form, bounds, needs_logg, coef, pows, counts, xs, ts, slopes,
                  t, d_x, d_z, inside, powers):
    """The loop of `relation_cells` over its work arrays."""
    n = x.size
    xp, zp, gp = powers
    for k0 in range(0, n, BLOCK):
        m = min(BLOCK, n - k0)
        relation_block(x[k0:k0 + m], z[k0:k0 + m], g[k0:k0 + m], m, form, bounds, needs_logg, coef, pows,
                       counts, xs, ts, slopes, xp, zp, gp, t[k0:k0 + m], d_x[k0:k0 + m], d_z[k0:k0 + m],
                       inside[k0:k0 + m])

@_njit()
def newton_block(m, steps, form, bounds, needs_logg, coef, pows, counts, xs, ts, slopes, xp, zp, gp,
                 xm, zb, gb, tb, slot, at_t, at_s, at_g, at_ok, fin_x, fin_t, fin_s, fin_g, fin_ok, primed):
    """Newton steps from colours xm towards the temperatures tb, for the first m stars of a block.

    Each star's final colour and the relation's values there land in
    ``fin_*`` at its ``slot``; the block's arrays are reordered on the way
    (the stars still moving kept at the front).  ``primed``: ``at_*`` already
    hold the relation at the starting colours (the first step evaluates
    nothing).
    """
    lo = bounds[0]
    hi = bounds[1]
    for step_no in range(steps):
        if m == 0:
            break
        if step_no or not primed:
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


@_njit_alloc()
def block_scratch(size):
    """Work arrays of one block: stars' rows, colours, [Fe/H], log g, targets, slots, evaluations, finals."""
    return (np.empty(size, np.intp), np.empty(size), np.empty(size), np.empty(size), np.empty(size),
            np.empty(size, np.intp), np.empty(size), np.empty(size), np.empty(size), np.empty(size, np.bool_),
            np.empty(size), np.empty(size), np.empty(size), np.empty(size), np.empty(size, np.bool_))


@_njit(inline="always")
def stage_star(mm, origin, colour, lo, hi, feh, logg, target, where, xm, zb, gb, tb, slot):
    """Put a star into slot mm of a Newton block, its colour clamped to the relation's range; mm + 1."""
    where[mm] = origin
    xm[mm] = lo if colour < lo else (hi if colour > hi else colour)
    zb[mm] = feh
    gb[mm] = logg
    tb[mm] = target
    slot[mm] = mm
    return mm + 1


@_njit(inline="always")
def pseudo_observation(q, target, colour, fin_x, fin_t, fin_s, fin_g, fin_ok):
    """(usable, ỹ, slope, ∂T/∂[Fe/H]) of block star q once inverted: ỹ = T̂ + s(X_m)·(X − X_m)."""
    si = fin_s[q]
    if fin_ok[q] and abs(fin_t[q] - target) < 0.5 and np.isfinite(si):
        gi = fin_g[q]
        return True, target + si * (colour - fin_x[q]), si, (gi if np.isfinite(gi) else 0.0)
    return False, 0.0, 0.0, 0.0


@_njit_alloc()
def linearise_relation(x, t_hat, z, g, used, steps, form, bounds, needs_logg, coef, pows, counts,
                       xs, ts, slopes, y, s, gz):
    linearise_rows(x, t_hat, z, g, used, steps, form, bounds, needs_logg, coef, pows, counts,
                   xs, ts, slopes, y, s, gz, relation_scratch(pows, BLOCK), block_scratch(BLOCK))


@_njit()
def linearise_rows(x, t_hat, z, g, used, steps, form, bounds, needs_logg, coef, pows, counts,
                   xs, ts, slopes, y, s, gz, powers, block):
    """The loop of `linearise_relation` over its work arrays."""
    lo = bounds[0]
    hi = bounds[1]
    xp, zp, gp = powers
    # a block of stars to invert: where each came from, its colour now and its inputs; the
    # relation's values at the current colours; per star (by its first slot) the final ones
    (where, xm, zb, gb, tb, slot, at_t, at_s, at_g, at_ok,
     fin_x, fin_t, fin_s, fin_g, fin_ok) = block
    n = x.size
    k = 0
    while k < n:
        m = 0
        while k < n and m < BLOCK:
            if used[k] and np.isfinite(t_hat[k]):
                m = stage_star(m, k, x[k], lo, hi, z[k], g[k], t_hat[k], where, xm, zb, gb, tb, slot)
            k += 1
        newton_block(m, steps, form, bounds, needs_logg, coef, pows, counts, xs, ts, slopes, xp, zp, gp,
                     xm, zb, gb, tb, slot, at_t, at_s, at_g, at_ok, fin_x, fin_t, fin_s, fin_g, fin_ok, False)
        for q in range(m):
            kk = where[q]
            good, yq, sq, gq = pseudo_observation(q, t_hat[kk], x[kk], fin_x, fin_t, fin_s, fin_g, fin_ok)
            if good:
                y[kk], s[kk], gz[kk] = yq, sq, gq


@_njit_alloc()
def calibrate_cells(m, var_m, feh, feh_var, logg, applies, t_start, e_start, ebv, ebv_var, prior_prec, fit,
                    patches, offsets, tab_shape, tab_grid,
                    blue, red, same, scatter0, scatter_frac,
                    forms, bounds, needs_logg, coef, pows, counts, xs, ts, slopes, n_nodes,
                    iterations, inverse_steps, tol_t, tol_e, settling, e_min, e_max, min_free,
                    x0, first_used, x, kx, y, s, used, sc, v, n_used, bad, est, cov, chi2, l_y, l_p, c_diag,
                    info_known, moving, seen_lo, seen_hi, e_lin):
    """The Gauss–Newton passes of `combine.calibrated_teff` (its `_iterate`), compiled: the same bits.

    Allocates the work arrays and runs `calibrate_passes`.  ``x``, ``kx``,
    ``s``, ``sc``, ``v``, ``l_y`` and ``l_p`` may have `BLOCK` rows instead
    of one per star, when the caller does not read them: they are then the
    working rows of the block in hand.
    """
    r = blue.size
    nb = m.shape[1]
    # in the order `calibrate_passes` unpacks them: act … a, each relation's listed stars and their count,
    # the stars a pass visits for one relation, the ln T and E(B−V) of a pass's moving stars
    own = (np.empty(BLOCK, np.intp), np.empty(BLOCK), np.empty(BLOCK), np.empty(BLOCK), np.empty(BLOCK),
           np.empty(BLOCK), np.empty(BLOCK, np.bool_), np.empty((BLOCK, r), np.bool_), np.empty((BLOCK, r)),
           np.empty((BLOCK, r)), np.empty((nb, BLOCK)), np.empty((nb, BLOCK)), np.empty((nb, BLOCK)), np.empty(r),
           np.empty((r, BLOCK), np.intp), np.empty(r, np.intp), np.empty(BLOCK, np.intp), np.empty(BLOCK),
           np.empty(BLOCK))
    calibrate_passes(
        m, var_m, feh, feh_var, logg, applies, t_start, e_start, ebv, ebv_var, prior_prec, fit, patches,
        offsets, tab_shape, tab_grid, blue, red, same, scatter0, scatter_frac, forms, bounds, needs_logg,
        coef, pows, counts, xs, ts, slopes, n_nodes, iterations, inverse_steps, tol_t, tol_e, settling,
        e_min, e_max, min_free, x0, first_used, x, kx, y, s, used, sc, v, n_used, bad, est, cov, chi2, l_y,
        l_p, c_diag, info_known, moving, seen_lo, seen_hi, e_lin,
        relation_scratch(pows.reshape(-1, pows.shape[2], 3), BLOCK), block_scratch(BLOCK), own,
        combine_scratch(r), unreddened_cubics(patches, offsets, tab_shape, tab_grid))


@_njit(inline="always")
def relation_visits(i, listed, takers, n_takers, act, na, still, visit):
    """The stars of the block a pass visits for relation i and their number: every moving star
    (``act``), or with ``listed`` the moving ones among the relation's listed stars (into ``visit``).
    Both in ascending order."""
    if not listed:
        return act, na
    count = 0
    for q in range(n_takers[i]):
        j = takers[i, q]
        if still[j]:
            visit[count] = j
            count += 1
    return visit, count


@_njit()
def calibrate_passes(m, var_m, feh, feh_var, logg, applies, t_start, e_start, ebv, ebv_var, prior_prec, fit,
                     patches, offsets, tab_shape, tab_grid,
                     blue, red, same, scatter0, scatter_frac,
                     forms, bounds, needs_logg, coef, pows, counts, xs, ts, slopes, n_nodes,
                     iterations, inverse_steps, tol_t, tol_e, settling, e_min, e_max, min_free,
                     x0, first_used, x, kx, y, s, used, sc, v, n_used, bad, est, cov, chi2, l_y, l_p, c_diag,
                     info_known, moving, seen_lo, seen_hi, e_lin, powers, block, own, work, unreddened):
    """The Gauss–Newton passes of `combine.calibrated_teff` (its `_iterate`), compiled: the same bits.

    Stars go through in blocks of `BLOCK`.  Each pass of a block runs, for
    the stars still moving: the colour excess of every band at the current
    T_eff and E(B−V) (``colour_excess``); each relation at the dereddened
    colours, over the block (``_evaluate``); its linearisation at the
    current T_eff (``_linearise_at``, the steps of `linearise_relation`);
    then per star the scatter, the design, the combination (`combine_star`)
    and the convergence test.  A star stops where the numpy loop stops
    computing it, so the outputs are the quantities of its last pass
    (``x0`` and ``first_used`` those of its first).
    """
    n, nb = m.shape
    r = blue.size
    xp, zp, gp = powers
    (where, xm, zb, gb, tb, slot, at_t, at_s, at_g, at_ok,
     fin_x, fin_t, fin_s, fin_g, fin_ok) = block
    (act, t_ref, el, t_hat, lo_seen, hi_seen, still, allowed, kt, gz, ex, de, dt, a, takers, n_takers, visit,
     lnt_q, e_q) = own
    c, rhs, low, z, sol, idx = work
    # x, kx, s, sc, v, l_y and l_p: per star (detail) or, when only the Monte Carlo reads them and
    # there is none, rows of one block (kd = the star in its block): no memory to fault in and fill
    detail = x.shape[0] == n
    for k0 in range(0, n, BLOCK):
        nblk = min(BLOCK, n - k0)
        for j in range(nblk):
            t_ref[j] = t_start[k0 + j]
            el[j] = e_start[k0 + j]
            t_hat[j] = np.nan
            lo_seen[j] = np.nan
            hi_seen[j] = np.nan
            still[j] = True
        for it in range(iterations):
            na = 0
            for j in range(nblk):
                if still[j]:
                    act[na] = j
                    na += 1
            if na == 0:
                break
            if it == 1 and not fit:
                # with E(B−V) given a star keeps its first-pass relations: list each relation's
                # stars once, so that the passes visit only them (a relation's other stars keep
                # the values of the first pass: unused, NaN, 0, 0)
                for i in range(r):
                    count = 0
                    for j in range(nblk):
                        if allowed[j, i]:
                            takers[i, count] = j
                            count += 1
                    n_takers[i] = count
            # `colour_excess` (every band at (T_ref, E) minus at (T_ref, 0)) and the colours
            for q in range(na):
                j = act[q]
                if it and np.isfinite(t_hat[j]):
                    t_ref[j] = t_hat[j]
                lnt_q[q] = np.log(t_ref[j] if np.isfinite(t_ref[j]) else 5800.0)
                eu = el[j] if np.isfinite(el[j]) else 0.0
                e_q[q] = e_min if eu < e_min else (e_max if eu > e_max else eu)
            excess_block(na, lnt_q, e_q, patches, offsets, tab_shape, tab_grid, unreddened, ex, de, dt)
            for q in range(na):
                j = act[q]
                k = k0 + j
                kd = k if detail else j
                for i in range(r):
                    bi, ri = blue[i], red[i]
                    x[kd, i] = m[k, bi] - m[k, ri] - (ex[bi, q] - ex[ri, q])
                    kx[kd, i] = de[bi, q] - de[ri, q]
                    kt[j, i] = dt[bi, q] - dt[ri, q]
                    if it == 0:
                        x0[k, i] = x[kd, i]
            for i in range(r):
                nx = n_nodes[i]
                args_xs, args_ts, args_sl = xs[i, :nx], ts[i, :nx], slopes[i, :nx - 1]
                # `_evaluate`: the relation at the dereddened colours of its candidates (a star
                # that is not one gets what the numpy code gives it: unused, NaN, 0, 0)
                mm = 0
                stars, n_stars = relation_visits(i, it > 0 and not fit, takers, n_takers, act, na, still, visit)
                for q in range(n_stars):
                    j = stars[q]
                    k = k0 + j
                    kd = k if detail else j
                    used[k, i] = False
                    y[k, i] = np.nan
                    s[kd, i] = 0.0
                    gz[j, i] = 0.0
                    # a star outside the relation's ranges would come out of it unused: not evaluated
                    if (applies[k, i] and (it == 0 or allowed[j, i])
                            and inside_range(x[kd, i], feh[k], logg[k], bounds[i], needs_logg[i])):
                        where[mm] = j
                        xm[mm] = x[kd, i]
                        zb[mm] = feh[k]
                        gb[mm] = logg[k]
                        mm += 1
                    elif it == 0:
                        first_used[k, i] = False
                        allowed[j, i] = fit  # with E(B−V) given, a star keeps its first-pass relations
                if mm:  # (a call costs about as much as a few stars)
                    relation_block(xm, zb, gb, mm, forms[i], bounds[i], needs_logg[i], coef[i], pows[i],
                                   counts[i], args_xs, args_ts, args_sl, xp, zp, gp, at_t, at_s, at_g, at_ok)
                for q in range(mm):
                    j = where[q]
                    k = k0 + j
                    kd = k if detail else j
                    ti, si, gi = at_t[q], at_s[q], at_g[q]
                    ok = at_ok[q] and np.isfinite(ti) and np.isfinite(si)
                    if it == 0:
                        first_used[k, i] = ok
                        allowed[j, i] = ok or fit
                    if ok:
                        used[k, i] = True
                        y[k, i] = ti
                        s[kd, i] = si
                        gz[j, i] = gi if np.isfinite(gi) else 0.0
                # `_linearise_at`: the relation at the colour it would give at the current T_eff
                if it:
                    lo, hi = bounds[i, 0], bounds[i, 1]
                    mm = 0
                    for q in range(n_stars):
                        j = stars[q]
                        k = k0 + j
                        kd = k if detail else j
                        if used[k, i] and np.isfinite(t_hat[j]):
                            # a used star's colour is inside the relation's range, so Newton starts at the
                            # very colour just evaluated: its first evaluation is the one above
                            at_t[mm], at_s[mm], at_g[mm], at_ok[mm] = y[k, i], s[kd, i], gz[j, i], True
                            mm = stage_star(mm, j, x[kd, i], lo, hi, feh[k], logg[k], t_hat[j], where, xm, zb,
                                            gb, tb, slot)
                    if mm:
                        newton_block(mm, inverse_steps, forms[i], bounds[i], needs_logg[i], coef[i], pows[i],
                                     counts[i], args_xs, args_ts, args_sl, xp, zp, gp, xm, zb, gb, tb, slot,
                                     at_t, at_s, at_g, at_ok, fin_x, fin_t, fin_s, fin_g, fin_ok, True)
                    for q in range(mm):
                        j = where[q]
                        k = k0 + j
                        kd = k if detail else j
                        good, yq, sq, gq = pseudo_observation(q, t_hat[j], x[kd, i], fin_x, fin_t, fin_s, fin_g,
                                                              fin_ok)
                        if good:
                            y[k, i], s[kd, i], gz[j, i] = yq, sq, gq
            # per star: scatter, design, the combination (`_combine_pass`) and convergence
            for q in range(na):
                j = act[q]
                k = k0 + j
                kd = k if detail else j
                tr = t_ref[j]
                nu = 0
                for i in range(r):
                    # hypot(x, ±0) is |x| exactly (C99 F.10.4.3), and most scatters are constant
                    frac = scatter_frac[i] * tr
                    sc[kd, i] = abs(scatter0[i]) if frac == 0.0 else np.hypot(scatter0[i], frac)
                    v[kd, i] = s[kd, i] * kx[kd, i]
                    a[i] = 1.0 + s[kd, i] * kt[j, i] / tr if used[k, i] else 1.0
                    y[k, i] = y[k, i] - (1.0 - a[i]) * tr
                    nu += used[k, i]
                n_used[k] = nu
                pp = prior_prec[k] if fit else 0.0
                pd = ebv[k] - el[j] if fit else 0.0
                chi2[k], info_known[k] = combine_star(
                    s[kd], gz[j], used[k], var_m[k], blue, red, same, sc[kd], feh_var[k], a, v[kd], y[k], fit,
                    0.0 if fit else ebv_var[k], pp, pd, est[k], cov[k], l_y[kd], l_p[kd], c_diag[k],
                    c, rhs, low, z, sol, idx)
                if fit:
                    bd = nu == 0 or (pp == 0 and nu < min_free)
                    step_e = 0.0 if bd or not np.isfinite(est[k, 1]) else est[k, 1]
                else:
                    bd = nu == 0
                    step_e = 0.0
                bad[k] = bd
                new_t = np.nan if bd else est[k, 0]
                if it == 0:
                    t_hat[j] = new_t
                else:
                    old = t_hat[j]
                    if it >= settling:  # np.fmin / np.fmax: a NaN loses
                        lo_, hi_ = lo_seen[j], hi_seen[j]
                        lo_seen[j] = new_t if np.isnan(lo_) else (lo_ if np.isnan(new_t) else min(lo_, new_t))
                        hi_seen[j] = new_t if np.isnan(hi_) else (hi_ if np.isnan(new_t) else max(hi_, new_t))
                    step_t = new_t - old
                    step_t = step_t if np.isfinite(step_t) else 0.0
                    still[j] = abs(step_t) >= tol_t or abs(step_e) >= tol_e
                    t_hat[j] = new_t if still[j] else old
                if still[j] and it < iterations - 1:
                    e_new = el[j] + step_e
                    el[j] = e_min if e_new < e_min else (e_max if e_new > e_max else e_new)
        for j in range(nblk):
            moving[k0 + j] = still[j]
            seen_lo[k0 + j] = lo_seen[j]
            seen_hi[k0 + j] = hi_seen[j]
            e_lin[k0 + j] = el[j]


@_njit(inline="always")
def band_point(b, lnt, ebv, patches, offsets, tab_shape, tab_grid, want_de):
    """`table_point` of band b of a stack (`bandgrid.table_stack`)."""
    return table_point(lnt, ebv, patches[offsets[b]:offsets[b + 1]], tab_shape[b, 0], tab_shape[b, 1],
                       tab_grid[b, 0], tab_grid[b, 1], tab_grid[b, 2], tab_grid[b, 3], want_de)


@_njit_alloc()
def fit_cells(m, w, lnt, e, ebv0, prior_w, todo, fit, patches, offsets, tab_shape, tab_grid,
              iterations, tol, max_step, lnt_lo, lnt_hi, e_min, e_max):
    """The Gauss–Newton loop of `fit.fit_blackbody`, one star at a time (its twin, the same bits).

    Allocates the work arrays and runs `fit_rows`.
    """
    nb = m.shape[1]
    fit_rows(
        m, w, lnt, e, ebv0, prior_w, todo, fit, patches, offsets, tab_shape, tab_grid, iterations, tol,
        max_step, lnt_lo, lnt_hi, e_min, e_max,
        (np.empty(nb), np.empty(nb), np.empty(nb), np.empty(nb)))


@_njit()
def fit_rows(m, w, lnt, e, ebv0, prior_w, todo, fit, patches, offsets, tab_shape, tab_grid,
             iterations, tol, max_step, lnt_lo, lnt_hi, e_min, e_max, work):
    """The Gauss–Newton loop of `fit.fit_blackbody`, one star at a time (its twin, the same bits).

    ``lnt`` and ``e`` hold each star's start and receive its solution; stars
    with ``todo`` False are left as they are.  Sums run over the bands in
    order, as the numpy loop's `fit._rowsum` does.
    """
    n, nb = m.shape
    mod, d_t, d_e, r = work
    for k in range(n):
        if not todo[k]:
            continue
        t = lnt[k]
        ek = e[k]
        best = np.inf
        step_t = 0.0
        step_e = 0.0
        for _ in range(iterations):
            for b in range(nb):
                mod[b], d_t[b], d_e[b] = band_point(b, t, ek, patches, offsets, tab_shape, tab_grid, fit)
            wsum = 0.0
            for b in range(nb):
                wsum += w[k, b]
            acc = 0.0
            for b in range(nb):
                acc += w[k, b] * (m[k, b] - mod[b])
            a = acc / wsum
            chi = 0.0
            for b in range(nb):
                r[b] = m[k, b] - mod[b] - a
                chi += w[k, b] * r[b] * r[b]
            if fit:
                chi = chi + prior_w[k] * (ek - ebv0[k]) ** 2
            if chi > best * (1 + 1e-12) + 1e-12:
                # worse: go back halfway along the last step and evaluate again next round
                step_t /= 2
                step_e /= 2
                t -= step_t
                ek -= step_e
            else:
                best = chi
                # profiled Jacobian: derivative columns minus their weighted means
                acc = 0.0
                for b in range(nb):
                    acc += w[k, b] * d_t[b]
                mean_t = acc / wsum
                htt = 0.0
                gt = 0.0
                for b in range(nb):
                    jt = d_t[b] - mean_t
                    htt += w[k, b] * jt * jt
                for b in range(nb):
                    gt += w[k, b] * (d_t[b] - mean_t) * r[b]
                if fit:
                    acc = 0.0
                    for b in range(nb):
                        acc += w[k, b] * d_e[b]
                    mean_e = acc / wsum
                    hte = 0.0
                    hee = 0.0
                    ge = 0.0
                    for b in range(nb):
                        hte += w[k, b] * (d_t[b] - mean_t) * (d_e[b] - mean_e)
                    for b in range(nb):
                        hee += w[k, b] * (d_e[b] - mean_e) * (d_e[b] - mean_e)
                    for b in range(nb):
                        ge += w[k, b] * (d_e[b] - mean_e) * r[b]
                    hee = hee + prior_w[k]
                    ge = ge + prior_w[k] * (ebv0[k] - ek)
                    det = htt * hee - hte * hte
                    dt = (hee * gt - hte * ge) / det if det > 0 else 0.0
                    de = (htt * ge - hte * gt) / det if det > 0 else 0.0
                else:
                    dt = gt / htt if htt > 0 else 0.0
                    de = 0.0
                dt = -max_step if dt < -max_step else (max_step if dt > max_step else dt)
                new_t = t + dt
                new_t = lnt_lo if new_t < lnt_lo else (lnt_hi if new_t > lnt_hi else new_t)
                new_e = ek + de
                new_e = e_min if new_e < e_min else (e_max if new_e > e_max else new_e)
                step_t = new_t - t
                step_e = new_e - ek
                t = new_t
                ek = new_e
            if not (abs(step_t) > tol or abs(step_e) > tol):
                break
        lnt[k] = t
        e[k] = ek


@_njit(inline="always")
def fit_column(q, d_t, d_e, k, b):
    """Column q of the fit's Jacobian at band b of star k: ∂M/∂ln T, 1 (the offset) or ∂M/∂E."""
    return d_t[k, b] if q == 0 else (1.0 if q == 1 else d_e[k, b])


@_njit(inline="always")
def normal_entry(i, j, w, d_t, d_e, k):
    """Σ_b (J_bi w_b) J_bj over the bands in order: an entry of `fit._final`'s normal matrix."""
    acc = 0.0
    for b in range(w.shape[1]):
        acc += (fit_column(i, d_t, d_e, k, b) * w[k, b]) * fit_column(j, d_t, d_e, k, b)
    return acc


@_njit()
def fit_final(m, w, lnt, e, ebv0, prior_w, too_few, fit, patches, offsets, tab_shape, tab_grid,
              mod, d_t, d_e, a, chi2, cov, dlnt_de):
    """The last step of `fit.fit_blackbody` at its solution, one star at a time (its twin
    `fit._final`, the same bits): the band models and their slopes, the profiled offset ``a``,
    χ², the covariance of (ln T, a[, E]) from the normal matrix and, with E(B−V) fixed, ∂ln T/∂E.

    Every sum runs over the bands in order.
    """
    n, nb = m.shape
    p = 3 if fit else 2
    for k in range(n):
        for b in range(nb):
            mod[k, b], d_t[k, b], d_e[k, b] = band_point(b, lnt[k], e[k], patches, offsets, tab_shape, tab_grid,
                                                         True)
        num = 0.0
        wsum = 0.0
        for b in range(nb):
            num += w[k, b] * (m[k, b] - mod[k, b])
            wsum += w[k, b]
        ak = num / wsum
        a[k] = ak
        cur = 0.0
        for b in range(nb):
            r = m[k, b] - mod[k, b] - ak
            cur += w[k, b] * r * r
        if fit:
            cur = cur + prior_w[k] * (e[k] - ebv0[k]) ** 2
        chi2[k] = cur
        g00, g01 = normal_entry(0, 0, w, d_t, d_e, k), normal_entry(0, 1, w, d_t, d_e, k)
        g10, g11 = normal_entry(1, 0, w, d_t, d_e, k), normal_entry(1, 1, w, d_t, d_e, k)
        g02 = g12 = g20 = g21 = g22 = 0.0
        if fit:
            g02, g12 = normal_entry(0, 2, w, d_t, d_e, k), normal_entry(1, 2, w, d_t, d_e, k)
            g20, g21 = normal_entry(2, 0, w, d_t, d_e, k), normal_entry(2, 1, w, d_t, d_e, k)
            g22 = normal_entry(2, 2, w, d_t, d_e, k) + prior_w[k]
        if too_few[k]:
            g00, g01, g02, g10, g11, g12, g20, g21, g22 = 1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0
        c = cov[k]
        if fit:  # cofactors c[j, i] = (−1)^(i+j) · minor(i, j), as `fit._inverse_symmetric`
            c[0, 0] = g11 * g22 - g12 * g21
            c[1, 0] = -(g10 * g22 - g12 * g20)
            c[2, 0] = g10 * g21 - g11 * g20
            c[0, 1] = -(g01 * g22 - g02 * g21)
            c[1, 1] = g00 * g22 - g02 * g20
            c[2, 1] = -(g00 * g21 - g01 * g20)
            c[0, 2] = g01 * g12 - g02 * g11
            c[1, 2] = -(g00 * g12 - g02 * g10)
            c[2, 2] = g00 * g11 - g01 * g10
            det = 0.0
            det += g00 * c[0, 0]
            det += g01 * c[1, 0]
            det += g02 * c[2, 0]
        else:
            det = g00 * g11 - g01 ** 2
            c[0, 0], c[1, 1] = g11, g00
            c[0, 1] = -g01
            c[1, 0] = -g01
        div = det if abs(det) > 1e-300 else np.nan
        for i in range(p):
            for j in range(p):
                c[i, j] = np.nan if too_few[k] else c[i, j] / div
        if fit:
            dlnt_de[k] = 0.0
        else:
            acc = 0.0
            for b in range(nb):
                for q in range(p):
                    acc += (c[0, q] * (fit_column(q, d_t, d_e, k, b) * w[k, b])) * d_e[k, b]
            dlnt_de[k] = -acc


@_njit()
def erfc_cells(x, out):
    """erfc of each value (the C library's, as ``math.erfc``), for the χ² survival function."""
    for k in range(x.size):
        out[k] = math.erfc(x[k])


KERNELS = {"invert_cells": invert_cells, "fit_final": fit_final, "evaluate_cells": evaluate_cells, "combine_cells": combine_cells,
           "relation_cells": relation_cells, "linearise_relation": linearise_relation,
           "calibrate_cells": calibrate_cells, "fit_cells": fit_cells, "erfc_cells": erfc_cells}
