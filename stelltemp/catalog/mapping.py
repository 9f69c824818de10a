"""Which catalogue column holds which input of the temperature engine.

Default naming (no map file)
----------------------------
- a magnitude column is named by its passband key, e.g. ``V_JC`` or
  ``Ks_2MASS`` (only keys of the built-in passband registry are picked up —
  or, if the registry cannot be loaded, keys of a known photometric system —
  so a column such as ``obs.date`` is left alone); columns named by the keys
  of earlier releases (``jc.V``) still work for one release, with a
  DeprecationWarning;
- its 1-sigma error column is the key plus ``_err``, e.g. ``V_JC_err``;
- ``ebv`` and ``ebv_err`` hold E(B−V) and its error (mag), ``parallax`` and
  ``parallax_err`` the parallax (mas), ``feh`` and ``feh_err`` the [Fe/H]
  and its error (dex) and ``logg`` the surface gravity log g (cgs dex).
  Each is optional.

Map file (our own TOML layout)
------------------------------
For catalogues with their own column names::

    # column map for an invented survey table
    [bands]              # passband key, or a band name where it is unambiguous
    "B_JC" = "Bmag"                          # magnitude column only
    "V" = { mag = "Vmag", err = "e_Vmag" }   # V is V_JC

    [columns]            # any of: ebv ebv_err parallax parallax_err feh feh_err logg
    ebv = "EBV_map"
    parallax = "plx"

    [values]             # one number for every row, used when no column is named
    ebv = 0.03
    ebv_err = 0.01

A key given both in ``[columns]`` and ``[values]`` is an error.
"""

from __future__ import annotations

import re
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path

from stelltemp.errors import StelltempError

#: suffix of the default error column of a magnitude column
ERR_SUFFIX = "_err"

#: photometric systems whose keys (``<band>_<SYSTEM>``) are picked up by the default mapping
#: when the passband registry cannot be loaded (the conventions in DEVELOPERS.md)
KNOWN_SYSTEMS = ("JC", "SDSS", "PS1", "2MASS", "GDR3")

#: per-row inputs besides magnitudes, with the default column name of each
SCALAR_INPUTS = ("ebv", "ebv_err", "parallax", "parallax_err", "feh", "feh_err", "logg")

#: the inputs that may also be given as a single number for all rows
VALUE_INPUTS = ("ebv", "ebv_err", "feh_err")


@dataclass(frozen=True)
class BandColumns:
    """Catalogue columns of one passband: magnitude and optional 1-sigma error."""

    mag: str
    err: str | None = None


@dataclass(frozen=True)
class ColumnMap:
    """Where each engine input lives in a catalogue.

    Parameters
    ----------
    bands : dict of str -> BandColumns
        Passband key (``V_JC``) -> magnitude and error columns.
    columns : dict of str -> str
        Input name (one of `SCALAR_INPUTS`) -> catalogue column.
    values : dict of str -> float
        Input name (``ebv``, ``ebv_err``) -> one value for every row (mag).

    Examples
    --------
    >>> cmap = ColumnMap(bands={"V_JC": BandColumns("vmag", "e_vmag"), "B_JC": BandColumns("bmag")},
    ...                  columns={"ebv": "reddening"})
    >>> cmap.required_columns()
    ['vmag', 'e_vmag', 'bmag', 'reddening']
    >>> cmap.check(["vmag", "e_vmag", "bmag"])
    Traceback (most recent call last):
    ...
    stelltemp.errors.StelltempError: column 'reddening' (for ebv) is not in the table
    """

    bands: dict = field(default_factory=dict)
    columns: dict = field(default_factory=dict)
    values: dict = field(default_factory=dict)
    #: what the default naming matched loosely or left out (for the run's notes)
    notes: tuple = ()

    def required_columns(self):
        """Every catalogue column this map reads, in a stable order."""
        names = []
        for spec in self.bands.values():
            names.append(spec.mag)
            if spec.err:
                names.append(spec.err)
        names.extend(self.columns[k] for k in SCALAR_INPUTS if k in self.columns)
        return list(dict.fromkeys(names))

    def check(self, colnames):
        """Raise `StelltempError` naming the first mapped column absent from `colnames`."""
        if not self.bands:
            raise StelltempError(
                "no magnitude columns: name them by passband key (e.g. 'V_JC') "
                "or give a column map file with a [bands] table"
            )
        present = set(colnames)
        for key, spec in self.bands.items():
            for col, what in ((spec.mag, "magnitude"), (spec.err, "error")):
                if col is not None and col not in present:
                    raise StelltempError(f"column '{col}' ({what} of {key}) is not in the table")
        for key, col in self.columns.items():
            if col not in present:
                raise StelltempError(f"column '{col}' (for {key}) is not in the table")

    def with_ebv(self, ebv=None, ebv_err=None, feh_err=None):
        """A copy with E(B−V), its error (and the [Fe/H] error) set from a number or a column name.

        A string that parses as a number is a value for every row; any other
        string is a column name.  ``None`` leaves the setting as it is.
        """
        out = self
        for name, given in (("ebv", ebv), ("ebv_err", ebv_err), ("feh_err", feh_err)):
            if given is None:
                continue
            cols, vals = dict(out.columns), dict(out.values)
            cols.pop(name, None)
            vals.pop(name, None)
            number = _as_number(given)
            if number is None:
                cols[name] = str(given)
            else:
                vals[name] = number
            out = replace(out, columns=cols, values=vals)
        return out


