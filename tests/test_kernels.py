"""The compiled kernels against their numpy twins: identical results, bit for bit.

Calls below `kernels.MIN_ROWS` stars run numpy and larger ones the compiled
code, so a star's result must not depend on the size of its call (a
catalogue chunk or a Dask partition); these tests lower the threshold to
run both on the same small arrays.
"""

import numpy as np
import pytest

from stelltemp import bandgrid as bg
from stelltemp import kernels
from stelltemp.engine import colour as col
from stelltemp.engine import flags as fl

numba = pytest.importorskip("numba")


@pytest.fixture
def both(monkeypatch):
    """Run f(...) compiled (threshold 0) and in numpy (STELLTEMP_JIT=0)."""
    def run(f, *args, **kwargs):
        monkeypatch.setattr(kernels, "MIN_ROWS", 0)
        monkeypatch.delenv("STELLTEMP_JIT", raising=False)
        assert kernels.jit_for(1) is not None
        fast = f(*args, **kwargs)
        monkeypatch.setenv("STELLTEMP_JIT", "0")
        assert kernels.jit_for(10**9) is None
        slow = f(*args, **kwargs)
        return fast, slow
    return run


def _same(a, b):
    assert a.dtype == b.dtype and a.shape == b.shape
    assert np.array_equal(a, b, equal_nan=True)


def test_evaluate_identical_including_off_grid_and_nan(both):
    rng = np.random.default_rng(3)
    lnt = rng.uniform(np.log(500.0), np.log(2e5), 5000)
    e = rng.uniform(-1.0, 7.0, 5000)
    lnt[::97] = np.nan
    e[::89] = np.inf
    table = bg.band_table("V_JC")
    # NaN and infinite inputs give NaN out (numpy warns, as callers expect)
    with np.errstate(invalid="ignore"):
        fast, slow = both(table.evaluate, lnt, e)
    for a, b in zip(fast, slow):
        _same(a, b)
    with np.errstate(invalid="ignore"):
        fast, slow = both(table.evaluate, lnt, e, want_de=False)
    _same(fast[0], slow[0])
    assert fast[2] is None and slow[2] is None


def test_colour_excess_of_the_fused_passes_identical_to_the_tables():
    """The fused passes' colour excesses (`excess_block`, E(B−V) = 0 from `unreddened_cubics`)
    give the bits of each table's own evaluation, off the grid and for NaN temperatures too."""
    from stelltemp import _compiled

    keys = ["B_JC", "V_JC", "Ic_JC", "Ks_2MASS"]
    stack = bg.table_stack(keys, "G23", 3.1)
    rng = np.random.default_rng(11)
    na = 200
    lnt = rng.uniform(np.log(500.0), np.log(2e5), na)
    lnt[::23] = np.nan
    e = rng.uniform(bg.E_MIN, bg.E_MAX, na)
    e[:5] = 0.0
    ex, de, dt = (np.full((len(keys), 256), -1.0) for _ in range(3))
    _compiled.excess_block(na, lnt, e, *stack, _compiled.unreddened_cubics(*stack), ex, de, dt)
    for b, key in enumerate(keys):
        table = bg.band_table(key, "G23", 3.1)
        with np.errstate(invalid="ignore"):
            red, red_t, red_e = table.evaluate(lnt, e)
            zero, zero_t, _ = table.evaluate(lnt, np.zeros(na), want_de=False)
        _same(ex[b, :na], red - zero)
        _same(de[b, :na], red_e)
        _same(dt[b, :na], red_t - zero_t)
        assert np.all(ex[b, na:] == -1.0)  # nothing written past the stars given


def test_inversion_identical_on_every_branch(both):
    rng = np.random.default_rng(4)
    t = np.exp(rng.uniform(np.log(700.0), np.log(2e5), 6000))
    e = rng.uniform(-0.6, 6.2, 6000)
    c = bg.colour_table("B_JC", "V_JC").evaluate(np.log(t), np.clip(e, bg.E_MIN, bg.E_MAX), want_de=False)[0]
    c[::50] = -2.0  # bluer than any blackbody
    c[1::50] = np.nan
    c[2::50] = -0.33  # between the hot edge and the Rayleigh–Jeans colour, for small E
    fast, slow = both(col.invert_colour, c, "B_JC", "V_JC", e)
    for a, b in zip(fast, slow):
        _same(a, b)
    flags = fast[2]
    # every outcome is exercised: solved, bad input, no solution, grid edge
    assert (flags == 0).any() and (flags == fl.BAD_INPUT).any()
    assert (flags == fl.NO_SOLUTION).any() and (flags == fl.AT_GRID_EDGE).any()


