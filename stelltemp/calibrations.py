"""Empirical colour–effective-temperature relations from the literature.

Three functional forms, one evaluation path (`Relation`):

* ``theta`` — θ = S / T_eff = Σ cᵢ Xᵖ [Fe/H]ᑫ (S = 5040 K): the infrared-flux-
  method relations (Casagrande et al. 2010; González Hernández & Bonifacio
  2009; Mucciarelli et al. 2021);
* ``linear`` — T_eff = S · Σ cᵢ Xᵖ [Fe/H]ᑫ (S = 3500 K for Mann et al. 2015);
* ``table`` — T_eff interpolated linearly in a tabulated intrinsic-colour
  sequence (Pecaut & Mamajek 2013), used only where the colour is monotonic.

X is a dereddened colour index (blue − red, in magnitudes).  The
coefficients live as ECSV package data in ``stelltemp/data/calibrations/``,
one table per paper, with the citation, the validity ranges and the
published scatter in the table and its metadata.  Each polynomial table
names the term multiplied by each of its coefficient columns (``terms`` in
the metadata: ``1``, ``X``, ``X^3``, ``[Fe/H]^2``, ``X*[Fe/H]`` …), so a
paper's own coefficient order is kept in the file.

Loaded relations (see each table's metadata for what was verified):

* Casagrande, Ramírez, Meléndez, Bessell & Asplund 2010, A&A 512, A54,
  Table 4 — FGK dwarfs and subgiants; B−V, V−Rc, (R−I)c, V−Ic, V−J, V−H,
  V−Ks, J−Ks.
* González Hernández & Bonifacio 2009, A&A 497, 497, Table 5 — giants
  (log g < 3) in B−V, V−Rc, V−J, V−H, V−Ks, J−Ks, [Fe/H] −4.0 to +0.2
  (from a public transcription; only J−Ks is cross-checked against a
  second copy, the other rows are marked unverified in the table).
* Mucciarelli, Bellazzini & Massari 2021, A&A 653, A90, Table 1 — Gaia
  (BP−RP)₀ for dwarfs (log g ≥ 3) and giants (log g < 3).
* Mann, Feiden, Gaidos, Boyajian & von Braun 2015, ApJ 804, 64, Table 2 as
  corrected in their 2016 erratum (ApJ 819, 87) — K7–M7 dwarfs,
  2,700–4,100 K; V−J, V−Ic, r−z, r−J.
* Pecaut & Mamajek 2013, ApJS 208, 9, Table 5 (the dwarf sequence, in its
  maintained online version) — hot dwarfs (O9V–F0V) in U−B, B−V and V−Ks,
  and K7V–M9V dwarfs in V−Ks and V−Ic.
* Casagrande et al. 2021, MNRAS 507, 2684 — Gaia EDR3/DR3 and 2MASS colours
  (BP, RP, G against J, H, Ks; G−BP, G−RP) for dwarfs and giants, with log g
  and [Fe/H] terms; applied only to stars with a given log g.

A relation is never extrapolated: outside its published colour or [Fe/H]
range it returns NaN and says so in a boolean array.  Stars of unknown
log g are taken as dwarfs (`ASSUMED_STAGE`), and every caller is expected
to say so (`stage_assumed`).

Several relations are combined per star by `combine_teff` (inverse-variance
weighting; see its notes on correlated errors).
"""

from __future__ import annotations

import functools
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from stelltemp import kernels
from stelltemp.errors import StelltempError
from stelltemp.passbands import is_builtin_name, resolve_key
from stelltemp.patterns import distinct_int_rows

#: θ_eff · T_eff (K): the usual scaling of the reciprocal temperature.
THETA_SCALE = 5040.0

#: canonical order of the terms of the θ relations; other terms follow these
TERMS = ("1", "X", "X^2", "X*[Fe/H]", "[Fe/H]", "[Fe/H]^2")

#: functional forms a table may declare in its metadata (``form``)
FORMS = ("theta", "linear", "table")

#: the directory read by `relations()`
CALIBRATION_DIR = Path(__file__).resolve().parent / "data" / "calibrations"

#: [Fe/H] adopted when none is given (solar metallicity)
DEFAULT_FEH = 0.0

#: luminosity class assumed for a star of unknown log g
ASSUMED_STAGE = "dwarf"

_JOURNAL_ABBREV = {
    "Astronomy & Astrophysics": "A&A",
    "Monthly Notices of the Royal Astronomical Society": "MNRAS",
    "The Astrophysical Journal": "ApJ",
    "Astrophysical Journal": "ApJ",
    "The Astrophysical Journal Supplement Series": "ApJS",
}


# ---------------------------------------------------------------- helpers
def _float_array(value, name):
    """Float64 array of ``value`` or a one-line StelltempError naming it."""
    try:
        return np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise StelltempError(f"{name} must be numeric, got {value!r:.60}") from None


_FACTOR = re.compile(r"^(X|\[Fe/H\]|logg)(?:\^([1-9]))?$")
_VARIABLES = ("X", "[Fe/H]", "logg")


def parse_term(term):
    """Powers ``(p, q, r)`` of X, [Fe/H] and log g in a term such as ``'X^2*[Fe/H]'``.

    Examples
    --------
    >>> parse_term("1"), parse_term("X^3"), parse_term("X*[Fe/H]"), parse_term("logg*X^2")
    ((0, 0, 0), (3, 0, 0), (1, 1, 0), (2, 0, 1))
    """
    term = str(term).replace(" ", "")
    if term == "1":
        return (0, 0, 0)
    powers = [0, 0, 0]
    for factor in term.split("*"):
        m = _FACTOR.match(factor)
        if not m:
            raise StelltempError(f"cannot read the calibration term {term!r} (use 1, X, [Fe/H], "
                                 "logg, their powers ^n and products with *)")
        powers[_VARIABLES.index(m.group(1))] += int(m.group(2) or 1)
    return tuple(powers)


def _term_order(powers):
    """Sort key: the six classic terms first (in `TERMS` order), then by powers."""
    canon = [parse_term(t) for t in TERMS]
    return (canon.index(powers), 0, 0, 0) if powers in canon else (len(canon), *powers)


