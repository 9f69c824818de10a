"""Row hygiene: raw catalogue values -> clean float64 engine inputs plus flags.

Every mapped value is turned into a float64.  A value that cannot be used
becomes NaN, its row gets a flag bit (from :mod:`stelltemp.engine.flags`) and
a short reason in the ``input_notes`` text, and the run goes on:

========================  ===============  ============================
value                     flag             note
========================  ===============  ============================
text that is no number    ``BAD_INPUT``    ``<column>: not a number``
+inf or -inf              ``BAD_INPUT``    ``<column>: infinite``
outside `LIMITS`          ``ABSURD_VALUE`` ``<column>: outside [lo, hi]``
no usable magnitude left  ``BAD_INPUT``    ``no usable magnitude``
E(B−V) column empty       ``BAD_INPUT``    ``<column>: missing, no …``
E(B−V) error empty        (none)           ``<column>: missing, taken as 0``
reader changed the row    ``BAD_INPUT``    the reader's note (line, bytes)
========================  ===============  ============================

A row whose E(B−V) or E(B−V) error is missing (unless E(B−V) is fitted),
not a number, infinite or outside its range gets no result at all: its
temperatures are NaN, never those of E(B−V) = 0.

Empty cells and the usual missing-value words (``NA``, ``null``, ``--``…)
are missing values (NaN), not errors: a missing magnitude simply means the
band was not observed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stelltemp.engine import flags as F
from stelltemp.errors import StelltempError
from stelltemp.validation import RANGES

#: kind of input -> its documented range (:data:`stelltemp.validation.RANGES`);
#: anything outside is ABSURD_VALUE.  They catch sentinels (99.99, -999) and
#: unit mix-ups, not unusual stars.  E(B-V) is bounded by the kernel's grid.
LIMIT_RANGES = {kind: RANGES[name] for kind, name in (
    ("mag", "mag"), ("err", "mag_err"), ("ebv", "ebv"), ("ebv_err", "ebv_err"), ("parallax", "parallax"),
    ("parallax_err", "parallax_err"), ("feh", "feh"), ("feh_err", "feh_err"), ("logg", "logg"))}
#: the same as (lo, hi) pairs
LIMITS = {kind: (r.lo, r.hi) for kind, r in LIMIT_RANGES.items()}

#: words (lower case, stripped) read as a missing value rather than as text
MISSING_WORDS = ("", "nan", "-nan", "+nan", "na", "n/a", "null", "none", "--", "-", "?", "masked")

_NUMBER_RE = r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:e[+-]?\d+)?$|^[+-]?(?:inf|infinity|nan)$"


def column_to_float(col):
    """Convert one raw column to float64, telling which cells were non-numeric text.

    Parameters
    ----------
    col : pyarrow Array/ChunkedArray, numpy array, astropy Column/MaskedColumn/Quantity
        Raw values.  Masked or null cells become NaN.

    Returns
    -------
    values : ndarray of float64
        Parsed values (NaN where missing or not a number; ±inf kept).
    text : ndarray of bool
        True where a cell held text that is not a number.
    """
    if isinstance(col, (pa.Array, pa.ChunkedArray)):
        return _arrow_to_float(col)
    if hasattr(col, "unit") and hasattr(col, "value") and not hasattr(col, "mask"):
        col = col.value  # astropy Quantity
    mask = np.ma.getmaskarray(col) if np.ma.isMaskedArray(col) or hasattr(col, "mask") else None
    data = np.asarray(col.data if hasattr(col, "mask") and hasattr(col, "data") else col)
    if data.ndim != 1:
        raise StelltempError("a mapped column must hold one value per row (this one is a vector column)")
    kind = data.dtype.kind
    if kind in "fiu":
        values = data.astype(np.float64, copy=True)
        text = np.zeros(values.shape, bool)
    elif kind in "USO":
        values, text = _arrow_to_float(_strings_to_arrow(data, mask))
        mask = None  # already applied as nulls
    else:  # bool, datetime ...: not a magnitude
        values = np.full(data.shape, np.nan)
        text = np.ones(data.shape, bool)
    if mask is not None and mask.any():
        values[mask] = np.nan
        text[mask] = False
    return values, text


def _strings_to_arrow(data, mask):
    if data.dtype.kind == "S":
        data = np.char.decode(data, "utf-8", errors="replace")
    if data.dtype.kind == "U":
        arr = pa.array(data, type=pa.string())
    else:  # object: mixed numbers, strings, bytes, None
        out = []
        for v in data:
            if v is None or v is np.ma.masked:
                out.append(None)
            elif isinstance(v, bytes):
                out.append(v.decode("utf-8", errors="replace"))
            else:
                out.append(str(v))
        arr = pa.array(out, type=pa.string())
    if mask is not None and mask.any():
        arr = pc.if_else(pa.array(mask), pa.scalar(None, pa.string()), arr)
    return arr


def _numpy(arr):
    """A pyarrow (chunked) array as numpy; chunks joined first (ChunkedArray.to_numpy imports pandas)."""
    import pyarrow as pa

    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    return arr.to_numpy(zero_copy_only=False)


def _arrow_to_float(col):
    typ = col.type
    n = len(col)
    if pa.types.is_dictionary(typ):
        col = col.cast(typ.value_type)
        typ = col.type
    if pa.types.is_null(typ):
        return np.full(n, np.nan), np.zeros(n, bool)
    if pa.types.is_integer(typ) or pa.types.is_floating(typ) or pa.types.is_decimal(typ):
        values = _numpy(pc.cast(col, pa.float64()))
        return np.array(values, dtype=np.float64), np.zeros(n, bool)
    if pa.types.is_binary(typ) or pa.types.is_large_binary(typ):
        col = col.cast(pa.string())
        typ = col.type
    if not (pa.types.is_string(typ) or pa.types.is_large_string(typ)):
        return np.full(n, np.nan), ~np.asarray(pc.is_null(col), dtype=bool)
    s = pc.utf8_trim_whitespace(col)
    try:  # fast path: every cell is a number or null
        values = _numpy(pc.cast(s, pa.float64()))
        return np.array(values, dtype=np.float64), np.zeros(n, bool)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        pass
    low = pc.utf8_lower(s)
    missing = pc.or_(pc.is_null(s), pc.fill_null(pc.is_in(low, value_set=pa.array(MISSING_WORDS)), True))
    number = pc.fill_null(pc.match_substring_regex(low, _NUMBER_RE), False)
    values = pc.cast(pc.if_else(number, s, pa.scalar(None, s.type)), pa.float64())
    text = pc.and_(pc.invert(missing), pc.invert(number))
    return (
        np.array(_numpy(values), dtype=np.float64),
        np.asarray(_numpy(text), dtype=bool),
    )


class RowNotes:
    """Per-row flag bits and reason text collected before the engine runs."""

    def __init__(self, n):
        self.flags = np.zeros(n, np.int64)
        self.notes = np.full(n, "", dtype=object)
        self.any = False

    def text(self):
        """The notes as a str array (cheap when there are none)."""
        return self.notes.astype(str) if self.any else np.full(len(self.notes), "", dtype="<U1")

    def add(self, mask, bit, note):
        """Set `bit` and append `note` on the rows where `mask` is true."""
        idx = np.flatnonzero(mask)
        if idx.size == 0:
            return
        self.any = True
        self.flags[idx] |= bit
        cur = self.notes[idx]
        self.notes[idx] = np.where(cur == "", note, cur + ("; " + note))


def clean(values, text, kind, label, notes):
    """NaN out unusable values of one column and record why (see module table).

    Parameters
    ----------
    values : ndarray of float64
        Parsed values; modified in place and returned.
    text : ndarray of bool
        Cells that held non-numeric text.
    kind : str
        Key of `LIMITS` (``mag``, ``err``, ``ebv`` ...).
    label : str
        Column name used in the note.
    notes : RowNotes
        Collector of flags and notes.
    """
    notes.add(text, F.BAD_INPUT, f"{label}: not a number")
    infinite = np.isinf(values)
    notes.add(infinite, F.BAD_INPUT, f"{label}: infinite")
    lo, hi = LIMITS[kind]
    finite = np.isfinite(values)
    absurd = np.zeros(values.shape, bool)
    absurd[finite] = (values[finite] < lo) | (values[finite] > hi)
    notes.add(absurd, F.ABSURD_VALUE, f"{label}: outside [{lo:g}, {hi:g}]")
    values[text | infinite | absurd] = np.nan
    return values


@dataclass
class CleanInputs:
    """Engine-ready inputs of one chunk (float64 arrays or scalars) and pre-flags."""

    mags: dict
    errs: dict
    scalars: dict
    flags: np.ndarray
    notes: np.ndarray  # str


def prepare_inputs(get, cmap, n, fit_ebv=False, row_notes=()):
    """Collect and clean every mapped input of one chunk.

    Parameters
    ----------
    get : callable
        ``get(column_name)`` returns the raw column (any type `column_to_float` takes).
    cmap : stelltemp.catalog.mapping.ColumnMap
        Which columns to read.
    n : int
        Number of rows in the chunk.
    fit_ebv : bool
        When E(B−V) is fitted an empty E(B−V) cell is not a problem.
    row_notes : iterable of (int, str, bool)
        What the table reader changed in a row: (row, note, values_unusable),
        e.g. a CSV line with a wrong number of fields (unusable) or bytes that
        were not UTF-8 text.  Each such row gets ``BAD_INPUT`` and the note;
        an unusable row gets no magnitude, hence no result.

    Returns
    -------
    CleanInputs
    """
    notes = RowNotes(n)
    unusable = np.zeros(n, bool)
    for row, text, drop in row_notes:
        notes.add(np.arange(n) == row, F.BAD_INPUT, text)
        unusable[row] |= bool(drop)

    scalars = {}
    for name in ("ebv", "ebv_err", "parallax", "parallax_err", "feh", "feh_err", "logg"):
        if name in cmap.columns:
            col = cmap.columns[name]
            vals, text = column_to_float(get(col))
            missing = np.isnan(vals) & ~text
            bad = ~missing & ~LIMIT_RANGES[name].holds(vals)  # text, infinite or outside
            vals = clean(vals, text, name, col, notes)
            if name == "ebv":
                # no reddening known: no result (never silently E(B-V) = 0)
                if not fit_ebv:
                    notes.add(missing & ~unusable, F.BAD_INPUT, f"{col}: missing, no result without E(B-V)")
                    bad |= missing
                unusable |= bad
            elif name == "ebv_err":
                unusable |= bad
                notes.add(missing, 0, f"{col}: missing, taken as 0")
                vals = np.where(missing, 0.0, vals)
            scalars[name] = vals
        elif name in cmap.values:
            scalars[name] = float(cmap.values[name])

    mags, errs = {}, {}
    for key, spec in cmap.bands.items():
        vals, text = column_to_float(get(spec.mag))
        mags[key] = clean(vals, text, "mag", spec.mag, notes)
        mags[key][unusable] = np.nan
        if spec.err:
            vals, text = column_to_float(get(spec.err))
            errs[key] = clean(vals, text, "err", spec.err, notes)
    usable = np.zeros(n, bool)
    for vals in mags.values():
        usable |= np.isfinite(vals)
    notes.add(~usable & ~unusable, F.BAD_INPUT, "no usable magnitude")
    return CleanInputs(mags=mags, errs=errs, scalars=scalars, flags=notes.flags, notes=notes.text())