def test_inversion_round_trip_compiled(monkeypatch):
    monkeypatch.setattr(kernels, "MIN_ROWS", 0)
    rng = np.random.default_rng(5)
    t = np.exp(rng.uniform(np.log(1100.0), np.log(90000.0), 3000))
    e = rng.uniform(0.0, 3.0, 3000)
    c = bg.colour_table("B_JC", "V_JC").evaluate(np.log(t), e, want_de=False)[0]
    back, slope, flags = col.invert_colour(c, "B_JC", "V_JC", e)
    assert np.all(flags == 0)
    assert np.max(np.abs(back / t - 1)) < 1e-10
    assert np.all(slope < 0)


def test_short_calls_never_load_the_compiler(monkeypatch):
    monkeypatch.setattr(kernels, "_state", {"jit": None})
    assert kernels.jit_for(kernels.MIN_ROWS - 1) is None
    assert kernels._state["jit"] is None  # numba not even imported for a short call
    # once a long call has loaded them, the kernels serve the short passes of that run too
    assert kernels.jit_for(kernels.MIN_ROWS) is not None
    assert kernels.jit_for(1) is kernels._state["jit"]


def test_flag_names_dictionary_encoded():
    masks = np.array([0, 3, 3, 256, 0, 1 | 256, 3])
    codes, names = fl.encode(masks)
    assert list(names[codes]) == [fl.describe(m) for m in masks]
    assert len(names) == 4 and codes.dtype == np.int32
    big = np.array([1 << 20, 0, 1 << 20])  # masks past the lookup range take the sorting path
    codes, names = fl.encode(big)
    assert list(names[codes]) == [fl.describe(m) for m in big]
    assert list(fl.describe_all(np.array([], np.int64))) == []


@pytest.mark.parametrize("fit", [False, True])
def test_estimate_in_blocks_equals_one_call(monkeypatch, fit):
    """`estimate` splits long inputs into blocks: same table as one block, row for row."""
    import stelltemp.engine as engine

    rng = np.random.default_rng(6)
    n = 2500
    t = np.exp(rng.uniform(np.log(3000.0), np.log(30000.0), n))
    e = rng.uniform(0.0, 1.0, n)
    keys = ["B_JC", "V_JC", "Ks_2MASS"] if fit else ["B_JC", "V_JC"]
    mags = {k: bg.band_table(k).evaluate(np.log(t), e, want_de=False)[0] + 8.0 for k in keys}
    mags["B_JC"][::37] = np.nan
    kwargs = dict(ebv=e, ebv_err=0.02, parallax=np.full(n, 4.0), parallax_err=0.2, feh=0.0, fit_ebv=fit)
    whole = engine.estimate(mags, **kwargs)
    monkeypatch.setattr(engine, "BLOCK_ROWS", 1000)  # three blocks, the last one short
    blocked = engine.estimate(mags, **kwargs)
    assert blocked.colnames == whole.colnames and blocked.meta == whole.meta
    for name in whole.colnames:
        a, b = whole[name], blocked[name]
        assert getattr(a, "unit", None) == getattr(b, "unit", None)
        a, b = np.asarray(getattr(a, "value", a)), np.asarray(getattr(b, "value", b))
        if a.dtype.kind == "f":
            assert np.array_equal(a, b, equal_nan=True), name
        else:
            assert list(a) == list(b), name


def test_coverage_notes_grouped_equal_star_by_star():
    """Notes written once per distinct set of facts read as if written for each star alone."""
    from stelltemp import calibrations as cal

    rng = np.random.default_rng(7)
    n = 300
    pairs = {b: rng.uniform(-1.5, 10.0, n) for b in sorted({r.bands for r in cal._registry()})[::3]}
    for i, v in enumerate(pairs.values()):
        v[i::4] = np.nan
        v[i + 1::13] = -0.004  # prints as -0.00
        v[i + 2::11] = 1.005  # a printed half
    feh = rng.choice([0.0, -2.5, np.nan, -0.004], n)
    logg = rng.choice([4.4, 2.0, np.nan, 3.5], n)
    together = cal.coverage_notes(pairs, feh=feh, logg=logg)
    alone = [cal.coverage_notes({k: v[i:i + 1] for k, v in pairs.items()}, feh=feh[i:i + 1],
                                logg=logg[i:i + 1])[0] for i in range(n)]
    assert list(together) == alone
    assert len(set(alone)) > 20  # many different notes were exercised