def stage_assumed(logg):
    """True where log g is unknown (None or NaN), so `ASSUMED_STAGE` was used.

    >>> stage_assumed([4.4, float("nan")]).tolist()
    [False, True]
    """
    if logg is None:
        return np.asarray(True)
    return ~np.isfinite(_float_array(logg, "log g"))


# ---------------------------------------------------------------- records
@dataclass(frozen=True)
class Citation:
    """Where a relation was published."""

    authors: str
    year: int
    journal: str
    volume: str
    page: str
    table: str

    def __str__(self):
        names = [a.strip() for a in self.authors.split(";") if a.strip()]
        first = names[0].split(",")[0] if names else "?"
        who = first if len(names) == 1 else (
            f"{first} & {names[1].split(',')[0]}" if len(names) == 2 else f"{first} et al.")
        journal = _JOURNAL_ABBREV.get(self.journal, self.journal)
        return f"{who} {self.year}, {journal} {self.volume}, {self.page}, {self.table}"


@dataclass(frozen=True)
class Relation:
    """One published colour–T_eff(–[Fe/H]) relation.

    Attributes
    ----------
    key : str
        Identifier, e.g. ``"c10_bv"``.
    label : str
        Short human name, e.g. ``"C10 B-V"``.
    colour_name : str
        The colour as the paper writes it, e.g. ``"V-Ks"``.
    blue, red : str
        Passband keys (``B_JC``, ``Ks_2MASS``, ``BP_GDR3`` ...); the colour
        is ``m(blue) − m(red)``.
    coeffs : tuple of float
        Polynomial coefficients, one per entry of ``terms`` (empty for a
        tabulated sequence).
    colour_range : (float, float)
        Validity range of the colour, mag, inclusive.
    feh_range : (float, float)
        Validity range in [Fe/H], dex, inclusive.
    feh_floor : float or None
        Where the paper says to evaluate the formula at a fixed [Fe/H] for
        stars below it (C10 Table 4 note: −3.5 for stars down to −5.0).
    logg_range : (float, float)
        Surface gravities (cgs, dex) the relation applies to, half-open
        ``[min, max)``.
    stage : str
        ``"dwarf"`` or ``"giant"``; stars of unknown log g count as dwarfs.
    scatter : float
        Published (or, where the table says so, adopted) constant 1σ
        scatter of the relation, K.
    n_stars : int or None
        Number of calibrating stars, where recorded.
    citation : Citation
    source : str
        File name of the table it came from.
    terms : tuple of str
        Term names of ``coeffs`` (canonical order: `TERMS` first).
    form : {"theta", "linear", "table"}
        θ = scale/T_eff = P;  T_eff = scale·P;  or linear interpolation in
        ``nodes``.
    scale : float
        S of the polynomial forms, K.
    scatter_frac : float
        A scatter proportional to T_eff (dimensionless), added in quadrature
        to ``scatter`` (`scatter_at`).
    nodes : tuple
        ``(colours, teffs)`` of a tabulated sequence, colours increasing.
    """

    key: str
    label: str
    colour_name: str
    blue: str
    red: str
    coeffs: tuple
    colour_range: tuple
    feh_range: tuple
    feh_floor: float | None
    logg_range: tuple
    stage: str
    scatter: float
    n_stars: int | None
    citation: Citation
    source: str = field(default="", compare=False)
    terms: tuple = TERMS
    form: str = "theta"
    scale: float = THETA_SCALE
    scatter_frac: float = 0.0
    nodes: tuple = ()

    @property
    def bands(self):
        """``(blue, red)`` passband keys."""
        return (self.blue, self.red)

    @functools.cached_property
    def _powers(self):
        return tuple(parse_term(t) for t in self.terms)

    @functools.cached_property
    def _packed(self):
        """The relation as plain arrays, for `kernels.relation_cells` (packed once).

        ``(form, bounds, coef, pows, counts, xs, ts, slopes)``: the form's
        index in `FORMS`; ``bounds`` = colour, [Fe/H] and log g ranges, the
        [Fe/H] floor (−inf if none) and the scale; then for the value, ∂/∂X
        and ∂/∂[Fe/H] (rows 0, 1, 2) the nonzero coefficients of `_poly`
        (derivative factors applied) and their powers of X, [Fe/H] and
        log g; then the table's nodes and the slopes of its segments.
        """
        bounds = np.array([*self.colour_range, *self.feh_range, *self.logg_range,
                           -np.inf if self.feh_floor is None else self.feh_floor, self.scale], float)
        rows = []
        for dx, dz in ((0, 0), (1, 0), (0, 1)):  # the loop of `_poly`, its zero terms left out
            rows.append([term for term in self._derived_terms(dx, dz) if term[0] != 0.0])
        width = max(len(row) for row in rows)
        coef = np.zeros((3, width))
        pows = np.zeros((3, width, 3), np.int64)
        for d, row in enumerate(rows):
            for i, (k, *pqr) in enumerate(row):
                coef[d, i] = k
                pows[d, i] = pqr
        counts = np.array([len(row) for row in rows], np.int64)
        xs, ts = (np.asarray(v, float) for v in self.nodes) if self.form == "table" else (np.zeros(2),) * 2
        slopes = np.diff(ts) / np.diff(xs) if self.form == "table" else np.zeros(1)
        return FORMS.index(self.form), bounds, coef, pows, counts, xs, ts, slopes

    @property
    def needs_logg(self):
        """True when the formula has log g terms: it applies only to stars with a given log g."""
        return any(r for _, _, r in self._powers)

    def scatter_at(self, teff):
        """Total published/adopted 1σ scatter at T_eff, K: hypot(scatter, scatter_frac·T)."""
        t = _float_array(teff, "T_eff")
        return np.hypot(self.scatter, self.scatter_frac * t)

    # -- evaluation (the one path for every form) -------------------------
    def _prepare(self, colour, feh, logg=None):
        x = _float_array(colour, "colour")
        z = _float_array(DEFAULT_FEH if feh is None else feh, "[Fe/H]")
        g = _float_array(np.nan if logg is None else logg, "log g")
        try:
            x, z, g = np.broadcast_arrays(x, z, g)
        except ValueError:
            raise StelltempError(
                f"{self.key}: colour shape {x.shape}, [Fe/H] shape {z.shape} and log g shape "
                f"{g.shape} do not match") from None
        inside = ((x >= self.colour_range[0]) & (x <= self.colour_range[1])
                  & (z >= self.feh_range[0]) & (z <= self.feh_range[1]))
        if self.needs_logg:  # the formula itself needs log g: only inside its range
            with np.errstate(invalid="ignore"):
                inside &= (g >= self.logg_range[0]) & (g < self.logg_range[1])
        # the paper's prescription for the most metal-poor stars, not an extrapolation
        z_eval = z if self.feh_floor is None else np.maximum(z, self.feh_floor)
        return x, z, z_eval, g, inside

    def _derived_terms(self, dx, dz):
        """(coefficient, power of X, of [Fe/H], of log g) of each term after ∂/∂X (dx) and ∂/∂[Fe/H] (dz)."""
        for c, (p, q, r) in zip(self.coeffs, self._powers):
            k = c
            if dx:
                k, p = k * p, p - 1
            if dz:
                k, q = k * q, q - 1
            yield k, p, q, r

    def _poly(self, x, z, g, dx=0, dz=0, powers=None):
        """Σ cᵢ ∂(Xᵖ Zᑫ Gʳ) with ``dx``/``dz`` derivatives (0 or 1) taken.

        ``powers`` (a dict) keeps each power of x, z and g between the calls
        of one evaluation; a factor X⁰ (exactly 1) is not multiplied in, so
        the sum has the same bits as the plain formula.  Integer powers are
        repeated products in a fixed order (x² = x·x, x³ = x²·x …), not
        ``x**e``, whose rounding for e ≥ 3 depends on the library (numpy,
        its SIMD paths on another CPU, the compiled kernel): the compiled
        twin (`kernels.relation_cells`) forms them the same way.
        """
        powers = {} if powers is None else powers

        def power(name, base, e):
            if (name, e) not in powers:
                powers[name, e] = base if e == 1 else power(name, base, e - 1) * base
            return powers[name, e]

        out = np.zeros(np.broadcast(x, z, g).shape)
        for k, p, q, r in self._derived_terms(dx, dz):
            if k == 0.0:
                continue
            term = k * power("x", x, p) if p else k  # a scalar k adds the bits of a full array
            if q:
                term = term * power("z", z, q)
            if r:
                term = term * power("g", g, r)
            out = out + term
        return out

    def _evaluate(self, x, z, g):
        """(T_eff, ∂T/∂X, ∂T/∂Z, valid) at colour x, evaluation [Fe/H] z and log g g."""
        with np.errstate(divide="ignore", invalid="ignore"):
            if self.form == "table":
                _, _, _, _, _, xs, ts, slopes = self._packed
                xc = np.clip(np.where(np.isfinite(x), x, xs[0]), xs[0], xs[-1])
                j = np.searchsorted(xs, xc, side="right") - 1  # xs[j] ≤ xc < xs[j + 1]
                seg = np.minimum(j, len(xs) - 2)
                # np.interp's formula, its product and sum rounded one at a time (as the
                # compiled twin does), exact at the nodes and at the top end
                t = np.where(xs[j] == xc, ts[j], slopes[seg] * (xc - xs[seg]) + ts[seg])
                return t, slopes[seg], np.zeros_like(t), np.isfinite(x)
            powers = {}
            p = self._poly(x, z, g, powers=powers)
            p_x = self._poly(x, z, g, dx=1, powers=powers)
            p_z = self._poly(x, z, g, dz=1, powers=powers)
            if self.form == "theta":
                t = self.scale / p
                p2 = p * p
                return t, -self.scale * p_x / p2, -self.scale * p_z / p2, p > 0.0
            t = self.scale * p
            return t, self.scale * p_x, self.scale * p_z, t > 0.0

    def theta(self, colour, feh=DEFAULT_FEH, logg=None):
        """θ_eff = 5040 K / T_eff, evaluated only inside the validity range.

        Parameters
        ----------
        colour : array_like
            Dereddened colour ``blue − red``, mag.
        feh : array_like or None
            [Fe/H], dex; None means solar (0.0).

        Returns
        -------
        ndarray
            θ_eff (dimensionless); NaN outside the validity range.
        """
        t, inside = self.teff(colour, feh, logg)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(inside, THETA_SCALE / t, np.nan)

    def teff(self, colour, feh=DEFAULT_FEH, logg=None):
        """Effective temperature from a dereddened colour.

        Parameters
        ----------
        colour : array_like
            Dereddened colour ``blue − red``, mag.
        feh : array_like or None
            [Fe/H], dex, broadcast against ``colour``; None means solar.
        logg : array_like or None
            log g (cgs, dex); used only by relations with log g terms
            (`needs_logg`), which return NaN where it is unknown.

        Returns
        -------
        teff : ndarray
            T_eff in K; NaN where the star is outside the published colour
            or [Fe/H] range (or the colour is NaN).
        inside : ndarray of bool
            True where the relation was applied.

        Notes
        -----
        Surface gravity is checked here only for relations with log g terms;
        for the others see `applies_to`.

        Examples
        --------
        >>> t, ok = get_relation("c10_vk").teff(1.56, 0.0)
        >>> round(float(t)), bool(ok)
        (5755, True)
        """
        t, _, _, inside = self.at(colour, feh, logg)
        return t, inside

    def dteff_dcolour(self, colour, feh=DEFAULT_FEH, logg=None):
        """Analytic ∂T_eff/∂X in K mag⁻¹ (NaN outside the validity range).

        θ form: ∂T/∂X = −S ∂P/∂X / P²;  linear form: S ∂P/∂X;  table: the
        slope of the segment the colour falls in.
        """
        return self.at(colour, feh, logg)[1]

    def dteff_dfeh(self, colour, feh=DEFAULT_FEH, logg=None):
        """Analytic ∂T_eff/∂[Fe/H] in K dex⁻¹ (NaN outside the validity range).

        Zero below `feh_floor`, where the formula is held at the floor, and
        for tabulated sequences (no [Fe/H] term).
        """
        return self.at(colour, feh, logg)[2]

    def at(self, colour, feh=DEFAULT_FEH, logg=None):
        """T_eff, ∂T_eff/∂X and ∂T_eff/∂[Fe/H] in one pass (what `teff`, `dteff_dcolour`
        and `dteff_dfeh` return), and where the relation applied.

        Returns
        -------
        teff, d_colour, d_feh : ndarray
            K, K mag⁻¹, K dex⁻¹; NaN outside the validity range.
        inside : ndarray of bool

        Examples
        --------
        >>> t, dx, dz, ok = get_relation("c10_vk").at(1.56, 0.0)
        >>> round(float(t)), bool(dx < 0), bool(ok)
        (5755, True, True)
        """
        jit = kernels.jit_for(np.size(colour))
        if jit is not None:
            return self._at_compiled(jit, colour, feh, logg)
        x, z, z_eval, g, inside = self._prepare(colour, feh, logg)
        t, d_x, d_z, valid = self._evaluate(x, z_eval, g)
        inside = inside & valid
        if self.feh_floor is not None:
            d_z = np.where(z < self.feh_floor, 0.0, d_z)
        return (np.where(inside, t, np.nan), np.where(inside, d_x, np.nan),
                np.where(inside, d_z, np.nan), inside)

    def _at_compiled(self, jit, colour, feh, logg):
        """`at` by `kernels.relation_cells`: the same bits, one pass per star."""
        x = _float_array(colour, "colour")
        z = _float_array(DEFAULT_FEH if feh is None else feh, "[Fe/H]")
        g = _float_array(np.nan if logg is None else logg, "log g")
        try:
            shape = np.broadcast_shapes(x.shape, z.shape, g.shape)
        except ValueError:
            raise StelltempError(
                f"{self.key}: colour shape {x.shape}, [Fe/H] shape {z.shape} and log g shape "
                f"{g.shape} do not match") from None
        x, z, g = (np.ascontiguousarray(np.broadcast_to(v, shape)).ravel() for v in (x, z, g))
        out = tuple(np.empty(x.size) for _ in range(3)) + (np.empty(x.size, bool),)
        jit["relation_cells"](x, z, g, *self._kernel_args, *out)
        return tuple(v.reshape(shape) for v in out)

    @functools.cached_property
    def _kernel_args(self):
        form, bounds, coef, pows, counts, xs, ts, slopes = self._packed
        return form, bounds, self.needs_logg, coef, pows, counts, xs, ts, slopes

    def applies_to(self, logg=None):
        """Whether the relation's luminosity class fits each star.

        Parameters
        ----------
        logg : array_like or None
            log g (cgs, dex).  None or NaN means unknown: the star is then
            assumed to be a dwarf (`ASSUMED_STAGE`), so only dwarf relations
            apply (and none that needs log g in its formula); `stage_assumed`
            tells where that happened.

        Returns
        -------
        ndarray of bool (or a bool scalar array when ``logg`` is None)
        """
        unknown_ok = self.stage == ASSUMED_STAGE and not self.needs_logg
        if logg is None:
            return np.asarray(unknown_ok)
        g = _float_array(logg, "log g")
        known = np.isfinite(g)
        if not known.any():  # the usual case, no log g at all: every star is an assumed dwarf
            return np.full(g.shape, unknown_ok)
        with np.errstate(invalid="ignore"):
            in_range = (g >= self.logg_range[0]) & (g < self.logg_range[1])
        return np.where(known, in_range, unknown_ok)

    def scatter_text(self):
        """The scatter in words: ``'25 K'``, ``'4 % of T_eff'`` or both.

        >>> get_relation("pm13_ub_hot").scatter_text()
        '4 % of T_eff'
        """
        parts = ([f"{self.scatter:.0f} K"] if self.scatter > 0 else []) + (
            [f"{100 * self.scatter_frac:.0f} % of T_eff"] if self.scatter_frac > 0 else [])
        return " + ".join(parts)

    def range_text(self):
        """The validity ranges in words, e.g. ``'V-Ks 0.78–3.15 mag, [Fe/H] −5.0…0.4, dwarf'``."""
        lo, hi = self.colour_range
        return (f"{self.colour_name} {lo:.2f} to {hi:.2f} mag, [Fe/H] {self.feh_range[0]:+.1f} to "
                f"{self.feh_range[1]:+.1f}, {self.stage} (log g {self.logg_range[0]:g} to "
                f"{self.logg_range[1]:g})")


