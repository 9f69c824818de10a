"""Table files in and out, chosen by extension, with atomic output.

Formats
-------
=============  ==============================  =============================
extension      reading                         writing
=============  ==============================  =============================
``.parquet``   streamed by batches (pyarrow)   streamed (ParquetWriter)
``.pq``
``.csv``       streamed by blocks (pyarrow)    streamed (pyarrow CSV writer)
``.ecsv``      whole file (astropy)            accumulated, written at end
``.fits``      whole file (astropy)            accumulated, written at end
``.fit .fts``
``.vot``       whole file (astropy)            accumulated, written at end
``.xml``
=============  ==============================  =============================

Large runs should use Parquet or CSV on both ends: only they stream, so
memory stays bounded by the chunk size.

Units, descriptions and the run record
--------------------------------------
Every format carries the column units and descriptions and the run record
(one flat mapping, layout in :mod:`stelltemp.catalog.describe`), written so
that astropy's ``Table.read`` gets them back without a warning:

* ECSV: its YAML header;
* CSV: plain CSV (one line of column names, then the rows, nothing else),
  so every CSV reader takes it as it is (``Table.read(path,
  format="ascii.csv")``, ``pandas.read_csv``, Python's ``csv`` module).  The
  units, descriptions, data types and the run record go beside it, in the
  JSON file of the same stem, ``<stem>.meta.json`` (`csv_sidecar_path`;
  layout in `csv_sidecar`); `read_table` applies it.  By hand::

      side = json.loads(Path("out.meta.json").read_text())
      side["meta"]                      # the run record
      side["columns"]["t_bb"]["unit"]   # 'K'

  CSV files written by earlier versions (an ECSV header as ``#`` lines, or
  ``<output>.meta.json``) are still read with their units and record;
* FITS: ``TUNIT``/``TCOMM`` per column, the record as header cards (long
  keys as HIERARCH cards, which keep their case; long text continued);
* VOTable: ``unit`` (VOUnit: a flux in erg s⁻¹ cm⁻² is written in the equal
  mW m⁻²) and ``DESCRIPTION`` per field, the record as ``INFO`` elements and,
  for astropy, as ``key = value`` lines of the table description
  (`describe.record_from_text` parses them);
* Parquet: units and descriptions in the field metadata, astropy's
  ``table_meta_yaml`` schema entry (with the string lengths it expects) and
  the record as JSON under the key ``stelltemp``.

Safety
------
An existing output is never replaced unless ``overwrite=True``.  Output is
written to a hidden temporary file in the target's folder and renamed into
place (`os.replace`) only when complete, so an interrupted run leaves neither
a half-written target nor the temporary file.
"""

from __future__ import annotations

import codecs
import contextlib
import csv
import functools
import io
import json
import re
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from stelltemp.errors import StelltempError
from stelltemp.safeio import atomic_path, check_output_path

#: extension (lower case) -> format name
EXTENSIONS = {
    ".parquet": "parquet",
    ".pq": "parquet",
    ".csv": "csv",
    ".ecsv": "ecsv",
    ".fits": "fits",
    ".fit": "fits",
    ".fts": "fits",
    ".vot": "votable",
    ".votable": "votable",
    ".xml": "votable",
}
#: formats read and written chunk by chunk
STREAMING = ("parquet", "csv")
#: astropy registry names of the accumulated formats
_ASTROPY_FORMAT = {"ecsv": "ascii.ecsv", "fits": "fits", "votable": "votable"}

#: ending of the JSON file beside a CSV output holding its units, descriptions and run record
SIDECAR_SUFFIX = ".meta.json"
#: value of the sidecar's ``"layout"`` entry
SIDECAR_LAYOUT = "stelltemp CSV sidecar 1"


def csv_sidecar_path(path):
    """The metadata file beside a CSV table: same folder, same stem, ``.meta.json``.

    Examples
    --------
    >>> csv_sidecar_path("runs/out.csv").as_posix()
    'runs/out.meta.json'
    """
    path = Path(path)
    return path.with_name(path.stem + SIDECAR_SUFFIX)


def table_format(path):
    """Format name of `path` from its extension.

    Raises
    ------
    StelltempError
        Unknown extension.
    """
    name = Path(path).name.lower()
    for ext, fmt in EXTENSIONS.items():
        if name.endswith(ext):
            return fmt
    known = " ".join(sorted(EXTENSIONS))
    raise StelltempError(f"{path}: unknown table extension (use one of {known})")


# --------------------------------------------------------------------- column conversions
def unit_of_field(field):
    """Unit string stored in an arrow field's metadata, or None."""
    meta = field.metadata or {}
    unit = meta.get(b"unit")
    return unit.decode() if unit else None


def description_of_field(field):
    """Description stored in an arrow field's metadata, or None."""
    text = (field.metadata or {}).get(b"description")
    return text.decode() if text else None


def with_column_info(field, unit=None, description=None):
    """``field`` with a unit and a description added where it has none."""
    meta = dict(field.metadata or {})
    if unit and not meta.get(b"unit"):
        meta[b"unit"] = str(unit).encode()
    if description and not meta.get(b"description"):
        meta[b"description"] = str(description).encode()
    return field.with_metadata(meta) if meta else field


def numpy_to_arrow(data, mask=None):
    """An Arrow array of a 1-d numpy array, as ``pa.array(data)`` makes it (``mask``: True where null).

    Numbers and booleans are wrapped from their buffer: ``pa.array`` asks
    pyarrow's pandas shim about every input, which imports pandas, a quarter
    of a second of a short run.  Other kinds go to ``pa.array``.
    """
    kind = data.dtype.kind
    if data.ndim != 1 or kind not in "fiub" or not data.dtype.isnative:
        arr = pa.array(data)
        return arr if mask is None or not mask.any() else pc.if_else(pa.array(mask), pa.scalar(None, arr.type), arr)
    n = len(data)
    valid = None
    if mask is not None and mask.any():
        valid = pa.py_buffer(np.packbits(~np.asarray(mask, bool), bitorder="little"))
    if kind == "b":
        return pa.Array.from_buffers(pa.bool_(), n, [valid, pa.py_buffer(np.packbits(data, bitorder="little"))])
    data = np.ascontiguousarray(data)
    return pa.Array.from_buffers(pa.from_numpy_dtype(data.dtype), n, [valid, pa.py_buffer(data)])


def text_to_arrow(data):
    """An Arrow string array of a 1-d numpy text array (``U``), as ``pa.array(data, pa.string())`` makes it.

    ASCII text is built from its buffer (the reason is `numpy_to_arrow`'s) as
    fixed-width cells whose NUL padding Arrow trims; text with other
    characters or with NULs inside goes to ``pa.array``.
    """
    width = data.dtype.itemsize // 4
    if data.ndim != 1 or data.dtype.kind != "U" or not data.dtype.isnative or width == 0 or len(data) == 0:
        return pa.array(data, type=pa.string())
    codes = np.ascontiguousarray(data).view(np.uint32)
    if codes.max() >= 128:
        return pa.array(data, type=pa.string())
    cells = pa.Array.from_buffers(pa.binary(width), len(data), [None, pa.py_buffer(codes.astype(np.uint8))])
    text = pc.utf8_rtrim(cells.cast(pa.string()), characters="\x00")
    if pc.max(pc.count_substring(text, "\x00")).as_py():  # pa.array ends a cell at its first NUL
        return pa.array(data, type=pa.string())
    return text


