"""Compiled per-star kernels for large calls, with the numpy code as the fallback.

Large arrays go through loops compiled by numba (one pass per star, all
its steps kept in registers); small calls, and every call when numba is
missing or ``STELLTEMP_JIT=0`` is set, run the numpy code beside each
kernel.  Both compute the same thing in the same order of operations:
``tests/test_kernels.py`` checks that they agree bit for bit.

numba is imported only by the first call with at least `MIN_ROWS` stars
(later calls of any size then use the kernels too), and compiles with ``cache=True`` (machine code kept in numba's cache folder
between runs), so short runs never pay for the compiler.

The kernels
-----------
`invert_cells`
    Colour → ln temperature on the bicubic Hermite colour table of
    :mod:`stelltemp.bandgrid`: bisection over the temperature nodes with the
    node colours exact (cubic) in E(B−V), then Newton steps on the cell's
    cubic in ln T from the linear guess.
`evaluate_cells`
    Value, ∂/∂lnT and ∂/∂E of a bicubic Hermite table at many points.
`combine_cells`
    One pass of the calibrated-temperature combination of
    :mod:`stelltemp.engine.combine` per star: the relations' covariance,
    its Cholesky factor and the generalised least squares estimate (the
    twin of ``combine._combine_pass``, in the same order of operations).
`relation_cells`
    One empirical colour–T_eff relation at many stars: T_eff, ∂T/∂X,
    ∂T/∂[Fe/H] and whether it applies (the twin of ``Relation.at``, from the
    arrays of ``Relation._packed``).
`linearise_relation`
    The Newton inversion of one relation at each star's current T_eff and
    the linearised pseudo-observation there (the twin of
    ``combine._linearise_at``, one call per relation).
`calibrate_cells`
    Every Gauss–Newton pass of ``combine.calibrated_teff`` fused: for a
    block of stars at a time, the colour excess of each band, each
    relation at the dereddened colours and its linearisation (the steps
    above, on the block), then per star the combination and the
    convergence test (the twin of ``combine._iterate``).  It saves the
    numpy glue between the kernels above: 5 bands, 1e5 stars, 1.39 → 1.07 s
    (min of 3) for a whole ``estimate`` with E(B−V) given.
`fit_cells`
    The Gauss–Newton loop of the multi-band blackbody fit
    (``fit.fit_blackbody``), one star at a time, its sums over the bands
    in ascending order as the numpy loop's ``_rowsum``: 5 bands, 1e5
    stars, 0.46 → 0.28 s for the whole fit (one thread).

`erfc_cells`
    The complementary error function of each value (the C library's, as
    ``math.erfc``), for the χ² survival function of
    :mod:`stelltemp.engine.chisq` (its numpy twin calls ``math.erfc`` per
    value: 90 ns each).

The relation kernels work on blocks of `BLOCK` stars, one term of the
polynomial at a time across the block, so the loops over stars vectorise;
every star still gets the operations of the numpy code in its order.
"""

import math
import os

import numpy as np

#: calls with fewer stars than this use the numpy code (no compiler start-up)
MIN_ROWS = 20_000
#: Newton steps inside a cell, from the linear guess: ~1e-4 → 1e-8 → 1e-16 in t
NEWTON_STEPS = 4
#: stars per block of the relation kernels (their powers and sums stay in the cache)
BLOCK = 256

_state = {"jit": None}  # the compiled functions once loaded, False if unavailable


def enabled():
    """True unless ``STELLTEMP_JIT`` is set to 0/false/no/off."""
    return os.environ.get("STELLTEMP_JIT", "1").strip().lower() not in ("0", "false", "no", "off")


def _load():
    """Compile (or load from numba's cache) the kernels; False when numba is missing."""
    if _state["jit"] is None:
        try:
            from . import _compiled
        except ImportError:  # numba is not installed
            _state["jit"] = False
        else:
            _state["jit"] = dict(_compiled.KERNELS)
    return _state["jit"]


def jit_for(n):
    """The compiled kernels for a call over ``n`` stars, or None (use numpy).

    Once loaded (by a call of `MIN_ROWS` stars or more), the kernels serve
    calls of any size: the small passes of a long run (the few stars still
    iterating) would otherwise pay numpy's per-operation cost.  Both give
    the same bits, so this changes no result.
    """
    if not enabled():
        return None
    if _state["jit"]:
        return _state["jit"]
    if n < MIN_ROWS:
        return None
    return _load() or None


def c_log(x):
    """Natural logarithm by the C library, element by element: the one the compiled kernels call.

    numpy's own vectorised log (AVX-512 builds of numpy 2) differs from the C
    library's in the last bit for about one value in 15,000, so a numpy twin
    of a kernel that takes a log inside takes it here.  Zero gives −inf and
    a negative number or NaN gives NaN, as the kernels do.

    Examples
    --------
    >>> import math
    >>> c_log(np.array([1.0, math.e, 0.0, -1.0])).tolist()[:3]
    [0.0, 1.0, -inf]
    """
    x = np.asarray(x, float)
    flat = (math.log(v) if v > 0 else (-math.inf if v == 0 else math.nan) for v in x.ravel().tolist())
    return np.fromiter(flat, float, x.size).reshape(x.shape)


def backend():
    """'numba' when large calls are compiled, else 'numpy'."""
    return "numba" if enabled() and _load() else "numpy"


def __getattr__(name):  # BACKEND, computed (and numba loaded) only when asked
    if name == "BACKEND":
        return backend()
    raise AttributeError(name)
