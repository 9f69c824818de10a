"""Fast kernel: blackbody magnitudes on a precomputed (temperature, reddening) grid.

For every passband, extinction law and R_V, the synthetic magnitude of a
reddened blackbody of unit solid angle,

    M(T, E) = −2.5 log10 ∫ B_λ(T) 10^(−0.4 R_V E k(λ)) λ S(λ) dλ + c_band,

is tabulated with its exact partial derivatives ∂M/∂lnT, ∂M/∂E and
∂²M/∂lnT∂E on a grid uniform in ln T (1,000–100,000 K) and E(B−V)
(−0.5 to 6.0).  Between nodes a bicubic Hermite patch reproduces value
and derivatives exactly at the nodes; with the derivatives exact, the
interpolation error falls as the fourth power of the step, and the test
suite measures it at about 1e-6 mag at most anywhere on the grid (the documented
target is 1e-4 mag).  A star of angular diameter θ (radians) has
m = M(T, E) − 2.5 log10(π θ² / 4).

Evaluating a table costs four gathers and a few dozen array operations per
point, so millions of temperatures evaluate in a fraction of a second.
Colour tables are differences of band tables (Hermite interpolation is
linear in the tabulated data), so a colour costs one evaluation.

Units at the public functions: temperatures are plain numbers in K or
Quantities (K, °C, °F); E(B−V) plain magnitudes or a Quantity in mag;
angular diameters plain radians or an angle Quantity (mas, arcsec …).
Magnitudes come back as plain numbers.
"""

from dataclasses import dataclass
from functools import cached_property, lru_cache

import numpy as np

from . import cache, kernels
from astropy import units as u

from .errors import StelltempError
from .extinction import DEFAULT_LAW, DEFAULT_RV, check_law, relative_extinction
from .passbands import get_passband
from .photometry import mag_offset
from .planck import dlnb_dlnt, planck_lambda_cgs

__all__ = ["blackbody_mag", "band_table", "colour_table", "constant_coefficient", "inside", "band_weights",
           "blackbody_band_terms"]

T_MIN, T_MAX = 1000.0, 100000.0
N_T = 241
E_MIN, E_MAX, E_STEP = -0.5, 6.0, 0.1

#: cubic Hermite data (f(0), f(1), f'(0), f'(1)) to power-basis coefficients (1, t, t², t³)
_HERMITE = np.array([[1.0, 0.0, 0.0, 0.0],
                     [0.0, 0.0, 1.0, 0.0],
                     [-3.0, 3.0, -2.0, -1.0],
                     [2.0, -2.0, 1.0, 1.0]])

LN10_04 = 0.4 * np.log(10.0)
MAG = 2.5 / np.log(10.0)


def trapezoid_weights(x):
    """Weights w with Σ w f = trapezoid(f, x)."""
    dx = np.diff(x)
    w = np.zeros_like(x)
    w[:-1] += dx / 2
    w[1:] += dx / 2
    return w