def _as_number(given):
    if isinstance(given, bool):
        return None
    if isinstance(given, (int, float)):
        return float(given)
    try:
        return float(str(given))
    except ValueError:
        return None


def band_key_pattern(systems=KNOWN_SYSTEMS):
    """Compiled regex matching a passband key ``<band>_<SYSTEM>`` of one of `systems`."""
    alt = "|".join(re.escape(s) for s in systems)
    return re.compile(rf"^[A-Za-z0-9]+_(?:{alt})$")


def default_mapping(colnames, systems=KNOWN_SYSTEMS):
    """Column map from the default naming (see module docstring).

    A column name that a format's reader mangled still matches its passband:
    VOTable readers prefix names that start with a digit with ``_``
    (``_2mass.Ks``) and some FITS writers upper-case them (``2MASS.KS``); such
    a name is matched when exactly one passband key fits, and noted.  A
    column that looks like a passband key (``<system>.<band>`` of a known
    system) but matches none is noted as not used, never silently ignored.

    Parameters
    ----------
    colnames : iterable of str
        Column names of the catalogue.
    systems : sequence of str
        Photometric systems whose keys count as magnitude columns.

    Returns
    -------
    ColumnMap

    Examples
    --------
    >>> cmap = default_mapping(["B_JC", "B_JC_err", "V_JC", "ebv"])
    >>> sorted(cmap.bands), cmap.bands["B_JC"].err, cmap.columns["ebv"]
    (['B_JC', 'V_JC'], 'B_JC_err', 'ebv')

    """
    names = list(colnames)
    present = set(names)
    pattern = band_key_pattern(systems)
    registered = _registered_keys()
    folded = {}
    for key in registered:
        folded.setdefault(key.lower(), []).append(key)
    bands, notes, used = {}, [], set()
    for name in names:
        if name.endswith(ERR_SUFFIX):
            continue
        key = name if (name in registered if registered else bool(pattern.match(name))) else None
        if key is None and registered:
            key = _loose_key(name, registered, folded, present)
            if key is not None:
                key = _canonical(key)
                notes.append(f"column '{name}' read as passband {key}")
        elif key is not None and registered:
            key = _canonical(key)  # an old key (jc.V) warns and becomes V_JC
        if key is None:
            if _looks_like_band(name, systems):
                notes.append(f"column '{name}' looks like a passband key but matches no passband: not used")
            continue
        if key in bands:
            notes.append(f"column '{name}' is a second column for passband {key}: not used")
            continue
        err = next((c for c in (name + ERR_SUFFIX, key + ERR_SUFFIX) if c in present), None)
        bands[key] = BandColumns(mag=name, err=err)
        used.update([name, err])
    for name in names:
        if name.endswith(ERR_SUFFIX) and name not in used and _looks_like_band(name[: -len(ERR_SUFFIX)], systems):
            notes.append(f"column '{name}' looks like an error column but its magnitude is not used: not used")
    columns = {k: k for k in SCALAR_INPUTS if k in present}
    return ColumnMap(bands=bands, columns=columns, notes=tuple(notes))


def _loose_key(name, registered, folded, present):
    """The one passband key a mangled column name stands for, or None."""
    for candidate in (name, name.lstrip("_")):
        if candidate != name and candidate in registered and candidate not in present:
            return candidate
        keys = folded.get(candidate.lower(), [])
        if len(keys) == 1 and keys[0] not in present:
            return keys[0]
    return None


