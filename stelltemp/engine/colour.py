"""Blackbody colour temperature from one colour index.

Exact inversion of the passband-integrated synthetic colour of a reddened
blackbody, C(T, E) = M_blue(T, E) − M_red(T, E), held in the bicubic Hermite
tables of :mod:`stelltemp.bandgrid`.  Vectorised over stars:

1. bisection over the temperature nodes of the table (values at the star's
   own E(B−V), exact in the E direction) finds the cell holding the root;
2. inside that cell the colour is a cubic polynomial in the cell
   coordinate, solved by a few Newton steps from the linear guess.

The result is the exact inverse of the table (round trip to ~1e-12), and the
table matches direct integration to better than 1e-6 mag.

A colour index decreases with temperature towards a finite limit, the
Rayleigh–Jeans colour (B_λ → 2ckT/λ⁴): a colour bluer than that limit has
no blackbody solution at all, and a colour just redder than it constrains
the temperature only from below.
"""

from functools import lru_cache

import numpy as np

from .. import bandgrid as bg
from .. import cache
from ..errors import StelltempError
from ..extinction import DEFAULT_LAW, DEFAULT_RV, relative_extinction
from ..photometry import mag_offset
from . import flags as fl
from .. import kernels
from ..threads import MIN_ROWS_PER_THREAD, run_split

_BLOCK = 1 << 15  # stars per block of the inversion
_NEWTON_STEPS = kernels.NEWTON_STEPS


@lru_cache(maxsize=256)
def _pair(blue, red, law, rv):
    """Colour table and its Rayleigh–Jeans limit on a fine E grid (cached)."""
    table = bg.colour_table(blue, red, law, rv)
    values = table.coef[..., 0]
    if not np.all(np.diff(values, axis=0) < 0):
        raise StelltempError(
            f"colour {blue}−{red} does not decrease monotonically with temperature; "
            "pick a pair with the bluer band first")
    e_fine = np.linspace(bg.E_MIN, bg.E_MAX, 651)
    key = cache.digest("rayleigh-jeans", bg.table_key(blue, law, rv), bg.table_key(red, law, rv), e_fine)
    rj = cache.load_or_build("rj", key, lambda: {"rj": _rayleigh_jeans_mag(blue, e_fine, law, rv)
                                                 - _rayleigh_jeans_mag(red, e_fine, law, rv)})["rj"]
    return table, e_fine, rj


def _rayleigh_jeans_mag(key, ebv, law, rv):
    """Magnitude of the T-independent shape 1/λ⁴ (times λ S dλ), reddened, plus the band offset."""
    lam, weight = bg.band_weights(key)
    k = relative_extinction(lam, law, rv)
    tau = 10 ** (-0.4 * rv * np.outer(ebv, k))
    integral = tau @ (weight / lam**4)
    return -2.5 * np.log10(integral) + mag_offset(key)


def rayleigh_jeans_colour(blue, red, ebv=0.0, law=DEFAULT_LAW, rv=DEFAULT_RV):
    """Bluest colour any blackbody can have through this pair at E(B−V) = ``ebv``."""
    _, e_fine, rj = _pair(blue, red, law, float(rv))
    return np.interp(ebv, e_fine, rj)


def invert_colour(colour, blue, red, ebv=0.0, law=DEFAULT_LAW, rv=DEFAULT_RV):
    """Blackbody temperatures that reproduce observed colours.

    Parameters
    ----------
    colour : array_like
        Observed colour m_blue − m_red, mag (each band in its own system).
    blue, red : str
        Passband keys.
    ebv : float or array_like
        E(B−V) of each star (nominal, of the law), mag.
    law : str
        Extinction law (see :mod:`stelltemp.extinction`).
    rv : float
        R_V.

    Returns
    -------
    temperature : ndarray
        K; NaN where there is no solution on the grid.
    slope : ndarray
        dC/d ln T at the solution, mag (negative), for error propagation.
    flags : ndarray of int64
        BAD_INPUT (colour or E(B−V) not finite or E off the grid),
        NO_SOLUTION (bluer than the Rayleigh–Jeans colour),
        AT_GRID_EDGE (cooler than 1,000 K or hotter than 100,000 K).
    """
    pair = _pair(blue, red, law, float(rv))
    colour, ebv = np.broadcast_arrays(np.asarray(colour, float), np.asarray(ebv, float))
    shape = colour.shape
    c = colour.ravel()
    e = ebv.ravel()
    jit = kernels.jit_for(c.size)
    if jit is not None:
        lnt, slope, flags = _invert_compiled(jit, c, e, *pair)
        return np.exp(lnt).reshape(shape), slope.reshape(shape), flags.reshape(shape)
    # blocks that fit in the processor's cache: the many short passes over the
    # arrays below then cost far less than on one huge array
    parts = [_invert_block(c[k:k + _BLOCK], e[k:k + _BLOCK], *pair) for k in range(0, c.size, _BLOCK)]
    if not parts:
        empty = np.empty(shape)
        return empty, empty.copy(), np.zeros(shape, np.int64)
    lnt, slope, flags = (np.concatenate(x) for x in zip(*parts))
    return np.exp(lnt).reshape(shape), slope.reshape(shape), flags.reshape(shape)