@dataclass(frozen=True)
class HermiteTable:
    """Bicubic Hermite table over (ln T, E(B−V)).

    ``coef[i, j] = (f, h_T ∂f/∂lnT, h_E ∂f/∂E, h_T h_E ∂²f/∂lnT∂E)`` at node (i, j).
    """

    coef: np.ndarray
    lnt0: float
    h_t: float
    e0: float
    h_e: float

    @property
    def shape(self):
        return self.coef.shape[:2]

    def __sub__(self, other):
        diff = HermiteTable(self.coef - other.coef, self.lnt0, self.h_t, self.e0, self.h_e)
        # the patches are linear in the node data: subtract them instead of rebuilding
        diff.__dict__["patches"] = self.patches - other.patches
        return diff

    @cached_property
    def patches(self):
        """Power-basis coefficients of each cell: p(t, s) = Σ C[a, b] tᵃ sᵇ, shape (nT−1, nE−1, 4, 4).

        From node data by C = H G Hᵀ, with H the cubic Hermite-to-power matrix
        and G the 4 × 4 node data (values, scaled slopes, cross terms) of the cell.
        """
        c = self.coef
        # G[a, b]: a over (f at t=0, f at t=1, slope_t at 0, slope_t at 1); b likewise in s
        g = np.empty((c.shape[0] - 1, c.shape[1] - 1, 4, 4))
        for a, (di, t_part) in enumerate(((0, 0), (1, 0), (0, 1), (1, 1))):
            for b, (dj, s_part) in enumerate(((0, 0), (1, 0), (0, 1), (1, 1))):
                comp = {(0, 0): 0, (1, 0): 1, (0, 1): 2, (1, 1): 3}[(t_part, s_part)]
                g[..., a, b] = c[di:di + c.shape[0] - 1, dj:dj + c.shape[1] - 1, comp]
        out = np.einsum("ia,...ab,jb->...ij", _HERMITE, g, _HERMITE)
        out.flags.writeable = False
        return np.ascontiguousarray(out)

    def cell(self, lnt, ebv):
        """Cell indices and local coordinates (flat cell index, t, s) of points."""
        nt, ne = self.shape
        u = (lnt - self.lnt0) / self.h_t
        v = (ebv - self.e0) / self.h_e
        # fmax/fmin map NaN to the bound (cell 0), and NaN still reaches the
        # results through t or s; truncating a value ≥ 0 is its floor
        i = np.fmin(np.fmax(u, 0.0), nt - 2).astype(np.intp)
        j = np.fmin(np.fmax(v, 0.0), ne - 2).astype(np.intp)
        return i * (ne - 1) + j, u - i, v - j

    def evaluate(self, lnt, ebv, want_de=True):
        """Value, ∂/∂lnT and ∂/∂E at points (ln T, E); arrays broadcast together.

        Points outside the grid are extrapolated with the edge patch; callers
        flag them (see :func:`inside`).  With ``want_de=False`` the third
        result is None (saves a third of the work).
        """
        lnt, ebv = np.broadcast_arrays(np.asarray(lnt, float), np.asarray(ebv, float))
        shape = lnt.shape
        jit = kernels.jit_for(lnt.size)
        if jit is not None:
            return self._evaluate_compiled(jit, lnt.ravel(), ebv.ravel(), want_de, shape)
        k, t, s = self.cell(lnt.ravel(), ebv.ravel())
        q, dq = self.cubics(k, s, want_de)
        value, d_lnt = self.horner(q, t)
        d_e = None
        if want_de:
            d_e = (dq[:, 0] + t * (dq[:, 1] + t * (dq[:, 2] + t * dq[:, 3]))) / self.h_e
            d_e = d_e.reshape(shape)
        return value.reshape(shape), d_lnt.reshape(shape), d_e

    def _evaluate_compiled(self, jit, lnt, ebv, want_de, shape):
        n = lnt.size
        value, d_lnt = np.empty(n), np.empty(n)
        d_e = np.empty(n if want_de else 0)
        nt, ne = self.shape
        jit["evaluate_cells"](np.ascontiguousarray(lnt), np.ascontiguousarray(ebv), self.flat_patches, nt, ne,
                              self.lnt0, self.h_t, self.e0, self.h_e, bool(want_de), value, d_lnt, d_e)
        return value.reshape(shape), d_lnt.reshape(shape), d_e.reshape(shape) if want_de else None

    @cached_property
    def flat_patches(self):
        """`patches` as one flat contiguous array (for the compiled kernels)."""
        return np.ascontiguousarray(self.patches).ravel()

    def cubics(self, k, s, want_de=False):
        """Cubics in t of cells ``k`` at E coordinates ``s``: q (n, 4) and, if asked, ∂q/∂s.

        With E fixed, a star's cubic changes only when its temperature moves
        to another cell, so iterative solvers can keep q between steps.
        """
        c = self.patches.reshape(-1, 4, 4)[k]  # (n, 4 powers of t, 4 powers of s)
        s_ = s[:, None]
        q = c[:, :, 0] + s_ * (c[:, :, 1] + s_ * (c[:, :, 2] + s_ * c[:, :, 3]))
        dq = c[:, :, 1] + s_ * (2 * c[:, :, 2] + 3 * s_ * c[:, :, 3]) if want_de else None
        return q, dq

    def horner(self, q, t):
        """Value and ∂/∂lnT of cubics q (n, 4) at cell coordinates t."""
        value = q[:, 0] + t * (q[:, 1] + t * (q[:, 2] + t * q[:, 3]))
        d_lnt = (q[:, 1] + t * (2 * q[:, 2] + 3 * t * q[:, 3])) / self.h_t
        return value, d_lnt

    def nodes(self):
        """(ln T nodes, E nodes) of the table."""
        nt, ne = self.shape
        return self.lnt0 + self.h_t * np.arange(nt), self.e0 + self.h_e * np.arange(ne)