def _looks_like_band(name, systems):
    """True for names shaped like a passband key of a known system (any case, leading '_')."""
    text = name.lstrip("_").lower()
    lowered = tuple(s.lower() for s in systems) + _OLD_SYSTEMS
    if "." in text and text.split(".", 1)[0] in lowered:
        return True
    return "_" in text and text.rsplit("_", 1)[1] in _SYSTEM_SUFFIXES


#: system prefixes of the keys of earlier releases (``jc.V``, ``gaia3.BP``)
_OLD_SYSTEMS = ("jc", "sdss", "ps1", "2mass", "gaia3")
#: lower-case system suffixes of the ``<band>_<SYSTEM>`` keys
_SYSTEM_SUFFIXES = ("jc", "sdss", "ps1", "2mass", "gdr3")


def _registered_keys():
    """Keys of the built-in passband registry and their old spellings (empty if it cannot be loaded)."""
    try:
        from stelltemp.passbands import builtin_keys, registry_table

        reg = registry_table()
        return set(builtin_keys()) | (set(reg["old_key"]) if "old_key" in reg.colnames else set())
    except Exception:  # registry missing or broken: the known systems still apply
        return set()


def _canonical(name):
    """The passband key a column or map name stands for (:func:`stelltemp.passbands.resolve_key`)."""
    from stelltemp.passbands import resolve_key

    return resolve_key(name)


def load_mapping(path):
    """Read a column map file (TOML layout in the module docstring).

    Raises
    ------
    StelltempError
        Unreadable file, TOML syntax error, unknown table or key, wrong type.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "map.toml"
    >>> _ = path.write_text('[bands]\\nV_JC = "vmag"\\nB_JC = "bmag"\\n')
    >>> sorted(load_mapping(path).bands)
    ['B_JC', 'V_JC']

    """
    from stelltemp.safeio import read_text_file

    path = Path(path)
    text = read_text_file(path, "column map")
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise StelltempError(f"column map {path}: {exc}") from None
    return mapping_from_dict(doc, source=str(path))


def mapping_from_dict(doc, source="column map"):
    """Build a `ColumnMap` from the parsed TOML document `doc`."""
    unknown = set(doc) - {"bands", "columns", "values"}
    if unknown:
        raise StelltempError(f"{source}: unknown table [{sorted(unknown)[0]}] (use bands, columns, values)")

    bands = {}
    for key, spec in _table(doc, "bands", source).items():
        if Path(key).suffix.lower() not in (".ecsv", ".csv", ".txt", ".dat"):  # a curve file stays a path
            try:
                key = _canonical(key)
            except StelltempError as exc:
                raise StelltempError(f"{source}: [bands] {exc}") from None
        if key in bands:
            raise StelltempError(f"{source}: [bands] passband {key} is given twice")
        if isinstance(spec, str):
            bands[key] = BandColumns(mag=spec)
        elif isinstance(spec, dict):
            extra = set(spec) - {"mag", "err"}
            if extra or not isinstance(spec.get("mag"), str):
                raise StelltempError(f"{source}: [bands] '{key}' needs mag = \"column\" and optionally err = \"column\"")
            err = spec.get("err")
            if err is not None and not isinstance(err, str):
                raise StelltempError(f"{source}: [bands] '{key}' err must be a column name")
            bands[key] = BandColumns(mag=spec["mag"], err=err)
        else:
            raise StelltempError(f"{source}: [bands] '{key}' must be a column name or {{mag=..., err=...}}")

    columns = {}
    for key, col in _table(doc, "columns", source).items():
        if key not in SCALAR_INPUTS:
            raise StelltempError(f"{source}: unknown key '{key}' in [columns] (use {', '.join(SCALAR_INPUTS)})")
        if not isinstance(col, str):
            raise StelltempError(f"{source}: [columns] {key} must be a column name")
        columns[key] = col

    values = {}
    for key, val in _table(doc, "values", source).items():
        if key not in VALUE_INPUTS:
            raise StelltempError(f"{source}: unknown key '{key}' in [values] (use {', '.join(VALUE_INPUTS)})")
        if isinstance(val, bool) or not isinstance(val, (int, float)):
            raise StelltempError(f"{source}: [values] {key} must be a number")
        if key in columns:
            raise StelltempError(f"{source}: '{key}' is given both as a column and as a value")
        values[key] = float(val)
    return ColumnMap(bands=bands, columns=columns, values=values)


def _table(doc, name, source):
    sub = doc.get(name, {})
    if not isinstance(sub, dict):
        raise StelltempError(f"{source}: '{name}' must be a table ([{name}])")
    return sub