@pytest.mark.parametrize("fit_ebv, ebv_err", [(False, 0.03), (False, 0.0), (True, 0.03), (True, 0.0)])
def test_combination_identical_compiled_and_numpy(both, fit_ebv, ebv_err):
    """The compiled combination pass gives the numpy one's bits (a star's answer not set by its call)."""
    from stelltemp.engine import combine
    from test_combine_batched import FIELDS, KEYS5, _stars

    m, sig, tbb, e, feh, feh_err, logg = _stars(400, KEYS5, 12)
    sig[::17, 2] = np.nan  # an unknown error counts as zero, in both
    fast, slow = both(combine.calibrated_teff, m, sig, KEYS5, tbb, e, np.full(len(e), ebv_err),
                      fit_ebv=fit_ebv, feh=feh, feh_err=feh_err, logg=logg)
    assert np.isfinite(slow.teff).sum() > 200
    for f in FIELDS + ("teff_lo", "teff_hi", "p_value", "not_settled"):
        _same(np.asarray(getattr(fast, f)), np.asarray(getattr(slow, f)))
    assert list(fast.notes) == list(slow.notes)


def test_fused_passes_identical_with_monte_carlo_and_relations_no_star_uses(both):
    """The compiled passes (`calibrate_cells`) and the numpy ones: same bits, also for the interval
    drawn by Monte Carlo and with relations that no star of the call can use (dropped afterwards)."""
    from stelltemp.engine import combine
    from test_combine_batched import FIELDS, KEYS5, _stars

    m, sig, tbb, e, feh, feh_err, logg = _stars(300, KEYS5, 21)
    logg = np.full(len(e), np.nan)  # dwarfs only: every giant relation goes unused
    for fit_ebv in (False, True):
        fast, slow = both(combine.calibrated_teff, m, sig, KEYS5, tbb, e, np.full(len(e), 0.04),
                          fit_ebv=fit_ebv, feh=feh, feh_err=feh_err, logg=logg, monte_carlo=64, seed=5)
        assert not fast.used[:, [k.endswith("giant") for k in fast.keys]].any()
        for f in FIELDS + ("teff_lo", "teff_hi", "p_value", "not_settled"):
            _same(np.asarray(getattr(fast, f)), np.asarray(getattr(slow, f)))


def test_fused_passes_one_star_at_a_time(monkeypatch):
    """A star's compiled result does not depend on the other stars of its call (blocks, dropouts)."""
    from stelltemp.engine import combine
    from test_combine_batched import KEYS5, _stars

    monkeypatch.setattr(kernels, "MIN_ROWS", 0)
    monkeypatch.delenv("STELLTEMP_JIT", raising=False)
    m, sig, tbb, e, feh, feh_err, logg = _stars(kernels.BLOCK + 40, KEYS5, 23)  # two blocks
    kw = dict(fit_ebv=True, feh=feh, feh_err=feh_err, logg=logg)
    err = np.full(len(e), 0.03)
    whole = combine.calibrated_teff(m, sig, KEYS5, tbb, e, err, **kw)
    for k in range(0, len(e), 37):
        one = combine.calibrated_teff(m[k:k + 1], sig[k:k + 1], KEYS5, tbb[k:k + 1], e[k:k + 1], err[k:k + 1],
                                      **{name: v[k:k + 1] for name, v in kw.items() if name != "fit_ebv"},
                                      fit_ebv=True)
        for f in ("teff", "teff_err", "ebv", "chi2", "n_used"):
            _same(np.asarray(getattr(whole, f))[k:k + 1], np.asarray(getattr(one, f)))


_CACHE_PROBE = """
import numpy as np
from stelltemp import kernels
from stelltemp.engine import estimate
kernels.MIN_ROWS = 0
n = 50
rng = np.random.default_rng(0)
mags = {"B_JC": 10.6 + rng.normal(0, 0.02, n), "V_JC": np.full(n, 10.0)}
estimate(mags, ebv=np.full(n, 0.1), ebv_err=0.02)
jit = kernels.jit_for(1)
print(sum(len(f.stats.cache_misses) for f in jit.values()), sum(len(f.stats.cache_hits) for f in jit.values()))
"""