# ---------------------------------------------------------------- loading
def _meta_str(meta, name, default=""):
    value = meta.get(name, default)
    return str(value) if value is not None else default


def _citation(meta, name):
    cit = meta.get("citation") or {}
    if not cit.get("authors") or not cit.get("year"):
        raise StelltempError(f"{name}: meta 'citation' needs at least authors and year")
    return Citation(
        authors=str(cit["authors"]), year=int(cit["year"]),
        journal=_meta_str(cit, "journal"), volume=_meta_str(cit, "volume"),
        page=_meta_str(cit, "page"), table=_meta_str(cit, "table"))


def _check(rel, name):
    if rel.stage not in ("dwarf", "giant"):
        raise StelltempError(f"{name}: {rel.key}: stage must be 'dwarf' or 'giant'")
    if not (rel.scatter > 0 or rel.scatter_frac > 0):
        raise StelltempError(f"{name}: {rel.key}: the scatter must be positive")
    if not rel.colour_range[0] < rel.colour_range[1]:
        raise StelltempError(f"{name}: {rel.key}: empty colour range")
    return rel


def load_relations(path):
    """Read one calibration table (ECSV) into `Relation` objects.

    Parameters
    ----------
    path : str or Path
        ECSV file.  Polynomial tables (``meta['form']`` ``theta``, the
        default, or ``linear`` with ``meta['scale']`` in K) have columns
        ``key label colour blue red stage feh_min feh_max colour_min
        colour_max sigma_teff logg_min logg_max``, the coefficient columns
        named in ``meta['coefficient_columns']`` whose terms are listed (same
        order) in ``meta['terms']``, and optionally ``feh_floor`` and
        ``n_stars``.  Tabulated sequences (``form: table``) have one row per
        node with a ``teff`` column and one column per colour, and list their
        relations in ``meta['relations']``.  The citation is in
        ``meta['citation']``.

    Returns
    -------
    list of Relation
    """
    from .cache import read_ecsv  # parsed once, then from the disk cache

    path = Path(path)
    try:
        table = read_ecsv(path)
    except Exception as exc:  # noqa: BLE001 - any reader failure is bad input
        raise StelltempError(f"cannot read calibration table {path.name}: {exc}") from None
    meta = table.meta
    form = str(meta.get("form", "theta"))
    if form not in FORMS:
        raise StelltempError(f"{path.name}: meta 'form' must be one of {', '.join(FORMS)}")
    citation = _citation(meta, path.name)
    if form == "table":
        return _load_sequence(table, citation, path.name)

    cols = list(meta.get("coefficient_columns", []))
    terms = list(meta.get("terms", []))
    if not cols or len(cols) != len(terms):
        raise StelltempError(f"{path.name}: meta must list coefficient_columns and as many terms")
    powers = [parse_term(t) for t in terms]
    if len(set(powers)) != len(powers):
        raise StelltempError(f"{path.name}: a term is listed twice in meta 'terms'")
    order = sorted(range(len(cols)), key=lambda i: _term_order(powers[i]))
    scale = float(meta.get("scale", THETA_SCALE))
    needed = ("key", "label", "colour", "blue", "red", "stage", "feh_min", "feh_max",
              "colour_min", "colour_max", "sigma_teff", "logg_min", "logg_max", *cols)
    missing = [c for c in needed if c not in table.colnames]
    if missing:
        raise StelltempError(f"{path.name}: missing column(s) {', '.join(missing)}")

    out = []
    for row in table:
        floor = float(row["feh_floor"]) if "feh_floor" in table.colnames else np.nan
        n = int(row["n_stars"]) if "n_stars" in table.colnames else None
        rel = Relation(
            key=str(row["key"]), label=str(row["label"]), colour_name=str(row["colour"]),
            blue=resolve_key(str(row["blue"])), red=resolve_key(str(row["red"])),
            coeffs=tuple(float(row[cols[i]]) for i in order),
            colour_range=(float(row["colour_min"]), float(row["colour_max"])),
            feh_range=(float(row["feh_min"]), float(row["feh_max"])),
            feh_floor=None if not np.isfinite(floor) else floor,
            logg_range=(float(row["logg_min"]), float(row["logg_max"])),
            stage=str(row["stage"]), scatter=float(row["sigma_teff"]), n_stars=n,
            citation=citation, source=path.name,
            terms=tuple(str(terms[i]).replace(" ", "") for i in order), form=form, scale=scale)
        out.append(_check(rel, path.name))
    return out