def objects_to_arrow(values):
    """An Arrow string array of a 1-d object array of ``str`` and ``None``, as
    ``pa.array(values, pa.string(), from_pandas=True)`` makes it.

    The engine's text columns hold a few shared strings: each distinct value
    is converted once and taken per row (faster than ``pa.array`` and without
    its pandas import, see `numpy_to_arrow`).  Anything else goes to ``pa.array``.
    """
    index = {}
    try:
        codes = np.fromiter((index.setdefault(v, len(index)) for v in values), np.int64, len(values))
    except TypeError:  # an unhashable value
        return pa.array(values, pa.string(), from_pandas=True)
    distinct = list(index)
    if not all(v is None or type(v) is str for v in distinct):
        return pa.array(values, pa.string(), from_pandas=True)
    nulls = np.array([v is None for v in distinct], bool)
    words = text_to_arrow(np.array(["" if v is None else v for v in distinct], dtype=str))
    if nulls.any():
        words = pc.if_else(numpy_to_arrow(nulls), pa.nulls(len(distinct), pa.string()), words)
    return words.take(numpy_to_arrow(codes))


def astropy_to_arrow(table):
    """An astropy Table as a pyarrow Table (units into field metadata)."""
    arrays, fields = [], []
    for name in table.colnames:
        col = table[name]
        unit = getattr(col, "unit", None)
        values = col.value if hasattr(col, "value") and unit is not None and not hasattr(col, "mask") else col
        mask = np.ma.getmaskarray(values) if hasattr(values, "mask") else None
        data = np.asarray(values.data if hasattr(values, "mask") else values)
        if not data.dtype.isnative:  # FITS is big-endian; Arrow wants native order
            data = data.astype(data.dtype.newbyteorder("="))
        if data.ndim > 1:
            arr = pa.array(data.tolist())
        elif data.dtype.kind == "S":
            arr = pa.array(np.char.decode(data, "utf-8", errors="replace"), type=pa.string())
        elif data.dtype.kind == "U":
            arr = text_to_arrow(data)
        elif data.dtype.kind == "O":
            arr = pa.array([None if v is None else str(v) for v in data], type=pa.string())
        else:
            arr = numpy_to_arrow(data, mask)
        if mask is not None and mask.any() and arr.null_count == 0:
            arr = pc.if_else(pa.array(mask), pa.scalar(None, arr.type), arr)
        meta = {}
        if unit is not None and str(unit):
            meta[b"unit"] = str(unit).encode()
        if getattr(col.info, "description", None):
            meta[b"description"] = str(col.info.description).encode()
        arrays.append(arr)
        meta = meta or None
        fields.append(pa.field(name, arr.type, metadata=meta))
    return pa.Table.from_arrays(arrays, schema=pa.schema(fields))


def arrow_to_astropy(table):
    """A pyarrow Table as an astropy Table (units from field metadata; nulls masked)."""
    from astropy.table import Column, MaskedColumn, Table

    out = Table()
    for field, col in zip(table.schema, table.columns):
        unit = unit_of_field(field)
        empty = _empty_data(field.type) if len(col) == 0 else None
        if empty is not None:  # (a header's empty table) without to_numpy, which imports pandas
            out[field.name] = Column(empty, unit=unit, description=description_of_field(field))
            continue
        nulls = np.asarray(pc.is_null(col.combine_chunks() if isinstance(col, pa.ChunkedArray) else col)
                           .to_numpy(zero_copy_only=False), dtype=bool)  # ChunkedArray.to_numpy imports pandas
        typ = field.type
        if pa.types.is_string(typ) or pa.types.is_large_string(typ):
            data = np.array(pc.fill_null(col, "").to_pylist(), dtype=str)
            if data.dtype.itemsize == 0:
                data = data.astype("U1")
        elif pa.types.is_floating(typ):
            data = np.asarray(col.to_numpy(), dtype=np.float64 if typ.bit_width == 64 else None)
            nulls = np.zeros(len(col), bool)  # null -> NaN already
        elif pa.types.is_null(typ):
            data = np.full(len(col), np.nan)
            nulls = np.zeros(len(col), bool)
        else:
            filled = col if not nulls.any() else pc.fill_null(col, pa.scalar(_zero_of(typ), typ))
            data = np.asarray(filled.to_numpy())
        description = description_of_field(field)
        if nulls.any():
            out[field.name] = MaskedColumn(data, mask=nulls, unit=unit, description=description)
        else:
            out[field.name] = Column(data, unit=unit, description=description)
    return out


def _empty_data(typ):
    """The zero-length numpy array `arrow_to_astropy` makes of an empty column of type ``typ`` (None: not known)."""
    if pa.types.is_string(typ) or pa.types.is_large_string(typ):
        return np.zeros(0, "U1")
    if pa.types.is_null(typ):
        return np.zeros(0, np.float64)
    if pa.types.is_floating(typ) or pa.types.is_integer(typ) or pa.types.is_boolean(typ):
        return np.zeros(0, typ.to_pandas_dtype())
    return None


def _zero_of(typ):
    if pa.types.is_boolean(typ):
        return False
    if pa.types.is_integer(typ):
        return 0
    return None


def results_to_arrow(results):
    """Engine result table (QTable) as a pyarrow Table with units in field metadata."""
    return astropy_to_arrow(results)