def test_a_new_process_loads_the_kernels_from_the_disk_cache(tmp_path):
    # kernels built inside a function captured their helpers as closure cells, whose pickled
    # form differs in every process: numba's cache never matched and every run recompiled
    import os
    import subprocess
    import sys

    env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp_path / "numba"))
    env.pop("STELLTEMP_JIT", None)
    runs = [subprocess.run([sys.executable, "-c", _CACHE_PROBE], env=env, capture_output=True, text=True,
                           check=True).stdout.split() for _ in range(2)]
    misses, hits = (int(v) for v in runs[1])
    assert misses == 0 and hits >= 3  # the second process compiled nothing


def _relation_inputs(rel, n, rng):
    """Colours spanning the relation's range and beyond, [Fe/H] below its floor, log g of every kind."""
    lo, hi = rel.colour_range
    width = hi - lo
    x = rng.uniform(lo - 0.3 * width, hi + 0.3 * width, n)
    x[::41] = np.nan
    x[1::53], x[2::53] = lo, hi  # the range's own ends (inclusive)
    if rel.form == "table":  # exactly at the nodes, and halfway between them
        xs = np.asarray(rel.nodes[0])
        x[3::7] = rng.choice(xs, x[3::7].size)
        x[4::7] = rng.choice((xs[1:] + xs[:-1]) / 2, x[4::7].size)
    f_lo, f_hi = rel.feh_range
    z = rng.uniform(f_lo - 0.5, f_hi + 0.5, n)
    if rel.feh_floor is not None:
        z[5::9] = rng.uniform(f_lo, rel.feh_floor, z[5::9].size)  # held at the floor
        z[6::97] = rel.feh_floor
    z[::37] = np.nan
    g = rng.choice([np.nan, 1.0, 2.0, 2.999, 3.0, 3.5, 4.4, 5.5], n)  # unknown, giant, dwarf, edges
    return x, z, g


def test_every_relation_identical_compiled_and_numpy(both):
    """`Relation.at` compiled and in numpy: the same bits on every branch of every relation."""
    from stelltemp import calibrations as cal

    rng = np.random.default_rng(8)
    rels = cal.relations()
    assert {rel.form for rel in rels} == set(cal.FORMS)
    for rel in rels:
        x, z, g = _relation_inputs(rel, 4000, rng)
        fast, slow = both(rel.at, x, z, g)
        for a, b in zip(fast, slow):
            _same(a, b)
        t, _, d_z, inside = slow
        assert inside.any() and (~inside).any(), rel.key
        assert np.isnan(t[~inside]).all() and np.isfinite(t[inside]).all(), rel.key
        if rel.feh_floor is not None:
            held = inside & (z < rel.feh_floor)
            assert held.any() and np.all(d_z[held] == 0.0), rel.key
        if rel.needs_logg:
            assert not inside[np.isnan(g)].any(), rel.key


def test_compiled_relation_keeps_shapes_and_scalars(both):
    """Broadcast inputs and scalars come back in numpy's shapes and types from the kernel too."""
    from stelltemp import calibrations as cal

    rel = cal.get_relation("c10_vk")
    colours = np.linspace(0.5, 3.5, 12).reshape(3, 4)
    fast, slow = both(rel.at, colours, np.array([[-4.0], [0.0], [0.3]]), None)
    for a, b in zip(fast, slow):
        _same(a, b)
    fast, slow = both(rel.at, 1.56, 0.0)
    for a, b in zip(fast, slow):
        assert isinstance(a, np.ndarray) and a.shape == ()
        _same(a, b)


def test_linearise_identical_compiled_and_numpy(both):
    """The Newton inversion at the current T_eff: compiled per star, the numpy steps' bits."""
    from stelltemp import calibrations as cal
    from stelltemp.engine import combine

    rng = np.random.default_rng(9)
    n = 3000
    moved = kept = 0
    for rel in cal.relations():
        setup = combine._Setup([rel.blue, rel.red], [rel])
        x, z, g = _relation_inputs(rel, n, rng)
        t, s, gz, inside = rel.at(x, z, g)
        used = inside & np.isfinite(s)
        y = np.where(used, t, np.nan)[:, None]
        s = np.where(used, s, 0.0)[:, None]
        gz = np.where(used & np.isfinite(gz), gz, 0.0)[:, None]
        # the current estimate: at the colour's own T_eff (an exact fixed point at once),
        # near it, far off (out of the relation's range) or unknown
        t_hat = np.where(np.isfinite(t), t, 5000.0) * rng.choice([1.0, 0.99, 1.03, 1.3, 0.5, np.nan], n)
        args = (setup, t_hat, x[:, None], y, s, gz, used[:, None], np.where(np.isfinite(z), z, 0.0), g)
        fast, slow = both(combine._linearise_at, *args)
        for a, b in zip(fast, slow):
            _same(a, b)
        changed = used & (slow[1][:, 0] != s[:, 0])
        moved += changed.sum()
        kept += (used & ~changed & (t_hat != t)).sum()
    assert moved > 10_000 and kept > 1000  # both outcomes exercised: linearised and kept