def _load_sequence(table, citation, name):
    """Relations of a tabulated colour sequence (``form: table``)."""
    specs = table.meta.get("relations") or []
    if "teff" not in table.colnames or not specs:
        raise StelltempError(f"{name}: a tabulated sequence needs a 'teff' column and meta 'relations'")
    teff = np.asarray(table["teff"], float)
    out = []
    for spec in specs:
        try:
            col = str(spec["column"])
            t_lo, t_hi = (float(v) for v in spec["teff_range"])
            x = np.ma.filled(np.ma.asarray(table[col], dtype=float), np.nan)
        except (KeyError, TypeError, ValueError):
            raise StelltempError(f"{name}: relation entry {spec!r:.80} needs column and teff_range "
                                 "naming a numeric column") from None
        use = (teff >= t_lo) & (teff <= t_hi) & np.isfinite(x)
        xs, ts = x[use], teff[use]
        order = np.argsort(xs)
        xs, ts = xs[order], ts[order]
        if len(xs) < 2 or np.any(np.diff(xs) <= 0) or np.any(np.diff(ts) >= 0):
            raise StelltempError(f"{name}: {spec.get('key')}: {col} is not strictly monotonic "
                                 f"between {t_lo:g} and {t_hi:g} K; narrow teff_range")
        rel = Relation(
            key=str(spec["key"]), label=str(spec.get("label", spec["key"])), colour_name=col,
            blue=resolve_key(str(spec["blue"])), red=resolve_key(str(spec["red"])), coeffs=(),
            colour_range=(float(xs[0]), float(xs[-1])),
            feh_range=tuple(float(v) for v in spec["feh_range"]), feh_floor=None,
            logg_range=tuple(float(v) for v in spec["logg_range"]), stage=str(spec["stage"]),
            scatter=float(spec.get("sigma_teff", 0.0)), n_stars=None, citation=citation,
            source=name, terms=(), form="table", scale=1.0,
            scatter_frac=float(spec.get("sigma_teff_frac", 0.0)),
            nodes=(tuple(xs.tolist()), tuple(ts.tolist())))
        out.append(_check(rel, name))
    return out