def _kelvin(temperature):
    """Plain K from plain numbers or a temperature Quantity (K, °C, °F); no range check (the grid decides)."""
    return _plain(temperature, u.K, "temperature", u.temperature())


def _plain(value, unit, what, equivalencies=()):
    """Plain numbers in ``unit`` from plain numbers or a Quantity (one clear error otherwise)."""
    if isinstance(value, u.Quantity):
        try:
            return value.to_value(unit, equivalencies=equivalencies)
        except u.UnitConversionError:
            raise StelltempError(f"{what} must be in units convertible to {unit}, got {value.unit}") from None
    return np.asarray(value, float)


def inside(temperature_k, ebv):
    """True where (T, E(B−V)) lies on the tabulated grid (T: plain K or a Quantity; E(B−V) in mag).

    Examples
    --------
    >>> from astropy import units as u
    >>> bool(inside(5000, 0.1)), bool(inside(500 * u.K, 0.1)), bool(inside(5000 * u.deg_C, 0.1))
    (True, False, True)
    """
    t = _kelvin(temperature_k)
    e = _plain(ebv, u.mag, "E(B-V)")
    return (t >= T_MIN) & (t <= T_MAX) & (e >= E_MIN - 1e-12) & (e <= E_MAX + 1e-12)


def band_weights(passband):
    """(λ, w): integration wavelengths (Å) and weights with Σ w F_λ = ∫ F_λ λ S dλ.

    Examples
    --------
    >>> lam, w = band_weights("V_JC")
    >>> lam.shape == w.shape
    True
    """
    band = get_passband(passband)
    lam = band.integration_grid
    return lam, trapezoid_weights(lam) * lam * band.photon_response_at(lam)


def blackbody_band_terms(band, temperature_k, ebv, law=DEFAULT_LAW, rv=DEFAULT_RV):
    """Direct integration: M, ∂M/∂lnT, ∂M/∂E, ∂²M/∂lnT∂E for a grid of T × E.

    Returns four arrays of shape (len(T), len(E)).  This is the brute-force
    computation the tables are built from, also used to check them.
    Temperatures plain K or a Quantity; E(B−V) plain mag or a Quantity.

    Examples
    --------
    >>> m, m_t, m_e, m_te = blackbody_band_terms("V_JC", [5000.0, 6000.0], [0.0, 0.5])
    >>> m.shape, bool(m_e[0, 0] > 0)
    ((2, 2), True)
    """
    lam, weight = band_weights(band)
    band = get_passband(band)
    t = np.atleast_1d(_kelvin(temperature_k))
    e = np.atleast_1d(_plain(ebv, u.mag, "E(B-V)"))
    b = planck_lambda_cgs(t[:, None], lam[None, :]) * weight  # (nT, nλ)
    g = dlnb_dlnt(t[:, None], lam[None, :])
    ext = -LN10_04 * float(rv) * relative_extinction(lam, law, rv)  # d ln(transmission)/dE
    tau = np.exp(np.outer(ext, e))  # (nλ, nE)
    i0 = b @ tau
    i_t = (b * g) @ tau
    i_e = b @ (tau * ext[:, None])
    i_te = (b * g) @ (tau * ext[:, None])
    m = -MAG * np.log(i0) + mag_offset(band)
    m_t = -MAG * i_t / i0
    m_e = -MAG * i_e / i0
    m_te = -MAG * (i_te / i0 - i_t * i_e / i0**2)
    return m, m_t, m_e, m_te


