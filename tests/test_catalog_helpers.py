"""A small stand-in for ``stelltemp.engine.estimate`` used by the catalogue tests.

It follows the engine contract exactly (dict of passband arrays in, QTable
with one row per input row out, NaN rows flagged, StelltempError for an
unknown passband key or law) and computes something real: the blackbody-like
temperature of the B−V colour, dereddened by E(B−V), from the formula of
Ballesteros (2012, EPL 97, 34008):

    T = 4600 K * (1 / (0.92 (B−V) + 1.7) + 1 / (0.92 (B−V) + 0.62))

When B and V are not both given it uses the colour of the first two keys.
"""

import astropy.units as u
import numpy as np
from astropy.table import QTable

from stelltemp.engine import flags as F
from stelltemp.errors import StelltempError

KNOWN_KEYS = {
    "U_JC", "B_JC", "V_JC", "Rc_JC", "Ic_JC",
    "u_SDSS", "g_SDSS", "r_SDSS", "i_SDSS", "z_SDSS",
    "J_2MASS", "H_2MASS", "Ks_2MASS",
    "G_GDR3", "BP_GDR3", "RP_GDR3",
}
DEFAULT_ERR = 0.03  # mag


def ballesteros_t(bv):
    """Ballesteros (2012, EPL 97, 34008) eq. 14: temperature (K) from B−V."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return 4600.0 * (1.0 / (0.92 * bv + 1.7) + 1.0 / (0.92 * bv + 0.62))


def fake_estimate(mags, errs=None, *, ebv=0.0, ebv_err=0.0, rv=3.1, law="G23", fit_ebv=False,
                  parallax=None, parallax_err=None, feh=None, logg=None, method="auto"):
    """Engine stand-in with the contract of ``stelltemp.engine.estimate``."""
    if law not in ("G23", "F99", "CCM89"):
        raise StelltempError(f"unknown extinction law '{law}'")
    keys = list(mags)
    for key in keys:
        if key not in KNOWN_KEYS:
            raise StelltempError(f"unknown passband key '{key}'")
    if len(keys) < 2:
        raise StelltempError("need two passbands for a colour")
    n = len(np.asarray(mags[keys[0]]))
    for key in keys:
        if len(np.asarray(mags[key])) != n:
            raise StelltempError("passband arrays differ in length")
    blue, red = ("B_JC", "V_JC") if {"B_JC", "V_JC"} <= set(keys) else (keys[0], keys[1])
    m1 = np.asarray(mags[blue], dtype=float)
    m2 = np.asarray(mags[red], dtype=float)
    e_bv = np.broadcast_to(np.asarray(ebv, dtype=float), (n,))
    bv0 = m1 - m2 - e_bv
    errs = errs or {}
    s1 = np.broadcast_to(np.asarray(errs.get(blue, DEFAULT_ERR), dtype=float), (n,))
    s2 = np.broadcast_to(np.asarray(errs.get(red, DEFAULT_ERR), dtype=float), (n,))
    s1 = np.where(np.isfinite(s1), s1, DEFAULT_ERR)
    s2 = np.where(np.isfinite(s2), s2, DEFAULT_ERR)
    sig = np.hypot(s1, s2)

    flags = np.zeros(n, np.int64)
    bad = ~np.isfinite(bv0)
    flags[bad] |= F.BAD_INPUT
    t = np.full(n, np.nan)
    t[~bad] = ballesteros_t(bv0[~bad])
    # the formula has poles; outside -0.4 < B-V < 2.0 call it no solution
    nosol = ~bad & ((bv0 < -0.4) | (bv0 > 2.0) | ~np.isfinite(t))
    flags[nosol] |= F.NO_SOLUTION
    t[nosol] = np.nan
    dt = np.abs(ballesteros_t(bv0 + 1e-4) - ballesteros_t(bv0 - 1e-4)) / 2e-4 * sig
    out = QTable()
    out["t_bb"] = t * u.K
    out["t_bb_err"] = np.where(np.isfinite(t), dt, np.nan) * u.K
    out["flags"] = flags
    out["flag_names"] = F.describe_all(flags).astype(str)
    return out


def boom_after(calls):
    """An engine that fails on call number `calls` (to interrupt a run)."""
    state = {"n": 0}

    def engine(*args, **kwargs):
        state["n"] += 1
        if state["n"] >= calls:
            raise RuntimeError("simulated failure mid-run")
        return fake_estimate(*args, **kwargs)

    return engine