@functools.lru_cache(maxsize=None)
def _registry():
    rels = []
    for path in sorted(CALIBRATION_DIR.glob("*.ecsv")):
        rels.extend(load_relations(path))
    keys = [r.key for r in rels]
    dupes = sorted({k for k in keys if keys.count(k) > 1})
    if dupes:
        raise StelltempError(f"duplicate calibration key(s): {', '.join(dupes)}")
    return tuple(rels)


def relations():
    """All loaded relations, as a tuple of `Relation`."""
    return _registry()


def get_relation(key):
    """The relation with this key (e.g. ``"c10_vk"``)."""
    for rel in _registry():
        if rel.key == key:
            return rel
    known = ", ".join(r.key for r in _registry())
    raise StelltempError(f"unknown calibration {key!r}; known: {known}")


def relations_for(available_bands, stage=None):
    """Relations whose two passbands are both available.

    Parameters
    ----------
    available_bands : iterable of str
        Passband keys the star(s) have, e.g. ``{"V_JC", "Ks_2MASS"}``.
    stage : {"dwarf", "giant", None}
        Keep only relations calibrated on this stage (None keeps all).

    Returns
    -------
    tuple of Relation
    """
    if isinstance(available_bands, str):
        available_bands = [available_bands]
    have = {_band_key(b) for b in available_bands}
    if stage not in (None, "dwarf", "giant"):
        raise StelltempError(f"stage must be 'dwarf', 'giant' or None, got {stage!r}")
    return tuple(r for r in _registry()
                 if r.blue in have and r.red in have and (stage is None or r.stage == stage))


def _band_key(name):
    """A built-in passband name as its key (old keys and plain band names resolved); others unchanged."""
    return resolve_key(name) if is_builtin_name(name) else str(name)