#: modules whose code decides a table's numbers: their source is part of the disk-cache key
_SOURCES = ("bandgrid.py", "photometry.py", "planck.py", "passbands.py", "extinction.py", "reference.py")


@lru_cache(maxsize=1)
def _code_digest():
    from pathlib import Path

    here = Path(__file__).resolve().parent
    return cache.digest(*(cache.file_digest(here / name) for name in _SOURCES))


@lru_cache(maxsize=1)
def _vega_digest():
    from .reference import VEGA_FILE, sedpy_data_file

    return cache.file_digest(sedpy_data_file(VEGA_FILE))


@lru_cache(maxsize=256)
def table_key(band, law, rv):
    """Disk-cache key of a band table: the curve's content, the law, R_V, the grid and the code."""
    from importlib.metadata import version

    band = get_passband(band)
    parts = [_code_digest(), band.key, band.detector, band.magsys, float(band.vega_mag),
             np.asarray(band.wave, float), np.asarray(band.response, float), law, float(rv),
             T_MIN, T_MAX, N_T, E_MIN, E_MAX, E_STEP, version("dust_extinction")]
    if band.magsys == "Vega":
        parts.append(_vega_digest())
    return cache.digest(*parts)


def _grid():
    lnt = np.linspace(np.log(T_MIN), np.log(T_MAX), N_T)
    n_e = int(round((E_MAX - E_MIN) / E_STEP)) + 1
    return lnt, np.linspace(E_MIN, E_MAX, n_e)


def _build_coef(key, law, rv):
    lnt, e = _grid()
    h_t, h_e = lnt[1] - lnt[0], e[1] - e[0]
    m, m_t, m_e, m_te = blackbody_band_terms(key, np.exp(lnt), e, law, rv)
    return np.stack([m, h_t * m_t, h_e * m_e, h_t * h_e * m_te], axis=-1)


def _hermite_table(coef):
    lnt, e = _grid()
    return HermiteTable(coef, float(lnt[0]), float(lnt[1] - lnt[0]), float(e[0]), float(e[1] - e[0]))


def _build_arrays(key, law, rv):
    """A band's node data and its cell polynomials (both kept in the disk cache)."""
    coef = _build_coef(key, law, rv)
    return {"coef": coef, "patches": _hermite_table(coef).patches}


@lru_cache(maxsize=256)
def _band_table(key, law, rv):
    lnt, e = _grid()
    shape = (lnt.size, e.size, 4)
    stored = cache.load_or_build("band", table_key(key, law, rv), lambda: _build_arrays(key, law, rv))
    coef, patches = stored["coef"], stored.get("patches")
    if coef.shape != shape or not np.all(np.isfinite(coef)):  # not what this code builds: build it here
        coef, patches = _build_coef(key, law, rv), None
    coef.flags.writeable = False
    table = _hermite_table(coef)
    if patches is not None and patches.shape == (shape[0] - 1, shape[1] - 1, 4, 4) and np.all(np.isfinite(patches)):
        # read, not rebuilt: they are what `HermiteTable.patches` gives for this coef (0.006 s a band)
        patches = np.ascontiguousarray(patches)
        patches.flags.writeable = False
        table.__dict__["patches"] = patches
    table.patches  # noqa: B018 - build the cell polynomials once, with the table
    return table


def band_table(passband, law=DEFAULT_LAW, rv=DEFAULT_RV):
    """The Hermite table of blackbody magnitudes through one passband (cached).

    Examples
    --------
    >>> band_table("V_JC").shape[:2]
    (241, 66)
    """
    check_law(law, rv)
    band = get_passband(passband)
    # user curves are cached by object (a file read again is a new curve), built-ins by key
    return _band_table(band if band.system == "user" else band.key, law, float(rv))


#: the stacked band tables of recent runs, by the identity of their tables (which it keeps alive)
_STACKS = {}