def _invert_compiled(jit, c, e, table, e_fine, rj):
    """`invert_colour` by the compiled kernel (same steps as `_invert_block`, one star at a time)."""
    nt, ne = table.shape
    n = c.size
    c, e = np.ascontiguousarray(c), np.ascontiguousarray(e)
    lnt, slope, flags = np.empty(n), np.empty(n), np.empty(n, np.int64)

    def rows(part):  # stars are independent: a large call runs in slices on the machine's cores
        jit["invert_cells"](c[part], e[part], *_flat(table), nt, ne, table.lnt0, table.h_t, table.e0,
                            table.h_e, rj, e_fine[0], e_fine[1] - e_fine[0], bg.E_MIN, bg.E_MAX,
                            kernels.NEWTON_STEPS, fl.BAD_INPUT, fl.NO_SOLUTION, fl.AT_GRID_EDGE,
                            lnt[part], slope[part], flags[part])

    run_split(rows, n, MIN_ROWS_PER_THREAD)
    return lnt, slope, flags


def _flat(table):
    """Node (value, scaled ∂/∂E) pairs and cell patches of a table as flat contiguous arrays (kept on it)."""
    flat = table.__dict__.get("_flat")
    if flat is None:
        # value and scaled ∂/∂E of each node side by side: one cache line per lookup
        flat = (np.ascontiguousarray(table.coef[..., [0, 2]]).ravel(),
                table.flat_patches)
        table.__dict__["_flat"] = flat
    return flat


def _invert_block(c, e, table, e_fine, rj):
    """`invert_colour` on one block of stars (flat arrays), step for step as the compiled kernel.

    Both give bit-identical results, so a star's temperature does not depend
    on how many stars share its call.
    """
    n = c.size
    nt, ne = table.shape
    nodes, patches = _flat(table)
    val, val_e = nodes[0::2], nodes[1::2]
    flags = np.zeros(n, np.int64)

    e_ok = np.isfinite(e) & (e >= bg.E_MIN) & (e <= bg.E_MAX)
    ok = np.isfinite(c) & e_ok
    flags[~ok] = fl.BAD_INPUT

    v = (np.where(e_ok, e, 0.0) - table.e0) / table.h_e
    j = np.clip(np.floor(v), 0, ne - 2).astype(np.intp)
    s = v - j
    s2 = s * s
    s3 = s2 * s
    # cubic Hermite basis in s: node values (as0, as1) and scaled slopes (bs0, bs1)
    as0, as1 = 2 * s3 - 3 * s2 + 1, 3 * s2 - 2 * s3
    bs0, bs1 = s3 - 2 * s2 + s, s3 - s2

    def node_colour(i):
        """Exact (cubic in E) colour at temperature node i and each star's E."""
        k = i * ne + j
        return val[k] * as0 + val[k + 1] * as1 + val_e[k] * bs0 + val_e[k + 1] * bs1

    c_cold = node_colour(0)
    c_hot = node_colour(nt - 1)
    too_blue = ok & (c < c_hot)
    # the Rayleigh–Jeans colour at each E, linear on its uniform grid
    x = (np.where(too_blue, e, e_fine[0]) - e_fine[0]) / (e_fine[1] - e_fine[0])
    m = np.clip(np.floor(x), 0, e_fine.size - 2).astype(np.intp)
    limit = rj[m] + (x - m) * (rj[m + 1] - rj[m])
    flags[too_blue] = np.where(c[too_blue] < limit[too_blue], fl.NO_SOLUTION, fl.AT_GRID_EDGE)
    too_red = ok & ~too_blue & (c > c_cold)
    flags[too_red] = fl.AT_GRID_EDGE
    solve = ok & ~too_blue & ~too_red

    # bisection over the nodes (colour falls with node index) on the exact node
    # colours: the last node redder than the star
    cc = np.where(solve, c, 0.0)
    lo = np.zeros(n, np.intp)
    span = nt - 1
    while span > 1:
        half = span >> 1
        lo += half * (node_colour(lo + half) > cc)
        span -= half
    i = np.minimum(lo, nt - 2)

    # inside the cell the colour is a cubic in the cell coordinate t:
    # p(t) = q0 + q1 t + q2 t² + q3 t³, with the E direction already summed
    c_ = patches.reshape(-1, 4, 4)[i * (ne - 1) + j]
    s_ = s[:, None]
    q = c_[:, :, 0] + s_ * (c_[:, :, 1] + s_ * (c_[:, :, 2] + s_ * c_[:, :, 3]))
    q0, q1, q2, q3 = q[:, 0], q[:, 1], q[:, 2], q[:, 3]
    f1 = q0 + q1 + q2 + q3
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.clip((cc - q0) / (f1 - q0), 0.0, 1.0)
        moving = np.ones(n, bool)
        for _ in range(_NEWTON_STEPS):
            p = q0 + t * (q1 + t * (q2 + t * q3)) - cc
            dp = q1 + t * (2 * q2 + 3 * t * q3)
            t_new = np.clip(t - p / dp, 0.0, 1.0)
            moving &= t_new != t  # a star stops once a step changes nothing (as the kernel)
            t = np.where(moving, t_new, t)
    dp = q1 + t * (2 * q2 + 3 * t * q3)
    lnt = np.where(solve, table.lnt0 + (i + t) * table.h_t, np.nan)
    slope = np.where(solve, dp / table.h_t, np.nan)
    return lnt, slope, flags