def _resolve(colour_key):
    """Relations meant by a colour key: a relation key or a (blue, red) pair."""
    if isinstance(colour_key, str):
        return (get_relation(colour_key),)
    if isinstance(colour_key, tuple) and len(colour_key) == 2:
        pair = tuple(_band_key(b) for b in colour_key)
        found = tuple(r for r in _registry() if r.bands == pair)
        if not found:
            raise StelltempError(
                f"no calibrated relation for colour {colour_key[0]} - {colour_key[1]}")
        return found
    raise StelltempError(
        f"colour key must be a relation key or a (blue, red) pair, got {colour_key!r}")


# ------------------------------------------------------------ coverage
def coverage_notes(colours, feh=None, logg=None, applied=None):
    """Per star, what was assumed about its class and why no relation applied.

    Parameters
    ----------
    colours : dict
        ``(blue, red)`` passband pair → dereddened colour array, mag (NaN =
        not measured), the colours offered to the relations.
    feh, logg : array_like or None
        [Fe/H] and log g (dex) as given (None/NaN = unknown).
    applied : array_like of bool, optional
        Stars that did get a calibrated T_eff; they get only the class note.
        Default: recomputed from the relations.

    Returns
    -------
    ndarray of str objects
        One note per star ("" when there is nothing to say), dtype object
        (each distinct note one shared str: fixed-width text would take
        hundreds of bytes a star), e.g.
        ``"log g unknown: dwarf assumed"`` or ``"no calibration: V-Ks 9.80
        mag outside every dwarf relation for it (C10 V-Ks 0.78 to 3.15; …)"``.

    Examples
    --------
    >>> coverage_notes({("V_JC", "Ks_2MASS"): [1.6, 12.0]}, feh=0.0, logg=[4.4, 4.4]).tolist()
    ['', 'no calibration: V-Ks = 12.00 mag outside every dwarf relation for it (C10 V-Ks 0.78 to 3.15; PM13 V-Ks hot dwarfs -1.00 to 0.73; PM13 V-Ks M dwarfs 3.35 to 9.00)']
    """
    pairs = {k: _float_array(v, f"colour {k}") for k, v in colours.items()}
    z = _float_array(np.nan if feh is None else feh, "[Fe/H]")
    g = _float_array(np.nan if logg is None else logg, "log g")
    shape = np.broadcast_shapes(*(x.shape for x in pairs.values()), z.shape, g.shape)
    z = np.broadcast_to(np.where(np.isfinite(z), z, DEFAULT_FEH), shape)
    g = np.broadcast_to(g, shape)
    assumed = np.broadcast_to(~np.isfinite(g), shape)
    rels = [(r, np.broadcast_to(pairs[r.bands], shape)) for r in _registry() if r.bands in pairs]
    if applied is None:
        applied = np.zeros(shape, bool)
        for rel, x in rels:
            applied |= rel.applies_to(g) & rel.teff(x, z, g)[1]
    applied = np.broadcast_to(np.asarray(applied, bool), shape)
    # each star's note as a code into a short list of texts, turned into text once at the end
    codes = np.zeros(shape, np.int64)
    codes[assumed] = 1
    texts = ["", f"log g unknown: {ASSUMED_STAGE} assumed"]
    todo = np.flatnonzero(~applied.ravel())
    if todo.size:
        # the note depends only on a few per-star facts (what was measured, which
        # relation fits the class, the numbers as printed): write it once per
        # distinct set of facts instead of once per star
        keys = _note_keys(rels, z, g, assumed, todo)
        first, inverse = distinct_int_rows(keys)
        texts += [_coverage_note(rels, keys[i]) for i in first]
        codes.ravel()[todo] = 2 + inverse.ravel()
    return np.array(texts, dtype=object)[codes]


def _coverage_note(rels, key):
    """The `coverage_notes` text for one row of `_note_keys` (a star without a calibrated T_eff)."""
    assumed, g_fin, giant, g_p, z_p = (int(v) for v in key[:5])
    states = key[5:5 + len(rels)]
    printed_x = dict(zip(dict.fromkeys(rel.bands for rel, _ in rels), key[5 + len(rels):]))
    stage = ASSUMED_STAGE if assumed else None
    measured = bool(np.any(states > 0))
    by_colour = {}
    for (rel, _), state in zip(rels, states):
        if state < 2:
            continue
        stage = rel.stage
        lo, hi = rel.colour_range
        entry = by_colour.setdefault(rel.colour_name, [_from_printed(printed_x[rel.bands], "{:.2f}"), []])
        if state == 2:
            entry[1].append(f"{rel.label}: [Fe/H] {_from_printed(z_p, '{:+.2f}')} outside "
                            f"{rel.feh_range[0]:+.1f} to {rel.feh_range[1]:+.1f}")
        else:
            entry[1].append(f"{rel.label} {lo:.2f} to {hi:.2f}")
    why = [f"{name} = {x} mag outside every {stage} relation for it ({'; '.join(parts)})"
           for name, (x, parts) in by_colour.items()]
    if not measured:
        text = "no calibration: none of the calibrated colours was measured"
    elif not why:
        cls = "giant" if giant else "dwarf"
        text = (f"no calibration: no relation for a {cls} (log g {_from_printed(g_p, '{:.2f}')}) "
                "in the measured colours" if g_fin else
                "no calibration: no relation in the measured colours")
    else:
        text = "no calibration: " + "; ".join(why)
    skipped = {rel.colour_name for (rel, _), state in zip(rels, states)
               if state == 1 and rel.needs_logg and not g_fin}
    if skipped:
        text += f"; relations in {', '.join(sorted(skipped))} need log g, which is unknown"
    return text if not assumed else f"{text}; log g unknown: {ASSUMED_STAGE} assumed"


def _printed(v, digits=2):
    """Integers that are equal exactly where f"{v:.{digits}f}" prints the same (finite v).

    The integer is 2 × (v rounded to ``digits`` decimals, scaled to an
    integer) plus one for a negative value that prints as -0.00.
    """
    v = np.asarray(v, float)
    y = v * 10.0**digits
    with np.errstate(invalid="ignore"):
        q = np.rint(y)
        # near a half the float product may round the other way than printing: ask Python
        near = np.isfinite(v) & (np.abs(np.abs(y - np.trunc(y)) - 0.5) < 1e-6)
    for i in np.flatnonzero(near):
        q[i] = round(float(f"{v[i]:.{digits}f}") * 10.0**digits)
    q = np.where(np.isfinite(q), q, 0).astype(np.int64)
    return 2 * q + ((q == 0) & np.signbit(v))


