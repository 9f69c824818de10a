"""Empirical colour–effective-temperature relations from the literature.

Every relation here has the form

    θ = 5040 K / T_eff = c0 + c1·X + c2·X² + c3·X·[Fe/H] + c4·[Fe/H] + c5·[Fe/H]²

with X a dereddened colour index (blue − red, in magnitudes).  The
coefficients live as ECSV package data in ``stelltemp/data/calibrations/``,
one table per paper, with the citation, the validity ranges and the
published scatter in the table and its metadata.  Each table names the
term multiplied by each of its coefficient columns (``terms`` in the
metadata), so a paper's own coefficient order is kept in the file.

Loaded relations:

* Casagrande, Ramírez, Meléndez, Bessell & Asplund 2010, A&A 512, A54,
  Table 4 — dwarfs and subgiants; B−V, V−Rc, (R−I)c, V−Ic, V−J, V−H, V−Ks,
  J−Ks (Johnson–Cousins, 2MASS).
* Mucciarelli, Bellazzini & Massari 2021, A&A 653, A90, Table 1 — Gaia
  EDR3/DR3 (BP−RP)₀ for dwarfs (log g ≥ 3) and giants (log g < 3).  The
  transcription of this table is from secondary sources; see the table
  metadata before relying on its last digit.

A relation is never extrapolated: outside its published colour or [Fe/H]
range it returns NaN and says so in a boolean array.

Several relations are combined per star by inverse-variance weighting
(`combine_teff`).  The total error of one relation is the colour error
propagated through the analytic dT_eff/dX, in quadrature with the
relation's published scatter.  The weighted mean treats the relations as
independent; colours that share a band (six of the eight C10 colours
contain V) and the common calibration sample make them positively
correlated, so the combined error is a lower limit when one band
dominates the error budget.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from stelltemp.errors import StelltempError

#: θ_eff · T_eff (K): the usual scaling of the reciprocal temperature.
THETA_SCALE = 5040.0

#: canonical order of the six terms; tables map their own columns onto it
TERMS = ("1", "X", "X^2", "X*[Fe/H]", "[Fe/H]", "[Fe/H]^2")

#: the directory read by `relations()`
CALIBRATION_DIR = Path(__file__).resolve().parent / "data" / "calibrations"

#: [Fe/H] adopted when none is given (solar metallicity)
DEFAULT_FEH = 0.0

_JOURNAL_ABBREV = {
    "Astronomy & Astrophysics": "A&A",
    "Monthly Notices of the Royal Astronomical Society": "MNRAS",
    "The Astrophysical Journal": "ApJ",
    "Astrophysical Journal": "ApJ",
}


# ---------------------------------------------------------------- helpers
def _float_array(value, name):
    """Float64 array of ``value`` or a one-line StelltempError naming it."""
    try:
        return np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise StelltempError(f"{name} must be numeric, got {value!r:.60}") from None


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
    """One published colour–T_eff–[Fe/H] relation.

    Attributes
    ----------
    key : str
        Identifier, e.g. ``"c10_bv"``.
    label : str
        Short human name, e.g. ``"C10 B-V"``.
    colour_name : str
        The colour as the paper writes it, e.g. ``"V-Ks"``.
    blue, red : str
        Passband keys (``jc.B``, ``2mass.Ks``, ``gaia3.BP`` ...); the colour
        is ``m(blue) − m(red)``.
    coeffs : tuple of 6 float
        c0…c5 in the canonical term order `TERMS`.
    colour_range : (float, float)
        Published validity range of the colour, mag, inclusive.
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
        Published 1σ scatter of the relation, K.
    n_stars : int or None
        Number of calibrating stars, where recorded.
    citation : Citation
    source : str
        File name of the table it came from.
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

    @property
    def bands(self):
        """``(blue, red)`` passband keys."""
        return (self.blue, self.red)

    # -- evaluation -----------------------------------------------------
    def _prepare(self, colour, feh):
        x = _float_array(colour, "colour")
        z = _float_array(DEFAULT_FEH if feh is None else feh, "[Fe/H]")
        try:
            x, z = np.broadcast_arrays(x, z)
        except ValueError:
            raise StelltempError(
                f"{self.key}: colour shape {x.shape} and [Fe/H] shape {z.shape} do not match") from None
        inside = ((x >= self.colour_range[0]) & (x <= self.colour_range[1])
                  & (z >= self.feh_range[0]) & (z <= self.feh_range[1]))
        # the paper's prescription for the most metal-poor stars, not an extrapolation
        z_eval = z if self.feh_floor is None else np.maximum(z, self.feh_floor)
        return x, z, z_eval, inside

    def _theta(self, x, z):
        c0, c1, c2, c3, c4, c5 = self.coeffs
        return c0 + x * (c1 + c2 * x + c3 * z) + z * (c4 + c5 * z)

    def theta(self, colour, feh=DEFAULT_FEH):
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
        x, _, z_eval, inside = self._prepare(colour, feh)
        return np.where(inside, self._theta(x, z_eval), np.nan)

    def teff(self, colour, feh=DEFAULT_FEH):
        """Effective temperature from a dereddened colour.

        Parameters
        ----------
        colour : array_like
            Dereddened colour ``blue − red``, mag.
        feh : array_like or None
            [Fe/H], dex, broadcast against ``colour``; None means solar.

        Returns
        -------
        teff : ndarray
            T_eff in K; NaN where the star is outside the published colour
            or [Fe/H] range (or the colour is NaN).
        inside : ndarray of bool
            True where the relation was applied.

        Notes
        -----
        Surface gravity is not checked here; see `applies_to`.
        """
        x, _, z_eval, inside = self._prepare(colour, feh)
        theta = self._theta(x, z_eval)
        inside = inside & (theta > 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            teff = np.where(inside, THETA_SCALE / theta, np.nan)
        return teff, inside

    def dteff_dcolour(self, colour, feh=DEFAULT_FEH):
        """Analytic ∂T_eff/∂X in K mag⁻¹ (NaN outside the validity range).

        From T = 5040/θ:  ∂T/∂X = −5040 (c1 + 2 c2 X + c3 [Fe/H]) / θ².
        """
        x, _, z_eval, inside = self._prepare(colour, feh)
        c0, c1, c2, c3, c4, c5 = self.coeffs
        theta = self._theta(x, z_eval)
        inside = inside & (theta > 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            d = -THETA_SCALE * (c1 + 2.0 * c2 * x + c3 * z_eval) / theta**2
        return np.where(inside, d, np.nan)

    def dteff_dfeh(self, colour, feh=DEFAULT_FEH):
        """Analytic ∂T_eff/∂[Fe/H] in K dex⁻¹ (NaN outside the validity range).

        Zero below `feh_floor`, where the formula is held at the floor.
        """
        x, z, z_eval, inside = self._prepare(colour, feh)
        c0, c1, c2, c3, c4, c5 = self.coeffs
        theta = self._theta(x, z_eval)
        inside = inside & (theta > 0.0)
        held = np.zeros(z.shape, bool) if self.feh_floor is None else z < self.feh_floor
        with np.errstate(divide="ignore", invalid="ignore"):
            d = -THETA_SCALE * (c3 * x + c4 + 2.0 * c5 * z_eval) / theta**2
        return np.where(inside, np.where(held, 0.0, d), np.nan)

    def applies_to(self, logg=None):
        """Whether the relation's luminosity class fits each star.

        Parameters
        ----------
        logg : array_like or None
            log g (cgs, dex).  None or NaN means unknown: the star is then
            assumed to be a dwarf, so only dwarf relations apply.

        Returns
        -------
        ndarray of bool (or a bool scalar array when ``logg`` is None)
        """
        if logg is None:
            return np.asarray(self.stage == "dwarf")
        g = _float_array(logg, "log g")
        known = np.isfinite(g)
        with np.errstate(invalid="ignore"):
            in_range = (g >= self.logg_range[0]) & (g < self.logg_range[1])
        return np.where(known, in_range, self.stage == "dwarf")


# ---------------------------------------------------------------- loading
def _meta_str(meta, name, default=""):
    value = meta.get(name, default)
    return str(value) if value is not None else default


def load_relations(path):
    """Read one calibration table (ECSV) into `Relation` objects.

    Parameters
    ----------
    path : str or Path
        ECSV file with columns ``key label colour blue red stage feh_min
        feh_max colour_min colour_max sigma_teff logg_min logg_max``, the six
        coefficient columns named in ``meta['coefficient_columns']`` whose
        terms are listed (same order) in ``meta['terms']``, and optionally
        ``feh_floor`` and ``n_stars``; the citation in ``meta['citation']``.

    Returns
    -------
    list of Relation
    """
    from astropy.table import Table  # imported here: only needed when loading

    path = Path(path)
    try:
        table = Table.read(path, format="ascii.ecsv")
    except Exception as exc:  # noqa: BLE001 - any reader failure is bad input
        raise StelltempError(f"cannot read calibration table {path.name}: {exc}") from None
    meta = table.meta
    cols = list(meta.get("coefficient_columns", []))
    terms = list(meta.get("terms", []))
    if len(cols) != 6 or sorted(terms) != sorted(TERMS) or len(terms) != 6:
        raise StelltempError(
            f"{path.name}: meta must list six coefficient_columns and their terms {TERMS}")
    order = [cols[terms.index(term)] for term in TERMS]
    cit = meta.get("citation") or {}
    if not cit.get("authors") or not cit.get("year"):
        raise StelltempError(f"{path.name}: meta 'citation' needs at least authors and year")
    citation = Citation(
        authors=str(cit["authors"]), year=int(cit["year"]),
        journal=_meta_str(cit, "journal"), volume=_meta_str(cit, "volume"),
        page=_meta_str(cit, "page"), table=_meta_str(cit, "table"))
    needed = ("key", "label", "colour", "blue", "red", "stage", "feh_min", "feh_max",
              "colour_min", "colour_max", "sigma_teff", "logg_min", "logg_max", *order)
    missing = [c for c in needed if c not in table.colnames]
    if missing:
        raise StelltempError(f"{path.name}: missing column(s) {', '.join(missing)}")

    out = []
    for row in table:
        floor = float(row["feh_floor"]) if "feh_floor" in table.colnames else np.nan
        n = int(row["n_stars"]) if "n_stars" in table.colnames else None
        rel = Relation(
            key=str(row["key"]), label=str(row["label"]), colour_name=str(row["colour"]),
            blue=str(row["blue"]), red=str(row["red"]),
            coeffs=tuple(float(row[c]) for c in order),
            colour_range=(float(row["colour_min"]), float(row["colour_max"])),
            feh_range=(float(row["feh_min"]), float(row["feh_max"])),
            feh_floor=None if not np.isfinite(floor) else floor,
            logg_range=(float(row["logg_min"]), float(row["logg_max"])),
            stage=str(row["stage"]), scatter=float(row["sigma_teff"]), n_stars=n,
            citation=citation, source=path.name)
        if rel.stage not in ("dwarf", "giant"):
            raise StelltempError(f"{path.name}: {rel.key}: stage must be 'dwarf' or 'giant'")
        if not rel.scatter > 0:
            raise StelltempError(f"{path.name}: {rel.key}: sigma_teff must be positive")
        out.append(rel)
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
        Passband keys the star(s) have, e.g. ``{"jc.V", "2mass.Ks"}``.
    stage : {"dwarf", "giant", None}
        Keep only relations calibrated on this stage (None keeps all).

    Returns
    -------
    tuple of Relation
    """
    if isinstance(available_bands, str):
        available_bands = [available_bands]
    have = set(available_bands)
    if stage not in (None, "dwarf", "giant"):
        raise StelltempError(f"stage must be 'dwarf', 'giant' or None, got {stage!r}")
    return tuple(r for r in _registry()
                 if r.blue in have and r.red in have and (stage is None or r.stage == stage))


def _resolve(colour_key):
    """Relations meant by a colour key: a relation key or a (blue, red) pair."""
    if isinstance(colour_key, str):
        return (get_relation(colour_key),)
    if isinstance(colour_key, tuple) and len(colour_key) == 2:
        found = tuple(r for r in _registry() if r.bands == tuple(colour_key))
        if not found:
            raise StelltempError(
                f"no calibrated relation for colour {colour_key[0]} - {colour_key[1]}")
        return found
    raise StelltempError(
        f"colour key must be a relation key or a (blue, red) pair, got {colour_key!r}")


# ------------------------------------------------------------ combination
@dataclass(frozen=True)
class CombinedTeff:
    """Per-star result of `combine_teff` (all arrays have the stars' shape).

    Attributes
    ----------
    teff : ndarray
        Inverse-variance weighted T_eff, K (NaN where no relation applied).
    teff_err : ndarray
        1σ error of ``teff``, K: (Σ wᵢ)^-½ with wᵢ = 1/σᵢ², σᵢ² = (∂T/∂X·σ_X)²
        + scatterᵢ².  Treats the relations as independent (module notes).
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
        Σ wᵢ (Tᵢ − T̄)² over the used relations (n_used − 1 degrees of
        freedom); NaN when fewer than two were used.
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
    """Weighted effective temperature from several dereddened colours.

    Parameters
    ----------
    colours : dict
        Dereddened colours, mag.  Keys are relation keys (``"c10_vk"``) or
        ``(blue, red)`` passband pairs (``("jc.V", "2mass.Ks")``; a pair
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
    Vectorised over stars; the only loop is over the (few) relations.  For
    relation i the total variance is σᵢ² = (∂T/∂X · σ_X)² + scatterᵢ² and
    the weight wᵢ = 1/σᵢ².  Relations are treated as independent; see the
    module notes on correlated errors.
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
    for i, (rel, x, e) in enumerate(entries):
        x = np.broadcast_to(x, shape)
        e = np.broadcast_to(e, shape)
        candidate = rel.applies_to(g) & np.isfinite(x)
        with np.errstate(invalid="ignore"):
            good_err = np.isfinite(e) & (e >= 0.0)
        t, inside = rel.teff(x, z)
        slope = rel.dteff_dcolour(x, z)
        ok = candidate & inside & good_err
        outside |= candidate & ~inside
        bad |= np.isfinite(x) & ~good_err  # bad even where the relation does not apply
        used[i] = ok
        teff_each[i] = np.where(ok, t, np.nan)
        err_each[i] = np.where(ok, np.sqrt((slope * e) ** 2 + rel.scatter**2), np.nan)

    with np.errstate(divide="ignore", invalid="ignore"):
        w = np.where(used, 1.0 / err_each**2, 0.0)
        wsum = w.sum(axis=0)
        tbar = np.where(used, w * teff_each, 0.0).sum(axis=0) / wsum
        n_used = used.sum(axis=0)
        none = n_used == 0
        tbar = np.where(none, np.nan, tbar)
        terr = np.where(none, np.nan, 1.0 / np.sqrt(wsum))
        chi2 = np.where(used, w * (teff_each - tbar) ** 2, 0.0).sum(axis=0)
    chi2 = np.where(n_used >= 2, chi2, np.nan)

    return CombinedTeff(
        teff=tbar, teff_err=terr, n_used=n_used, outside_range=outside,
        none_applicable=none, bad_input=bad, feh_assumed=np.array(feh_assumed),
        chi2=chi2, keys=tuple(rel.key for rel, _, _ in entries),
        teff_each=teff_each, err_each=err_each)


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
            "scatter_K": r.scatter, "citation": str(r.citation)}