@pytest.mark.parametrize("fit_ebv, ebv_err", [(False, np.inf), (True, 0.1), (True, np.inf)])
def test_blackbody_fit_identical_compiled_and_numpy(both, fit_ebv, ebv_err):
    """`kernels.fit_cells` gives the numpy loop of `fit_blackbody` bit for bit (missing bands,
    too few bands, step halving, grid edges included)."""
    from stelltemp.engine.fit import fit_blackbody
    from test_combine_batched import KEYS5, _stars

    m, sig, tbb, e, feh, feh_err, logg = _stars(500, KEYS5, 31)
    m[:5] = [[np.nan, np.nan, np.nan, 9.0, 8.0]] * 5  # too few bands with E(B-V) free
    m[5:10, :2] += 4.0  # far from any blackbody: a poor fit that halves its steps
    m[10:15] = [[25.0, 20.0, 15.0, 10.0, 5.0]] * 5  # very red: the cool edge
    fast, slow = both(fit_blackbody, m, sig, KEYS5, ebv=np.clip(e, 0, None), ebv_err=ebv_err, fit_ebv=fit_ebv)
    assert np.isfinite(slow["t"]).sum() > 400
    for name in slow:
        _same(np.asarray(fast[name]), np.asarray(slow[name]))


@pytest.mark.parametrize("fit_ebv", [False, True])
def test_blackbody_fit_identical_compiled_and_numpy_with_many_bands(both, fit_ebv):
    """Ten bands, beyond the eight at which numpy's own row sums start summing in pairs: both sides
    sum over the bands in order."""
    from stelltemp.engine.fit import fit_blackbody
    from test_combine_batched import _stars

    keys = ["U_JC", "B_JC", "V_JC", "Rc_JC", "Ic_JC", "g_PS1", "z_PS1", "J_2MASS", "H_2MASS", "Ks_2MASS"]
    m, sig, tbb, e, feh, feh_err, logg = _stars(300, keys, 37)
    fast, slow = both(fit_blackbody, m, sig, keys, ebv=np.clip(e, 0, None), ebv_err=0.1, fit_ebv=fit_ebv)
    assert np.isfinite(slow["t"]).sum() > 250
    for name in slow:
        _same(np.asarray(fast[name]), np.asarray(slow[name]))


def test_c_log_is_the_compiled_kernels_log():
    """The numpy twins take the C library's log (`kernels.c_log`), the one numba's compiled code calls;
    numpy's own vectorised log can differ from it in the last bit (AVX-512 builds of numpy 2)."""
    import math

    rng = np.random.default_rng(8)
    t = np.exp(rng.uniform(np.log(500.0), np.log(2e5), 200_000))
    edge = np.array([0.0, -1.0, np.nan, np.inf, 1.0])
    got = kernels.c_log(np.concatenate([t, edge]))
    assert np.array_equal(got[:t.size], np.array([math.log(v) for v in t]))
    assert np.array_equal(got[t.size:], [-np.inf, np.nan, np.nan, np.inf, 0.0], equal_nan=True)

    @numba.njit
    def compiled_log(x):
        out = np.empty_like(x)
        for i in range(x.size):
            out[i] = np.log(x[i])
        return out

    assert np.array_equal(compiled_log(t), got[:t.size])


def test_erfc_identical_compiled_and_numpy(both):
    """The χ² survival function's erfc: compiled and per value by ``math.erfc``, the same bits."""
    from stelltemp.engine import chisq

    rng = np.random.default_rng(9)
    x = np.concatenate([rng.uniform(0.0, 30.0, 5000), [0.0, np.inf, np.nan]])
    fast, slow = both(chisq._erfc, x)
    _same(fast, slow)
    dof = rng.integers(1, 12, 5000)
    fast, slow = both(chisq.chi2_survival, dof, x[:5000] ** 2)
    _same(fast, slow)