def table_stack(keys, law, rv):
    """Every band's Hermite table as flat arrays, for the kernels that evaluate several bands per star.

    (`kernels.calibrate_cells`, `kernels.fit_cells`); kept between calls.

    ``(patches, offsets, shape, grid)``: the flat patches of all bands in
    one array, where each band's start, each table's (n_T, n_E) and its
    (ln T₀, h_t, E₀, h_E).
    """
    tables = tuple(band_table(key, law, rv) for key in keys)
    ident = tuple(id(t) for t in tables)
    entry = _STACKS.get(ident)
    if entry is None:
        flat = [t.flat_patches for t in tables]
        offsets = np.concatenate([[0], np.cumsum([a.size for a in flat])]).astype(np.intp)
        shape = np.array([t.shape[:2] for t in tables], np.intp).reshape(len(tables), 2)
        grid = np.array([[t.lnt0, t.h_t, t.e0, t.h_e] for t in tables], float).reshape(len(tables), 4)
        entry = tables, (np.concatenate(flat), offsets, shape, grid)
        if len(_STACKS) >= 8:
            _STACKS.pop(next(iter(_STACKS), None), None)  # threads may race here: harmless
        _STACKS[ident] = entry
    return entry[1]


def colour_table(blue, red, law=DEFAULT_LAW, rv=DEFAULT_RV):
    """Hermite table of the blackbody colour m_blue − m_red.

    Examples
    --------
    >>> import numpy as np
    >>> value, d_lnt, d_e = colour_table("B_JC", "V_JC").evaluate(np.log(5772.0), 0.0)
    >>> 0.5 < float(value) < 0.8
    True
    """
    return band_table(blue, law, rv) - band_table(red, law, rv)


def blackbody_mag(passband, temperature_k, ebv=0.0, law=DEFAULT_LAW, rv=DEFAULT_RV, angular_diameter_rad=None):
    """Synthetic magnitude of a (reddened) blackbody from the fast tables.

    Without ``angular_diameter_rad`` the blackbody has unit solid angle
    (F_λ = B_λ × 1 sr), useful for colours.

    Parameters
    ----------
    passband : Passband or str
    temperature_k : float, array_like or Quantity
        Plain numbers in K; Quantities in K, °C or °F.
    ebv : float, array_like or Quantity
        E(B−V) in mag.
    law, rv : str, float
        Extinction law and R_V.
    angular_diameter_rad : float, array_like or Quantity, optional
        Plain numbers in radians, or an angle Quantity (mas …).

    Returns
    -------
    float or ndarray
        Magnitude(s) in the band's own system, plain numbers.

    Examples
    --------
    >>> from astropy import units as u
    >>> a = blackbody_mag("V_JC", 5772.0, angular_diameter_rad=1.0 * u.mas)
    >>> b = blackbody_mag("V_JC", 5498.85 * u.deg_C, angular_diameter_rad=4.84813681e-9)
    >>> bool(abs(a - b) < 1e-6)
    True
    """
    table = band_table(passband, law, rv)
    m, _, _ = table.evaluate(np.log(_kelvin(temperature_k)), _plain(ebv, u.mag, "E(B-V)"))
    if angular_diameter_rad is not None:
        theta = _plain(angular_diameter_rad, u.rad, "angular diameter")
        m = m - 2.5 * np.log10(np.pi * theta ** 2 / 4)
    return m


def constant_coefficient(passband, law=DEFAULT_LAW, rv=DEFAULT_RV, reference_temperature=10000.0):
    """Shortcut A_band / E(B−V) for a blackbody at one reference temperature, for E → 0.

    Documented shortcut only: the engine never uses it, because the true
    coefficient depends on the star's spectrum (it differs by ~0.1 mag per
    unit E(B−V) between a 3,500 K and a 30,000 K star in B−V).
    ``reference_temperature`` is plain K or a Quantity (K, °C, °F).

    Examples
    --------
    >>> 3.0 < constant_coefficient("V_JC") < 3.3
    True
    """
    reference_temperature = float(_kelvin(reference_temperature))
    if not (T_MIN <= reference_temperature <= T_MAX):
        raise StelltempError(f"reference temperature must lie in {T_MIN:g}–{T_MAX:g} K")
    _, _, dm_de = band_table(passband, law, rv).evaluate(np.log(reference_temperature), 0.0)
    return float(dm_de)