def _from_printed(key, fmt, digits=2):
    """The text `fmt` gives the values behind a `_printed` key."""
    q, neg_zero = divmod(int(key), 2)
    text = fmt.format(q / 10.0**digits)
    return text.replace("0.00", "-0.00", 1).replace("+-", "-") if neg_zero else text


def _note_keys(rels, z, g, assumed, todo):
    """Per star of ``todo`` (flat indices) the integers that fix its coverage note, shape (len(todo), k).

    Columns: log g assumed, log g known, giant (log g < 3), log g and [Fe/H]
    as printed, one state per relation (0 colour not measured, 1 class does
    not fit, 2 colour in range but [Fe/H] outside, 3 colour outside), each
    colour as printed.  Numbers the note does not print are set to 0.
    """
    gi, zi, ai = g.ravel()[todo], z.ravel()[todo], assumed.ravel()[todo]
    g_fin = np.isfinite(gi)
    states, printed_x = [], {}
    for rel, x in rels:
        xi = x.ravel()[todo]
        fin = np.isfinite(xi)
        fits = np.broadcast_to(np.asarray(rel.applies_to(gi), bool), xi.shape)
        lo, hi = rel.colour_range
        with np.errstate(invalid="ignore"):
            inside = (xi >= lo) & (xi <= hi)
        states.append(np.where(~fin, 0, np.where(~fits, 1, np.where(inside, 2, 3))))
        if rel.bands not in printed_x:
            printed_x[rel.bands] = (xi, np.zeros(todo.size, bool))
        printed_x[rel.bands][1][:] |= fin & fits  # printed when some relation of the colour fits the class
    states = np.stack(states, axis=1) if states else np.zeros((todo.size, 0), np.int64)
    why = (states >= 2).any(axis=1)
    measured = (states > 0).any(axis=1)
    with np.errstate(invalid="ignore"):
        cols = [ai, g_fin, g_fin & (gi < 3.0),
                np.where(g_fin & measured & ~why, _printed(gi), 0),
                np.where((states == 2).any(axis=1), _printed(zi), 0)]
    cols += [states[:, i] for i in range(states.shape[1])]
    cols += [np.where(shown, _printed(xi), 0) for xi, shown in printed_x.values()]
    return np.stack([np.asarray(c, np.int64) for c in cols], axis=1)

# ------------------------------------------------------------ combination
@dataclass(frozen=True)
class CombinedTeff:
    """Per-star result of `combine_teff` (all arrays have the stars' shape).

    Attributes
    ----------
    teff : ndarray
        T_eff combined by generalised least squares, K (NaN where no
        relation applied).
    teff_err : ndarray
        1σ error of ``teff``, K: (1ᵀ C⁻¹ 1)^-½ with the covariance C of the
        relations (see `combine_teff`).
    n_used : ndarray of int
        Number of relations that entered the mean.
    outside_range : ndarray of bool
        Some relation had a colour for the star but the star lies outside
        its published colour or [Fe/H] range (that relation was not used).
    none_applicable : ndarray of bool
        No relation could be used: ``teff`` is NaN.
    bad_input : ndarray of bool
        A measured colour came with a negative or non-finite error (that
        relation was not used for the star).
    feh_assumed : ndarray of bool
        [Fe/H] was missing and the solar value 0.0 was assumed.
    chi2 : ndarray
        (T − T̄)ᵀ C⁻¹ (T − T̄) over the used relations (n_used − 1 degrees
        of freedom); NaN when fewer than two were used.
    keys : tuple of str
        Relation keys, in the order of the first axis of the next two.
    teff_each, err_each : ndarray, shape (len(keys), *stars)
        T_eff and total error from each relation (NaN where not used).
    """

    teff: np.ndarray
    teff_err: np.ndarray
    n_used: np.ndarray
    outside_range: np.ndarray
    none_applicable: np.ndarray
    bad_input: np.ndarray
    feh_assumed: np.ndarray
    chi2: np.ndarray
    keys: tuple
    teff_each: np.ndarray
    err_each: np.ndarray

    @property
    def flags(self):
        """Bit masks of `stelltemp.engine.flags` (OUTSIDE_CALIBRATION,
        NO_CALIBRATION, BAD_INPUT), one integer per star."""
        from stelltemp.engine import flags as fl

        mask = np.zeros(self.teff.shape, dtype=np.int64)
        mask |= np.where(self.outside_range, fl.OUTSIDE_CALIBRATION, 0)
        mask |= np.where(self.none_applicable, fl.NO_CALIBRATION, 0)
        mask |= np.where(self.bad_input, fl.BAD_INPUT, 0)
        return mask