# --------------------------------------------------------------------- readers
class ChunkReader:
    """Iterate over a table file in chunks.

    Attributes
    ----------
    path : pathlib.Path
    fmt : str
        Format name (see `EXTENSIONS`).
    colnames : list of str
        Column names (repeats renamed ``name.dup2``, ``name.dup3``… and noted).
    num_rows : int or None
        Total rows when known before reading (None for CSV).
    notes : list of str
        Things the reader changed or skipped (renamed columns, malformed lines).
    """

    def __init__(self, path, chunk_rows=100_000):
        self.path = Path(path)
        self.fmt = table_format(self.path)
        self.chunk_rows = max(1, int(chunk_rows))
        self.notes = []
        self.num_rows = None
        #: per chunk, after it is yielded: (row, note, values_unusable) of rows the reader changed
        self.row_notes = []
        if not self.path.is_file():
            raise StelltempError(f"{self.path}: no such file")
        if self.fmt == "parquet":
            self._open_parquet()
        elif self.fmt == "csv":
            self._open_csv()
        else:
            self._open_astropy()
        if not self.colnames:
            raise StelltempError(f"{self.path}: the table has no columns")

    # -- parquet
    def _open_parquet(self):
        import pyarrow.parquet as pq

        try:
            self._pq = pq.ParquetFile(self.path)
            schema = self._pq.schema_arrow
        except Exception as exc:  # pyarrow raises several types for corrupt files
            raise StelltempError(f"{self.path}: not a readable Parquet file ({_first_line(exc)})") from None
        self.num_rows = self._pq.metadata.num_rows
        self._raw_names = schema.names
        self.colnames = _dedupe(schema.names, self.notes)
        self.schema = pa.schema(
            [pa.field(new, f.type, metadata=f.metadata) for new, f in zip(self.colnames, schema)]
        )

    # -- csv
    def _open_csv(self):
        try:
            head_line, self._csv_offset, self._header_line = _csv_header(self.path)
        except OSError as exc:
            raise StelltempError(f"{self.path}: cannot read ({exc.strerror or 'read error'})") from None
        try:
            text = head_line.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise StelltempError(
                f"{self.path}: line {self._header_line}: the header is not UTF-8 text "
                f"(byte 0x{head_line[exc.start]:02x} at column {exc.start + 1})"
            ) from None
        try:
            header = next(csv.reader([text]), [])
        except csv.Error:
            raise StelltempError(f"{self.path}: line {self._header_line}: the header line is not valid CSV") from None
        header = [h.strip() for h in header]
        if not any(header):
            raise StelltempError(f"{self.path}: no header line with column names")
        header = [h if h else f"col{i + 1}" for i, h in enumerate(header)]
        self.colnames = _dedupe(header, self.notes)
        try:
            with open(self.path, "rb") as fh:
                fh.seek(self._csv_offset)
                sample = fh.read(1 << 16)
        except OSError as exc:
            raise StelltempError(f"{self.path}: cannot read ({exc.strerror or 'read error'})") from None
        lines = max(1, len(_LINE_BREAK.findall(sample)))
        row_bytes = max(16, len(sample) // lines) if sample else 64
        self._block = int(min(256 << 20, max(1 << 20, row_bytes * self.chunk_rows)))
        self.schema = pa.schema([pa.field(n, pa.string()) for n in self.colnames])

    def _csv_stream(self, fh, bad):
        import pyarrow.csv as pcsv

        def on_bad_row(row):
            bad.append(row)
            return "skip"

        fh.seek(self._csv_offset)
        return pcsv.open_csv(
            io.BufferedReader(_MarkedUtf8(fh), 1 << 20),  # pyarrow decodes a malformed line's text itself
            # no read-ahead thread: a failure then never leaves a parser thread behind
            read_options=pcsv.ReadOptions(column_names=self.colnames, block_size=self._block, use_threads=False),
            parse_options=pcsv.ParseOptions(invalid_row_handler=on_bad_row),
            convert_options=pcsv.ConvertOptions(
                column_types={n: pa.binary() for n in self.colnames},  # bytes: decoded per cell below
                strings_can_be_null=False,
                quoted_strings_can_be_null=False,
            ),
        )

    def _csv_chunks(self):
        """CSV chunks as text; malformed lines kept as flagged rows (see `row_notes`)."""
        bad, done = [], 0
        lines = _PhysicalLines(self.path, self._csv_offset, self._header_line)
        self.malformed_lines = 0
        with open(self.path, "rb") as fh:
            try:
                stream = self._csv_stream(fh, bad)
                for batch in stream:
                    table, notes = _decode_text(pa.Table.from_batches([batch]), self.colnames)
                    if bad:
                        table, notes, bad[:] = self._insert_malformed(table, notes, bad, done, lines)
                    self._refuse_swallowed_lines(table, done, lines)
                    done += table.num_rows
                    self.row_notes = notes
                    yield table
            except pa.ArrowInvalid as exc:
                if not str(exc).startswith("Empty CSV file"):  # a header and no data: no rows
                    raise StelltempError(f"{self.path}: unreadable CSV ({_first_line(exc)})") from None
        if bad:  # rows reported after the last block (never seen, kept for safety)
            table, notes, _ = self._insert_malformed(self.schema.empty_table(), [], bad, done, lines, last=True)
            self.row_notes = notes
            yield table
        note = (f"{self.malformed_lines} CSV line(s) with a wrong number of fields kept as flagged rows "
                "(their values are not used; see input_notes)")
        if self.malformed_lines and note not in self.notes:  # the reader may be iterated twice
            self.notes.append(note)

    def _insert_malformed(self, table, notes, bad, done, lines, last=False):
        """Put each malformed line back at its place as a row of text cells, flagged.

        pyarrow numbers rows from 1 over the data (blank lines not counted),
        good and malformed alike, so ``row.number - 1`` is the row's place.
        The parser reports the malformed lines of the block after this one
        too (it reads one block ahead): those past this table's last row are
        returned, for the next table, not appended here out of order (with
        ``last``, after the last block, every one is placed).
        Returns the table, its row notes and the malformed rows left for later.
        """
        import bisect

        pieces, out_notes, at, placed, later = [], [], 0, [], []
        rows = sorted(bad, key=lambda r: r.number)
        for k, row in enumerate(rows):
            if not last and row.number - 1 - done - len(placed) > table.num_rows:
                later = rows[k:]
                break
            line = lines.line_of(row.number)
            if "\n" in row.text or "\r" in row.text:
                raise StelltempError(
                    f"{self.path}: line {line}: a quoted field opened here runs over "
                    f"{row.text.count(chr(10)) + 1} lines (an unclosed quote?); the file's structure "
                    "cannot be trusted, so nothing was computed"
                )
            orig = min(max(row.number - 1 - done - len(placed), at), table.num_rows)
            if orig > at:
                pieces.append(table.slice(at, orig - at))
            pieces.append(_text_row(row.text, self.colnames))
            out_notes.append((orig + len(placed), f"line {line}: {row.actual_columns} field(s) for "
                              f"{row.expected_columns} columns, values not used", True))
            placed.append(orig)
            at = orig
            self.malformed_lines += 1
        if at < table.num_rows:
            pieces.append(table.slice(at))
        for i, text, drop in notes:
            out_notes.append((i + bisect.bisect_right(placed, i), text, drop))
        merged = pa.concat_tables([p.cast(self.schema) for p in pieces]) if pieces else self.schema.empty_table()
        return merged, sorted(out_notes), later

    def _refuse_swallowed_lines(self, table, done, lines):
        """A cell holding a line break and a comma is an unclosed quote that swallowed lines."""
        for name in table.column_names:
            hit = pc.and_(pc.match_substring_regex(table[name], "[\r\n]"), pc.match_substring(table[name], ","))
            if pc.any(hit).as_py():
                row = int(np.flatnonzero(np.asarray(pc.fill_null(hit, False)))[0])
                raise StelltempError(
                    f"{self.path}: line {lines.line_of(done + row + 1)}, column '{name}': a quoted cell runs "
                    "over several lines and holds commas (an unclosed quote?); the file's structure cannot "
                    "be trusted, so nothing was computed"
                )

    # -- astropy formats
    def _open_astropy(self):
        import warnings

        from astropy.table import Table

        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # unit-parsing chatter of foreign files
                self._table = Table.read(self.path, format=_ASTROPY_FORMAT[self.fmt])
        except Exception as exc:  # astropy raises many types for malformed files
            raise StelltempError(f"{self.path}: not a readable {self.fmt.upper()} table "
                                 f"({_astropy_reason(exc, self.path, self.fmt)})") from None
        if self.fmt == "ecsv":
            _refuse_multiline_cells(self._table, self.path)
        if self.fmt == "votable":
            self._table.meta.update(_votable_infos(self.path))
            if "tool_name" in self._table.meta:  # the description held our run record, now unpacked
                self._table.meta.pop("description", None)
        self.num_rows = len(self._table)
        self.colnames = list(self._table.colnames)
        self.schema = None

    def __iter__(self):
        """Yield chunks: pyarrow Tables (Parquet, CSV) or astropy Tables (others)."""
        if self.fmt == "parquet":
            try:
                for batch in self._pq.iter_batches(batch_size=self.chunk_rows):
                    self.row_notes = []
                    yield pa.Table.from_batches([batch]).rename_columns(self.colnames)
            except (pa.ArrowInvalid, OSError) as exc:
                raise StelltempError(f"{self.path}: damaged Parquet data ({_first_line(exc)})") from None
        elif self.fmt == "csv":
            yield from self._csv_chunks()
        else:
            for start in range(0, len(self._table), self.chunk_rows):
                self.row_notes = []
                yield self._table[start : start + self.chunk_rows]

    def vector_columns(self):
        """Names of columns holding several values per row (FITS vectors, Parquet lists)."""
        if self.fmt == "csv":
            return []
        if self.fmt == "parquet":
            return [n for n, f in zip(self.colnames, self.schema) if pa.types.is_nested(f.type)]
        return [n for n in self.colnames if getattr(self._table[n], "ndim", 1) > 1]

    def empty_chunk(self):
        """A zero-row chunk with the input's columns (for schemas of empty inputs)."""
        if self.fmt in STREAMING:
            return self.schema.empty_table()
        return self._table[:0]


def _votable_infos(path):
    """INFO name/value pairs of the first VOTable table (where runs keep their record)."""
    import warnings

    from astropy.io.votable import parse

    from stelltemp.catalog.describe import record_from_text

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        table = parse(str(path)).get_first_table()
    infos = {info.name: info.value for info in table.infos}
    typed = record_from_text(table.description or "")  # our outputs: the record with its types
    return {**infos, **typed} if typed else infos


def _dedupe(names, notes):
    """Rename repeated column names ``x`` -> ``x.dup2``, ``x.dup3``… and note it."""
    seen, out = {}, []
    taken = set(names)
    for name in names:
        if name not in seen:
            seen[name] = 1
            out.append(name)
            continue
        k = seen[name]
        while True:
            k += 1
            new = f"{name}.dup{k}"  # cannot look like a passband key
            if new not in taken:
                break
        seen[name] = k
        taken.add(new)
        out.append(new)
        notes.append(f"repeated column name '{name}' renamed '{new}'")
    return out


def _first_line(exc):
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


def _astropy_reason(exc, path, fmt):
    """Why astropy could not read a table, for people: the file's line where astropy counts data lines.

    Python's own errors (a header whose structure is not the format's) are
    not shown raw.
    """
    from stelltemp.errors import decode_position

    if isinstance(exc, UnicodeDecodeError):
        try:
            Path(path).read_bytes().decode("utf-8")
        except UnicodeDecodeError as whole:  # where in the file, not in astropy's buffer
            where, byte = decode_position(whole)
            return f"not UTF-8 text: byte {byte} at {where}"
        return "not UTF-8 text"
    if not isinstance(exc, ValueError):  # TypeError, KeyError ... from a damaged header
        return "its header is damaged" if fmt in ("ecsv", "csv") else "its structure is damaged"
    text = _first_line(exc)
    found = re.search(r"at data line (\d+)", text)
    if found and fmt in ("ecsv", "csv"):
        text = text.replace(found.group(0), f"at line {_text_data_line(path, int(found.group(1)))}")
    return text


def _refuse_multiline_cells(table, path):
    """A text cell holding a line break: an unclosed quote swallowed the lines after it (rows lost)."""
    for name in table.colnames:
        col = table[name]
        if getattr(col, "ndim", 1) != 1 or col.dtype.kind not in "US":
            continue
        text = np.asarray(col).astype(str)
        bad = (np.char.find(text, "\n") >= 0) | (np.char.find(text, "\r") >= 0)
        if bad.any():
            row = int(np.flatnonzero(bad)[0])
            raise StelltempError(
                f"{path}: line {_text_data_line(path, row)}, column '{name}': a quoted cell runs over several "
                "lines (an unclosed quote?); the file's structure cannot be trusted, so nothing was computed")


def _text_data_line(path, index):
    """File line (1-based) of data line `index` (0-based) of a text table: '#' lines, blanks and the names skipped."""
    seen = -2  # the first line that is not a comment holds the column names
    with open(path, "rb") as fh:
        for number, line in enumerate(fh, 1):
            if line.strip() and not line.lstrip().startswith(b"#"):
                seen += 1
                if seen == index:
                    return number
    return "?"


_LINE_BREAK = re.compile(rb"\r\n|\r|\n")


def _csv_header(path, limit=16 << 20):
    """(header bytes, byte offset of the first data line, header line number) of a CSV file.

    Leading blank lines and ``#`` comment lines are skipped.  Line breaks may
    be LF, CRLF or CR alone.
    """
    with open(path, "rb") as fh:
        buf = fh.read(1 << 20)
        pos, line_no = 0, 0
        while True:
            m = _LINE_BREAK.search(buf, pos)
            while (m is None or (m.group() == b"\r" and m.end() == len(buf))) and len(buf) < limit:
                more = fh.read(1 << 20)
                if not more:
                    break
                buf += more
                m = _LINE_BREAK.search(buf, pos)
            end = m.start() if m else len(buf)
            nxt = m.end() if m else len(buf)
            line = buf[pos:end]
            line_no += 1
            if m is None and len(buf) >= limit:
                raise StelltempError(f"{path}: line {line_no}: no line break in the first "
                                     f"{limit >> 20} MiB; not a CSV table")
            if line.strip() and not line.lstrip().startswith(b"#"):
                return line, nxt, line_no
            if m is None:
                return b"", nxt, line_no
            pos = nxt


class _PhysicalLines:
    """Line number in the file of a CSV data row (1-based, blank lines not counted as rows).

    Only used to name lines in notes and errors; scans the file lazily, once.
    """

    def __init__(self, path, offset, header_line):
        self.path, self.offset, self.header_line = path, offset, header_line
        self._rows = None
        self._seen = {}

    def line_of(self, number):
        if number in self._seen:
            return self._seen[number]
        if self._rows is None:
            self._rows = self._scan()
        for n, line in self._rows:
            self._seen[n] = line
            if n >= number:
                break
        return self._seen.get(number, f"{self.header_line}+{number}")

    def _scan(self):
        import io

        with open(self.path, "rb") as fh:
            fh.seek(self.offset)
            text = io.TextIOWrapper(fh, encoding="utf-8", errors="replace", newline="")
            reader = csv.reader(text)
            n, start = 0, self.header_line + 1
            try:
                for fields in reader:
                    if fields:
                        n += 1
                        yield n, start
                    start = self.header_line + 1 + reader.line_num
            except csv.Error:
                return


#: stands for a byte that is not UTF-8 text while pyarrow parses (a noncharacter: never in real text)
_NOT_UTF8 = "\U0010fffe"
codecs.register_error("stelltemp-not-utf8", lambda exc: (_NOT_UTF8, exc.end))


class _MarkedUtf8(io.RawIOBase):
    """A binary file's bytes from its position on, each byte that is not UTF-8 text replaced by `_NOT_UTF8`.

    pyarrow decodes the text of a malformed line strictly before handing it
    to our handler; an undecodable byte there would abort the parse.  Cells
    keep the mark until `_decode_text` turns it into U+FFFD with a row note.
    """

    def __init__(self, fh):
        self._fh, self._buf, self._at = fh, b"", 0
        self._decoder = codecs.getincrementaldecoder("utf-8")("stelltemp-not-utf8")

    def readable(self):
        return True

    def readinto(self, b):
        while self._at >= len(self._buf):
            block = self._fh.read(1 << 20)
            if block.isascii() and not self._decoder.getstate()[0]:
                self._buf = block  # the common case: plain ASCII passes untouched
            else:
                self._buf = self._decoder.decode(block, final=not block).encode("utf-8")
            self._at = 0
            if not block:
                break
        n = min(len(b), len(self._buf) - self._at)
        b[:n] = self._buf[self._at:self._at + n]
        self._at += n
        return n


def _decode_text(table, names):
    """Binary CSV columns as UTF-8 text; undecodable bytes become U+FFFD with a row note."""
    cols, notes = [], []
    for name, col in zip(names, table.columns):
        col = col.cast(pa.string())  # valid: `_MarkedUtf8` replaced every undecodable byte
        hit = pc.fill_null(pc.match_substring(col, _NOT_UTF8), False)
        if pc.any(hit).as_py():
            notes += [(int(i), f"{name}: bytes that are not UTF-8 text replaced by U+FFFD", False)
                      for i in np.flatnonzero(np.asarray(hit))]
            col = pc.replace_substring(col, _NOT_UTF8, "\ufffd")
        cols.append(col)
    return pa.Table.from_arrays(cols, names=names), sorted(notes)


def _text_row(text, names):
    """One malformed CSV line as a row of text cells (missing cells empty, extra cells dropped)."""
    text = text.replace(_NOT_UTF8, "\ufffd")
    try:
        fields = next(csv.reader([text]), [])
    except csv.Error:
        fields = text.split(",")
    fields = (fields + [""] * len(names))[: len(names)]
    return pa.table({n: pa.array([f], pa.string()) for n, f in zip(names, fields)})


def read_table(path, max_rows=None):
    """Read a table file into an astropy Table, with its units and metadata (small files; see `ChunkReader`).

    ``max_rows`` keeps only the first rows (read in one chunk of that size).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from astropy.table import Table
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "stars.ecsv"
    >>> _ = write_table(Table({"V_JC": [10.0, 11.0]}), path)
    >>> list(read_table(path)["V_JC"])
    [np.float64(10.0), np.float64(11.0)]

    """
    reader = ChunkReader(path, chunk_rows=max_rows or 1 << 62)
    chunks = list(reader) if max_rows is None else [c for c in [next(iter(reader), None)] if c is not None]
    if reader.fmt not in STREAMING:
        out = chunks[0] if chunks else reader.empty_chunk()
        return out[:max_rows] if max_rows is not None else out
    table = pa.concat_tables(chunks) if chunks else reader.empty_chunk()
    if reader.fmt == "csv":
        table = apply_types(table, narrowest_types([table], table.column_names))
    out = arrow_to_astropy(table)
    if reader.fmt == "parquet":
        raw = reader._pq.schema_arrow.metadata or {}
        if b"table_meta_yaml" in raw:
            _apply_header(out, _header_info(raw[b"table_meta_yaml"].decode("utf-8", "replace").splitlines()))
        if b"stelltemp" in raw:
            out.meta.update(json.loads(raw[b"stelltemp"]))
    elif reader.fmt == "csv":
        _apply_csv_header(path, out)
    return out


def csv_header_info(path):
    """Column attributes and table metadata of an ECSV header above a CSV table (None without one).

    Earlier versions wrote CSV so; the current one writes plain CSV and a sidecar.

    Returns
    -------
    (dict, dict) or None
        Column name -> {"unit", "description"} and the table metadata.
    """
    lines = []
    with open(path, encoding="utf-8", errors="replace") as fh:
        first = fh.readline()
        if not first.startswith("# %ECSV"):
            return None
        for line in fh:
            if not line.startswith("#"):
                break
            line = line.rstrip("\r\n")
            lines.append(line[2:] if line.startswith("# ") else line[1:])
    return _header_info(lines)


def _header_info(lines):
    """(column attributes, metadata) of astropy's YAML header lines; None if they do not parse."""
    from astropy.table import meta as astropy_meta

    try:
        header = astropy_meta.get_header_from_yaml(lines)
    except Exception:  # a damaged header: the data are still readable
        return None
    cols = {c["name"]: {k: c[k] for k in ("unit", "description") if k in c} for c in header.get("datatype", [])}
    return cols, dict(header.get("meta", {}))


def csv_metadata(path):
    """Column attributes and run record of a CSV table, from its sidecar (None without one).

    Looks, in order, for ``<stem>.meta.json`` (`csv_sidecar`), an ECSV
    header as ``#`` lines at the top of the file and ``<name>.meta.json``
    (both written by earlier versions).

    Returns
    -------
    (dict, dict) or None
        Column name -> {"unit", "description"} and the table metadata.
    """
    side = csv_sidecar_path(path)
    if side.is_file():
        try:
            record = json.loads(side.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise StelltempError(f"{side}: not a readable metadata file ({_first_line(exc)})") from None
        if isinstance(record, dict) and record.get("layout") == SIDECAR_LAYOUT:
            cols = {n: {k: a[k] for k in ("unit", "description") if a.get(k)}
                    for n, a in record.get("columns", {}).items()}
            return cols, dict(record.get("meta", {}))
    info = csv_header_info(path)
    old = Path(str(path) + SIDECAR_SUFFIX)
    if info is None and old.is_file():
        record = json.loads(old.read_text())
        info = ({n: {"unit": v} for n, v in record.get("units", {}).items()}, record.get("run", {}))
    return info


def _apply_csv_header(path, table):
    """Units, descriptions and metadata of a CSV's sidecar (`csv_metadata`) onto ``table``."""
    _apply_header(table, csv_metadata(path))


def _apply_header(table, info):
    if info is None:
        return
    cols, meta = info
    table.meta.update(meta)
    for name, attrs in cols.items():
        if name in table.colnames:
            if attrs.get("unit") and table[name].dtype.kind in "fiu":
                table[name].unit = attrs["unit"]
            if attrs.get("description"):
                table[name].info.description = attrs["description"]


# --------------------------------------------------------------------- CSV text -> types
_INT_RE = r"^[+-]?\d+$"
_FLOAT_RE = r"^[+-]?(?:\d+\.?\d*|\.\d+)(?:e[+-]?\d+)?$|^[+-]?(?:inf|infinity|nan)$"


def narrowest_types(chunks, names, notes=None):
    """Narrowest arrow type holding every value of text columns over all `chunks`.

    Parameters
    ----------
    chunks : iterable of pyarrow Table
        All-string chunks (CSV as read).
    names : list of str
        Columns to type.

    notes : list, optional
        Receives a note for each column kept as text because its integers
        do not fit in 64 bits (Parquet, FITS and VOTable cannot hold them).

    Returns
    -------
    dict of str -> pyarrow.DataType
        ``int64`` if every non-empty cell is an integer within the 64-bit
        range, ``float64`` if every non-empty cell is a number, else
        ``string``.  All-empty columns stay text.
    """
    state = {n: "empty" for n in names}
    order = ["empty", "int", "float", "string"]
    for chunk in chunks:
        for n in names:
            if state[n] == "string":
                continue
            low = pc.utf8_lower(pc.utf8_trim_whitespace(chunk[n]))
            filled = pc.not_equal(low, "")
            if not pc.any(filled).as_py():
                continue
            need = "int"
            if state[n] in ("empty", "int") and _too_big_for_int64(low, filled):
                state[n] = "string"
                if notes is not None:
                    notes.append(f"column '{n}': integers beyond the 64-bit range kept as text")
                continue
            if not pc.all(pc.or_(pc.invert(filled), pc.match_substring_regex(low, _INT_RE))).as_py():
                need = "float"
                if not pc.all(pc.or_(pc.invert(filled), pc.match_substring_regex(low, _FLOAT_RE))).as_py():
                    need = "string"
            if order.index(need) > order.index(state[n]):
                state[n] = need
    to_type = {"empty": pa.string(), "int": pa.int64(), "float": pa.float64(), "string": pa.string()}
    return {n: to_type[state[n]] for n in names}


def _too_big_for_int64(low, filled):
    """True when an integer cell of a text column lies outside the int64 range."""
    ints = pc.and_(filled, pc.match_substring_regex(low, _INT_RE))
    long_ = pc.and_(ints, pc.greater(pc.utf8_length(pc.utf8_ltrim(low, "+-0")), 18))
    if not pc.any(long_).as_py():
        return False
    try:
        pc.cast(pc.filter(low, long_), pa.int64())
    except (pa.ArrowInvalid, OverflowError):
        return True
    return False


def apply_types(chunk, types):
    """Cast text columns of `chunk` to `types` (empty cell -> null)."""
    cols = []
    for name in chunk.column_names:
        col = chunk[name]
        typ = types.get(name, pa.string())
        if typ != pa.string():
            s = pc.utf8_trim_whitespace(col)
            s = pc.if_else(pc.equal(s, ""), pa.scalar(None, pa.string()), s)
            col = pc.cast(s, typ)
        cols.append(col)
    return pa.Table.from_arrays(cols, names=chunk.column_names)


# --------------------------------------------------------------------- atomic output
def check_output(path, overwrite=False, input_path=None):
    """Refuse to replace an existing output (or the input) before any work starts."""
    path = Path(path)
    table_format(path)
    if input_path is not None:
        try:
            same = Path(input_path).resolve() == path.resolve()
        except OSError:
            same = False
        if same:
            raise StelltempError(f"{path}: the output would replace the input")
    check_output_path(path, overwrite)
    if table_format(path) == "csv":
        check_output_path(csv_sidecar_path(path), overwrite, what="metadata file")


# --------------------------------------------------------------------- sinks
class Sink:
    """Receives output chunks and writes them to a temporary file.

    Use `open_sink`; call `write` per chunk and `close` once.
    """

    def write(self, arrow_chunk=None, astropy_chunk=None):  # pragma: no cover - interface
        raise NotImplementedError

    def close(self):  # pragma: no cover - interface
        raise NotImplementedError

    def abort(self):
        """Release file handles after a failure (the temporary file is removed by the caller)."""
        writer = getattr(self, "writer", None)
        if writer is not None:
            try:
                writer.close()
            except Exception:  # the run already failed; keep its error
                pass
            self.writer = None


class ParquetSink(Sink):
    """Streams chunks to Parquet; the metadata goes into the file's footer at close.

    The footer then holds astropy's ``table_meta_yaml`` (units, descriptions,
    the run record), the text-column lengths astropy's reader expects
    (``table::len::<name>``, known only once every chunk is written) and the
    record as JSON under ``stelltemp``.  The arrow schema is not stored
    separately, so these footer entries are the schema metadata every reader
    sees.
    """

    def __init__(self, tmp, run_meta):
        self.tmp, self.run_meta, self.writer, self.schema = tmp, run_meta, None, None
        self.text_lengths = {}
        self.header = None

    def write(self, chunk):
        import pyarrow.parquet as pq

        if self.writer is None:
            self.header = astropy_header(chunk.schema, self.run_meta)
            self.schema = chunk.schema.remove_metadata()
            # dictionary pages only for text: on float columns they cost time and save nothing
            text = [f.name for f in self.schema if _is_text(f.type)]
            self.text_lengths = dict.fromkeys(text, 1)
            self.writer = pq.ParquetWriter(self.tmp, self.schema, use_dictionary=text or False, store_schema=False)
        chunk = chunk.cast(self.schema)
        for name in self.text_lengths:
            longest = pc.max(pc.utf8_length(chunk[name])).as_py() if chunk.num_rows else None
            self.text_lengths[name] = max(self.text_lengths[name], longest or 0)
        self.writer.write_table(chunk)

    def close(self):
        if self.writer is not None:
            footer = {"stelltemp": json.dumps(self.run_meta), "table_meta_yaml": self.header}
            footer.update({f"table::len::{n}": str(k) for n, k in self.text_lengths.items()})
            self.writer.add_key_value_metadata(footer)
            self.writer.close()


def _is_text(typ):
    return pa.types.is_string(typ) or pa.types.is_large_string(typ)


def astropy_header(schema, run_meta):
    """astropy's YAML table header (as kept in Parquet's ``table_meta_yaml``) for an arrow schema and a run record.

    The text is astropy's (`astropy.table.meta.get_yaml_from_table`), made by
    `_plain_header_yaml` when the header holds only plain values (the run
    record and column attributes always do): astropy's own dumper imports
    ``astropy.io.misc.yaml`` and with it ``astropy.coordinates``, a third of
    a second of a short run.
    """
    from collections import OrderedDict

    from astropy.table import meta as astropy_meta

    # the zero-row table from typed empty arrays: ``schema.empty_table()`` imports pandas
    empty = arrow_to_astropy(pa.Table.from_arrays([pa.nulls(0, f.type) for f in schema], schema=schema))
    empty.meta.update(run_meta)
    header = {"datatype": [astropy_meta._get_col_attributes(col) for col in empty.columns.values()]}
    if empty.meta:
        header["meta"] = OrderedDict(empty.meta)
    if not _plain_yaml_value(header):
        return "\n".join(astropy_meta.get_yaml_from_table(empty))
    return _plain_header_yaml(header)


#: scalar types the light writer represents as astropy's YAML dumper does (astropy.io.misc.yaml.AstropyDumper)
_PLAIN_YAML_SCALARS = frozenset((str, bool, int, float, type(None), np.bool_, np.str_, np.intc, np.intp, np.int8,
                                 np.int16, np.int32, np.int64, np.uint8, np.uint16, np.uint32, np.uint64,
                                 np.float16, np.float32, np.float64))


def _plain_yaml_value(value):
    """True if ``value`` holds only dicts, lists, tuples and `_PLAIN_YAML_SCALARS` (no units, arrays, times…)."""
    from collections import OrderedDict

    from astropy.table.meta import ColumnDict

    if type(value) in (dict, OrderedDict, ColumnDict):
        return all(_plain_yaml_value(k) and _plain_yaml_value(v) for k, v in value.items())
    if type(value) in (list, tuple):
        return all(_plain_yaml_value(v) for v in value)
    return type(value) in _PLAIN_YAML_SCALARS


@functools.lru_cache(maxsize=1)
def _header_dumper():
    """A YAML dumper writing plain values exactly as astropy's table-header dumper does.

    Its methods and representers are those of ``AstropyDumper`` (floats by
    ``str``, numpy scalars, tuples) and of the ``TableDumper`` inside
    `astropy.table.meta.get_yaml_from_header` (ordered mappings as
    ``!!omap``, column keys in their own order), astropy 8 (BSD licence);
    a test compares the two on many headers.
    """
    import yaml
    from collections import OrderedDict

    from astropy.table import meta as astropy_meta

    class HeaderDumper(yaml.SafeDumper):
        def _represent_tuple(self, data):
            return self.represent_sequence("tag:yaml.org,2002:python/tuple", data)

        def represent_float(self, data):
            if data != data or (data == 0.0 and data == 1.0):
                value = ".nan"
            elif data == self.inf_value:
                value = ".inf"
            elif data == -self.inf_value:
                value = "-.inf"
            else:
                value = str(data).lower()
                if "." not in value and "e" in value:  # 1e17 is no YAML float; 1.0e17 is
                    value = value.replace("e", ".0e", 1)
            return self.represent_scalar("tag:yaml.org,2002:float", value)

        def represent_mapping(self, tag, mapping, flow_style=None):
            value = []
            node = yaml.MappingNode(tag, value, flow_style=flow_style)
            if self.alias_key is not None:
                self.represented_objects[self.alias_key] = node
            best_style = True
            if hasattr(mapping, "items"):
                mapping = mapping.items()
                if hasattr(mapping, "sort"):  # astropy's ColumnOrderList: column keys in their own order
                    mapping.sort()
                else:
                    mapping = list(mapping)
                    try:
                        mapping = sorted(mapping)
                    except TypeError:
                        pass
            for item_key, item_value in mapping:
                node_key = self.represent_data(item_key)
                node_value = self.represent_data(item_value)
                if not (isinstance(node_key, yaml.ScalarNode) and not node_key.style):
                    best_style = False
                if not (isinstance(node_value, yaml.ScalarNode) and not node_value.style):
                    best_style = False
                value.append((node_key, node_value))
            if flow_style is None:
                node.flow_style = self.default_flow_style if self.default_flow_style is not None else best_style
            return node

    HeaderDumper.add_representer(tuple, HeaderDumper._represent_tuple)
    HeaderDumper.add_representer(np.bool_, yaml.representer.SafeRepresenter.represent_bool)
    HeaderDumper.add_representer(np.str_, yaml.representer.SafeRepresenter.represent_str)
    for np_type in (np.intc, np.intp, np.int8, np.int16, np.int32, np.int64,
                    np.uint8, np.uint16, np.uint32, np.uint64):
        HeaderDumper.add_representer(np_type, yaml.representer.SafeRepresenter.represent_int)
    for np_type in (np.float16, np.float32, np.float64):
        HeaderDumper.add_representer(np_type, HeaderDumper.represent_float)
    HeaderDumper.add_representer(OrderedDict, astropy_meta._repr_odict)
    HeaderDumper.add_representer(astropy_meta.ColumnDict, astropy_meta._repr_column_dict)
    return HeaderDumper


def _plain_header_yaml(header):
    """The YAML text astropy writes for a header of plain values (see `_header_dumper`)."""
    import yaml

    text = yaml.dump(header, default_flow_style=None, Dumper=_header_dumper(), width=130)
    return "\n".join(text.splitlines())


class CsvSink(Sink):
    """Appends chunks to a plain CSV file; its metadata goes to the sidecar at `close`.

    Cells are quoted only when they contain a comma, quote or line break, so
    text columns read from a CSV are written back exactly as read.  Numbers
    use the shortest text that reads back to the same float64; nulls are empty.
    The first line holds the column names, nothing precedes it.
    """

    def __init__(self, tmp, run_meta, sidecar_tmp=None, name="table.csv"):
        self.tmp, self.run_meta, self.writer, self.schema = tmp, run_meta, None, None
        self.sidecar_tmp, self.name = sidecar_tmp, name
        #: column -> arrow type recorded in the sidecar for text columns whose every cell parses as
        #: that type (the text itself is written as read)
        self.declared_types = {}

    def write(self, chunk):
        if self.writer is None:
            self.schema = chunk.schema
            self.writer = open(self.tmp, "wb")
            self.writer.write((_csv_names_line(self.schema.names) + "\n").encode())
        chunk = chunk.cast(self.schema)
        if chunk.num_rows:
            self.writer.write(_csv_text(chunk))

    def close(self):
        if self.writer is not None:
            self.writer.close()
        if self.sidecar_tmp is not None:
            declared = None
            if self.schema is not None:
                declared = pa.schema([f.with_type(self.declared_types.get(f.name, f.type)) if _is_text(f.type)
                                      else f for f in self.schema])
            text = json.dumps(csv_sidecar(declared, self.run_meta, self.name), indent=1, ensure_ascii=False)
            Path(self.sidecar_tmp).write_text(text + "\n", encoding="utf-8")


def _csv_names_line(names):
    """The header line of column names, quoted only where a name needs it."""
    import io

    buf = io.StringIO()
    csv.writer(buf, lineterminator="").writerow(names)
    return buf.getvalue()


def _datatype(typ):
    """A short data-type name of an arrow type (ECSV's names where they exist)."""
    if _is_text(typ):
        return "string"
    if pa.types.is_boolean(typ):
        return "bool"
    if pa.types.is_integer(typ) or pa.types.is_floating(typ):
        return str(np.dtype(typ.to_pandas_dtype()))
    return str(typ)


def csv_sidecar(schema, run_meta, name):
    """The content of a CSV table's sidecar (``<stem>.meta.json``) as a dict.

    Parameters
    ----------
    schema : pyarrow.Schema or None
        The table's columns (units and descriptions in the field metadata).
    run_meta : dict
        The run record (layout in :mod:`stelltemp.catalog.describe`).
    name : str
        File name of the CSV table the sidecar describes.

    Returns
    -------
    dict
        ``layout`` (`SIDECAR_LAYOUT`), ``table`` (the CSV file's name),
        ``columns`` (name -> ``datatype``, and ``unit``, ``description``
        where known; in the file's column order) and ``meta`` (the run record).

    Examples
    --------
    >>> import pyarrow as pa
    >>> field = pa.field("t_bb", pa.float64(), metadata={"unit": "K"})
    >>> side = csv_sidecar(pa.schema([field]), {"R_V": 3.1}, "out.csv")
    >>> side["columns"], side["meta"]
    ({'t_bb': {'datatype': 'float64', 'unit': 'K'}}, {'R_V': 3.1})
    """
    columns = {}
    for field in schema or ():
        attrs = {"datatype": _datatype(field.type)}
        unit, text = unit_of_field(field), description_of_field(field)
        if unit:
            attrs["unit"] = unit
        if text:
            attrs["description"] = text
        columns[field.name] = attrs
    return {"layout": SIDECAR_LAYOUT, "table": name, "columns": columns, "meta": dict(run_meta)}


def _csv_text(chunk):
    """CSV lines (bytes) of a pyarrow Table, built column-wise in Arrow."""
    cells, texts = [], []
    for field, col in zip(chunk.schema, chunk.columns):
        if pa.types.is_string(field.type) or pa.types.is_large_string(field.type):
            text = col
            texts.append(len(cells))
        else:
            try:
                text = pc.cast(col, pa.string())
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError):  # lists, structs...
                text = pa.array([None if v is None else json.dumps(v, default=str) for v in col.to_pylist()],
                                type=pa.string())
                texts.append(len(cells))
        cells.append(pc.fill_null(text, ""))
    line = _join(cells)
    if texts and not _plain_lines(line, len(cells)):
        for i in texts:  # some text cell holds a comma, quote or line break: quote those cells
            text = cells[i]
            need = pc.match_substring_regex(text, '[",\r\n]')
            quoted = pc.binary_join_element_wise('"', pc.replace_substring(text, '"', '""'), '"', "")
            cells[i] = pc.if_else(need, quoted, text)
        line = _join(cells)
    line = pc.binary_join_element_wise(line, "", "\n")
    if isinstance(line, pa.ChunkedArray):
        line = line.combine_chunks()
    line = line.cast(pa.large_string())
    offsets = np.frombuffer(line.buffers()[1], dtype=np.int64)[line.offset : line.offset + len(line) + 1]
    return memoryview(line.buffers()[2])[offsets[0] : offsets[-1]]


def _join(cells):
    return pc.binary_join_element_wise(*cells, ",") if len(cells) > 1 else cells[0]


def _plain_lines(line, ncols):
    """True when every joined line has exactly ncols - 1 commas and no quote or line break."""
    commas_ok = pc.all(pc.equal(pc.count_substring(line, ","), ncols - 1)).as_py() in (True, None)
    return commas_ok and not any(
        pc.any(pc.match_substring(line, ch)).as_py() for ch in ('"', "\n", "\r")
    )


class AstropySink(Sink):
    """Accumulates chunks in memory; writes at `close` (ECSV, FITS, VOTable)."""

    def __init__(self, tmp, fmt, run_meta):
        self.tmp, self.fmt, self.run_meta, self.parts = tmp, fmt, run_meta, []

    def write(self, chunk):
        self.parts.append(chunk)

    def close(self):
        import warnings

        from astropy.table import vstack

        if not self.parts:
            raise StelltempError("nothing to write")
        table = vstack(self.parts, metadata_conflicts="silent") if len(self.parts) > 1 else self.parts[0]
        table = table.copy(copy_data=False)  # the caller's table stays as it was
        self.notes = storable_columns(table, self.fmt)
        if self.notes:
            self.run_meta = {**self.run_meta, "conversions": "; ".join(self.notes)}
        record = {**table.meta, **self.run_meta}
        table.meta.clear()
        table.meta.update(record)
        with warnings.catch_warnings():
            # writing long keys as HIERARCH cards is intended: they keep their case on reading
            warnings.simplefilter("ignore")
            if self.fmt == "fits":
                for key, val in record.items():
                    if isinstance(val, str):  # FITS header text is ASCII
                        table.meta[key] = val.encode("ascii", "backslashreplace").decode("ascii")
                table.write(self.tmp, format="fits", overwrite=True)
            elif self.fmt == "votable":
                _write_votable(table, self.tmp, record)
            else:
                table.write(self.tmp, format="ascii.ecsv", overwrite=True)


def vounit_column(col):
    """A column whose unit VOUnit accepts: erg s⁻¹ cm⁻² becomes the equal mW m⁻²; others kept.

    A unit VOUnit cannot express at all is dropped and named in the description.
    """
    import warnings

    import astropy.units as u

    unit = getattr(col, "unit", None)
    if unit is None:
        return col
    flux = u.erg / u.s / u.cm**2
    if unit.is_equivalent(flux) and "erg" in str(unit):
        factor = (1 * unit).to_value(u.mW / u.m**2)
        new = col * factor if factor != 1 else col.copy()
        new.unit = u.mW / u.m**2
        new.info.description = col.info.description
        return new
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            unit.to_string("vounit")
    except (ValueError, UserWarning):
        new = col.copy()
        new.unit = None
        new.info.description = f"{col.info.description or col.info.name} [{unit}]"
        return new
    return col


def storable_columns(table, fmt):
    """Convert, in place, the columns `fmt` cannot hold; return one note per converted column.

    ============================  ==========================================
    column                        written as
    ============================  ==========================================
    lists, Python objects         JSON text (all accumulated formats)
    unsigned integers (VOTable)   int64, or text beyond its range
    date/time values              ISO 8601 text (FITS, VOTable)
    non-ASCII text (FITS only)    ASCII with backslash escapes (``\\xc9``;
                                  FITS text is ASCII, FITS standard 4.0)
    non-ASCII column names        the same escapes (FITS only)
    ============================  ==========================================
    """
    from astropy.table import Column, MaskedColumn

    notes = []
    for name in table.colnames:
        col = table[name]
        kind = col.dtype.kind
        mask = np.ma.getmaskarray(col) if hasattr(col, "mask") else None
        if kind == "O":
            values = [_json_cell(v) for v in col]
            why = "lists or objects written as JSON text"
        elif kind == "M" and fmt in ("fits", "votable"):
            values = np.datetime_as_string(np.asarray(col), unit="auto").tolist()
            why = "date/time values written as ISO 8601 text"
        elif kind == "U" and fmt == "fits" and any(not str(v).isascii() for v in np.asarray(col).ravel()):
            values = [str(v).encode("ascii", "backslashreplace").decode("ascii") for v in np.asarray(col)]
            why = "non-ASCII text written with backslash escapes (FITS text is ASCII)"
        elif kind == "u" and fmt == "votable":  # VOTable has no unsigned integers above 8 bits
            data = np.asarray(col)
            if col.dtype.itemsize == 1:
                continue
            if data.size and data.max() > np.iinfo(np.int64).max:
                values, why = [str(v) for v in data], "unsigned integers beyond the 64-bit signed range written as text"
            else:
                values, why = data.astype(np.int64), "unsigned integers written as signed 64-bit integers"
        else:
            continue
        if fmt == "fits" and kind != "u":
            values = [v.encode("ascii", "backslashreplace").decode("ascii") for v in values]
        new = (MaskedColumn(values, mask=mask, name=name) if mask is not None and mask.any()
               else Column(values, name=name))
        new.info.description = col.info.description
        table.replace_column(name, new)
        notes.append(f"column '{name}': {why}")
    if fmt == "fits":
        for name in table.colnames:
            if not name.isascii():
                new = name.encode("ascii", "backslashreplace").decode("ascii")
                table.rename_column(name, new)
                notes.append(f"column '{name}' named '{new}' (FITS column names are ASCII)")
    return notes


def _json_cell(value):
    if value is None or value is np.ma.masked:
        return ""
    if isinstance(value, np.ndarray):
        value = value.tolist()
    return json.dumps(value, default=str, ensure_ascii=False)


def _write_votable(table, path, run_meta):
    from astropy.io.votable import from_table
    from astropy.io.votable.tree import Info
    from astropy.table import Table

    from stelltemp.catalog.describe import record_to_text

    table = Table(table, copy=False)
    for name in table.colnames:
        table[name] = vounit_column(table[name])
    table.meta.clear()
    table.meta["description"] = record_to_text(run_meta)
    vot = from_table(table)
    for key, val in run_meta.items():
        vot.resources[0].tables[0].infos.append(Info(name=key, value=str(val)))
    vot.to_xml(str(path))


@contextlib.contextmanager
def open_sink(path, run_meta, overwrite=False):
    """Context manager yielding a sink that writes `path` atomically.

    Parameters
    ----------
    path : path-like
        Final output file; its extension selects the format.
    run_meta : dict
        Run record stored with the table: flat, text keys, plain values
        (layout in :mod:`stelltemp.catalog.describe`).
    overwrite : bool
        Allow replacing an existing file.

    The sink's ``kind`` attribute is ``"arrow"`` (feed pyarrow Tables) or
    ``"astropy"`` (feed astropy Tables).
    """
    path = Path(path)
    fmt = table_format(path)
    with contextlib.ExitStack() as stack:
        if fmt == "csv":  # the sidecar is renamed into place after the table
            side_tmp = stack.enter_context(atomic_path(csv_sidecar_path(path), overwrite))
        tmp = stack.enter_context(atomic_path(path, overwrite))
        if fmt == "parquet":
            sink = ParquetSink(tmp, run_meta)
        elif fmt == "csv":
            sink = CsvSink(tmp, run_meta, side_tmp, path.name)
        else:
            sink = AstropySink(tmp, fmt, run_meta)
        sink.kind = "arrow" if fmt in STREAMING else "astropy"
        sink.fmt = fmt
        try:
            yield sink
        except BaseException:
            sink.abort()
            raise
        sink.close()


def write_table(table, path, run_meta=None, overwrite=False):
    """Write an astropy Table to `path` (format by extension), atomically.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from astropy.table import Table
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "stars.csv"
    >>> _ = write_table(Table({"V_JC": [10.5]}), path)
    >>> path.read_text().splitlines()[-1]
    '10.5'

    """
    with open_sink(path, dict(run_meta or {}), overwrite=overwrite) as sink:
        sink.write(astropy_to_arrow(table) if sink.kind == "arrow" else table)