def colour_interval(colour, colour_err, blue, red, ebv=0.0, ebv_err=0.0, law=DEFAULT_LAW, rv=DEFAULT_RV):
    """Temperature with a 68 % interval from one colour, and its flags.

    The interval is the image of the colour interval C ± σ_eff under the
    (monotonic) inverse, so its coverage equals that of the colour interval
    (68.3 % for Gaussian errors); it is asymmetric wherever the colour–
    temperature relation is curved.  σ_eff² = σ_C² + (∂C/∂E σ_E)².  Where
    C − σ_eff is bluer than any blackbody, the upper bound is infinite and
    the result is a lower limit (RAYLEIGH_JEANS flag).

    Returns
    -------
    dict of ndarrays
        ``t`` (K), ``t_lo``, ``t_hi`` (K, 68 % bounds), ``t_err`` (K, half the
        interval width, or +inf for a lower limit), ``flags``.
    """
    colour, colour_err, ebv, ebv_err = np.broadcast_arrays(
        *(np.asarray(a, float) for a in (colour, colour_err, ebv, ebv_err)))
    t, slope, flags = invert_colour(colour, blue, red, ebv, law, rv)
    table = _pair(blue, red, law, float(rv))[0]
    with np.errstate(invalid="ignore"):
        _, _, dc_de = table.evaluate(np.log(np.where(np.isfinite(t), t, 5000.0)), np.nan_to_num(ebv))
        red_part = np.abs(dc_de) * np.where(np.isfinite(ebv_err), ebv_err, 0.0)
        bad_err = ~(colour_err >= 0) | ~(ebv_err >= 0)
    flags = flags | np.where(bad_err, fl.BAD_INPUT, 0)
    sigma = np.hypot(np.where(bad_err, np.nan, colour_err), red_part)
    t_lo, _, f_lo = invert_colour(colour + sigma, blue, red, ebv, law, rv)
    t_hi, _, f_hi = invert_colour(colour - sigma, blue, red, ebv, law, rv)
    hot_edge = ((flags & fl.AT_GRID_EDGE) != 0) & np.isfinite(t_lo)
    solved = np.isfinite(t) | hot_edge
    # past the hot end: a lower limit only
    open_top = solved & ~np.isfinite(t_hi) & ((f_hi & (fl.NO_SOLUTION | fl.AT_GRID_EDGE)) != 0)
    t_hi = np.where(open_top, np.inf, t_hi)
    flags = flags | np.where(open_top, fl.RJ_LIMIT, 0)
    t_lo = np.where(solved & ~np.isfinite(t_lo) & ((f_lo & fl.AT_GRID_EDGE) != 0), bg.T_MIN, t_lo)
    with np.errstate(invalid="ignore"):
        dominated = solved & fl.reddening_dominates(red_part, np.where(bad_err, np.inf, colour_err))
    flags = flags | np.where(dominated, fl.REDDENING_DOMINATES, 0)
    return {"t": t, "t_lo": t_lo, "t_hi": t_hi, "t_err": (t_hi - t_lo) / 2, "flags": flags}