def combine_teff(colours, errors=None, feh=None, logg=None):
    """Effective temperature from several dereddened colours, combined with their covariance.

    Parameters
    ----------
    colours : dict
        Dereddened colours, mag.  Keys are relation keys (``"c10_vk"``) or
        ``(blue, red)`` passband pairs (``("V_JC", "Ks_2MASS")``; a pair
        selects every relation for that colour, e.g. both the dwarf and the
        giant Gaia relation, and log g decides which applies).  Values are
        arrays over stars, broadcast against each other; NaN = not measured.
    errors : dict or None
        1σ errors of the colours, mag, same keys as ``colours``.  A colour
        without an entry is taken as error-free (only the relation's scatter
        counts).  A negative or non-finite error for a measured colour marks
        that star ``bad_input`` and leaves that relation out.
    feh : array_like or None
        [Fe/H], dex.  None, or NaN for a star, assumes solar metallicity
        (0.0) and sets ``feh_assumed``; for metal-poor stars this biases the
        optical colours (B−V most) by up to a few hundred K.
    logg : array_like or None
        log g (cgs, dex), selects dwarf or giant relations.  None, or NaN
        for a star, assumes a dwarf.

    Returns
    -------
    CombinedTeff

    Notes
    -----
    Vectorised over stars; the only loop is over the (few) relations.  The
    relations are combined by the generalised least squares of the engine
    (`stelltemp.engine.combine`, one piece of code): Cᵢⱼ = sᵢ sⱼ σ_X² when
    relations i and j read the same colour entry (sᵢ = ∂Tᵢ/∂X, e.g. the
    dwarf and hot-star relations of one V−Ks), plus scatterᵢ² on the
    diagonal.  Different colour entries are taken as independent: their
    errors come per colour, so a band they share is unknown here (the
    engine, which sees the magnitudes, includes it).

    Examples
    --------
    >>> res = combine_teff({"c10_vk": [1.6], "c10_bv": [0.65]}, {"c10_vk": [0.02], "c10_bv": [0.02]},
    ...                    feh=[0.0], logg=[4.4])
    >>> int(res.n_used[0]), 5500 < float(res.teff[0]) < 6000
    (2, True)
    """
    if not isinstance(colours, dict) or not colours:
        raise StelltempError("colours must be a non-empty dict of colour arrays")
    errors = {} if errors is None else dict(errors)
    extra = [k for k in errors if k not in colours]
    if extra:
        raise StelltempError(f"errors given for colour(s) not in colours: {extra}")

    entries = []  # (relation, colour array, error array)
    seen = {}
    for ckey, values in colours.items():
        x = _float_array(values, f"colour {ckey!r}")
        e = _float_array(errors.get(ckey, 0.0), f"error of {ckey!r}")
        for rel in _resolve(ckey):
            if rel.key in seen:
                raise StelltempError(
                    f"relation {rel.key} requested twice (as {seen[rel.key]!r} and {ckey!r})")
            seen[rel.key] = ckey
            entries.append((rel, x, e))

    z = _float_array(np.nan if feh is None else feh, "[Fe/H]")
    g = _float_array(np.nan if logg is None else logg, "log g")
    try:
        shape = np.broadcast_shapes(*(x.shape for _, x, _ in entries),
                                    *(e.shape for _, _, e in entries), z.shape, g.shape)
    except ValueError:
        raise StelltempError("colours, errors, [Fe/H] and log g arrays have incompatible shapes") from None

    feh_assumed = np.broadcast_to(~np.isfinite(z), shape)
    z = np.broadcast_to(np.where(np.isfinite(z), z, DEFAULT_FEH), shape)
    g = np.broadcast_to(g, shape)

    n = len(entries)
    teff_each = np.full((n, *shape), np.nan)
    err_each = np.full((n, *shape), np.nan)
    used = np.zeros((n, *shape), dtype=bool)
    outside = np.zeros(shape, dtype=bool)
    bad = np.zeros(shape, dtype=bool)
    slope_err = np.zeros((n, *shape))  # ∂T/∂X · σ_X
    scatter_each = np.zeros((n, *shape))
    for i, (rel, x, e) in enumerate(entries):
        x = np.broadcast_to(x, shape)
        e = np.broadcast_to(e, shape)
        candidate = rel.applies_to(g) & np.isfinite(x)
        with np.errstate(invalid="ignore"):
            good_err = np.isfinite(e) & (e >= 0.0)
        t, inside = rel.teff(x, z, g)
        slope = rel.dteff_dcolour(x, z, g)
        ok = candidate & inside & good_err
        outside |= candidate & ~inside
        bad |= np.isfinite(x) & ~good_err  # bad even where the relation does not apply
        used[i] = ok
        teff_each[i] = np.where(ok, t, np.nan)
        slope_err[i] = np.where(ok, slope * e, 0.0)
        scatter_each[i] = np.where(ok, rel.scatter_at(t), 0.0)
        err_each[i] = np.where(ok, np.hypot(slope_err[i], scatter_each[i]), np.nan)

    tbar, terr, chi2 = _gls_combine(entries, teff_each, slope_err, scatter_each, used)
    n_used = used.sum(axis=0)
    none = n_used == 0
    tbar = np.where(none, np.nan, tbar)
    terr = np.where(none, np.nan, terr)
    chi2 = np.where(n_used >= 2, chi2, np.nan)

    return CombinedTeff(
        teff=tbar, teff_err=terr, n_used=n_used, outside_range=outside,
        none_applicable=none, bad_input=bad, feh_assumed=np.array(feh_assumed),
        chi2=chi2, keys=tuple(rel.key for rel, _, _ in entries),
        teff_each=teff_each, err_each=err_each)


def _gls_combine(entries, teff_each, slope_err, scatter_each, used):
    """GLS mean, error and χ² over the relations (first axis) with the covariance of `combine_teff`."""
    from stelltemp.engine.combine import _gls  # the engine's combination (imported late: it imports us)

    r = len(entries)
    shape = teff_each.shape[1:]
    flat = lambda q: np.moveaxis(q, 0, -1).reshape(-1, r)  # noqa: E731 - (stars, relations)
    t, se, sc, ok = flat(teff_each), flat(slope_err), flat(scatter_each), flat(used)
    colour_id = np.array([id(x) for _, x, _ in entries])
    same_colour = colour_id[:, None] == colour_id[None, :]
    c = np.where(same_colour[None], se[:, :, None] * se[:, None, :], 0.0)
    c += np.eye(r)[None] * (sc**2)[:, :, None]
    both = ok[:, :, None] & ok[:, None, :]
    c = np.where(both, c, 0.0) + np.where(ok[:, :, None], 0.0, np.eye(r)[None])
    m = t.shape[0]
    est, cov, chi2, _, _, _ = _gls(c, np.ones((m, r, 1)), np.where(ok, t, 0.0), ok, np.zeros(m), np.zeros(m))
    with np.errstate(invalid="ignore"):
        err = np.sqrt(cov[:, 0, 0])
    return est[:, 0].reshape(shape), err.reshape(shape), chi2.reshape(shape)


# -------------------------------------------------------------- CLI hook
def relation_summary(relation):
    """A relation's key, colour, stage, validity ranges, scatter and citation as a plain dict.

    Examples
    --------
    >>> relation_summary(get_relation("c10_vk"))["colour"]
    'V-Ks'
    """
    r = relation
    return {"key": r.key, "colour": r.colour_name, "blue": r.blue, "red": r.red, "stage": r.stage,
            "colour_range_mag": list(r.colour_range), "feh_range_dex": list(r.feh_range),
            "logg_range_dex": list(r.logg_range), "needs_logg": r.needs_logg, "form": r.form,
            "scatter_K": r.scatter, "scatter_fraction": r.scatter_frac, "scatter": r.scatter_text(),
            "citation": str(r.citation)}
