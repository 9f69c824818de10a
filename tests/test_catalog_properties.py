"""Property-based checks: messy cells never crash a run and every bad row is flagged."""

import tempfile
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from stelltemp.catalog import run_catalogue
from stelltemp.catalog.tableio import ChunkReader, read_table
from stelltemp.engine import flags as F

try:
    from test_catalog_helpers import fake_estimate
except ImportError:  # tests run as a package
    from tests.test_catalog_helpers import fake_estimate

BANDS = ["B_JC", "V_JC", "Ic_JC"]
SETTINGS = settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])

good_mag = st.floats(min_value=-5, max_value=25, allow_nan=False)
odd_number = st.sampled_from([np.nan, np.inf, -np.inf, 1e300, -1e300, 1e-300, 41.0, -99.0, 0.0])
words = st.sampled_from(["abc", "", "NA", "null", " 12.5 ", "1,5", "--", "\"q\"", "inf", "9e999"])
cell = st.one_of(good_mag, good_mag, odd_number, words, st.none())


def _kind(v):
    """What the hygiene must make of one cell: ok, missing, bad (flag) or absurd (flag)."""
    if v is None:
        return "missing"
    if isinstance(v, str):
        s = v.strip().lower()
        if s in ("", "na", "null", "--"):
            return "missing"
        try:
            x = float(s)
        except ValueError:
            return "bad"
    else:
        x = float(v)
    if np.isnan(x):
        return "missing"
    if np.isinf(x):
        return "bad"
    return "absurd" if abs(x) > 40 else "ok"


rows = st.lists(st.tuples(*[cell] * len(BANDS)), min_size=0, max_size=25)


def _csv_text(data, header=BANDS):
    def fmt(v):
        if v is None:
            return ""
        text = v if isinstance(v, str) else repr(float(v))
        return '"' + text.replace('"', '""') + '"' if any(c in text for c in ',"') else text

    return ",".join(header) + "\n" + "".join(",".join(fmt(v) for v in r) + "\n" for r in data)


def _check_flags(data, out):
    assert len(out) == len(data)
    flags = np.asarray(out["flags"], dtype=np.int64)
    t = np.asarray(out["t_bb"], dtype=float)
    for i, row in enumerate(data):
        kinds = [_kind(v) for v in row]
        if "bad" in kinds:
            assert flags[i] & F.BAD_INPUT, (row, flags[i])
        if "absurd" in kinds:
            assert flags[i] & F.ABSURD_VALUE, (row, flags[i])
        if not any(k == "ok" for k in kinds):
            assert flags[i] & F.BAD_INPUT and not np.isfinite(t[i]), row
        if np.isfinite(t[i]):
            assert not flags[i] & F.BAD_INPUT or "bad" in kinds, row
        if flags[i] & (F.BAD_INPUT | F.ABSURD_VALUE) and ("bad" in kinds or "absurd" in kinds):
            assert out["input_notes"][i] != ""


@SETTINGS
@given(data=rows)
def test_messy_csv_never_crashes_and_bad_rows_are_flagged(data):
    with tempfile.TemporaryDirectory() as tmp:
        inp, out = Path(tmp) / "in.csv", Path(tmp) / "out.parquet"
        inp.write_text(_csv_text(data))
        summary = run_catalogue(inp, out, engine=fake_estimate, quiet=True, chunk_rows=7)
        back = read_table(out)
        assert summary.rows == len(data)
        _check_flags(data, back)


@SETTINGS
@given(data=rows)
def test_messy_parquet_text_columns(data):
    with tempfile.TemporaryDirectory() as tmp:
        inp, out = Path(tmp) / "in.parquet", Path(tmp) / "out.ecsv"
        cols = {b: pa.array([None if v is None else str(v) for v in col], pa.string())
                for b, col in zip(BANDS, zip(*data))} if data else {b: pa.array([], pa.string()) for b in BANDS}
        pq.write_table(pa.table(cols), inp)
        run_catalogue(inp, out, engine=fake_estimate, quiet=True)
        _check_flags(data, read_table(out))


@SETTINGS
@given(data=st.lists(st.tuples(odd_number | good_mag, odd_number | good_mag), min_size=1, max_size=20))
def test_float_parquet_with_extreme_values(data):
    with tempfile.TemporaryDirectory() as tmp:
        inp, out = Path(tmp) / "in.parquet", Path(tmp) / "out.csv"
        b, v = (np.array(c, dtype=float) for c in zip(*data))
        pq.write_table(pa.table({"B_JC": b, "V_JC": v}), inp)
        run_catalogue(inp, out, engine=fake_estimate, quiet=True)
        back = read_table(out)
        _check_flags([(x, y, None) for x, y in data], back)


@settings(max_examples=15, deadline=None)
@given(dups=st.lists(st.sampled_from(BANDS + ["id"]), min_size=1, max_size=6), data=rows)
def test_duplicated_column_names(dups, data):
    header = BANDS + dups
    with tempfile.TemporaryDirectory() as tmp:
        inp, out = Path(tmp) / "in.csv", Path(tmp) / "out.csv"
        inp.write_text(_csv_text([r + r[: len(dups)] + (None,) * max(0, len(dups) - len(r)) for r in data],
                                 header))
        reader = ChunkReader(inp)
        assert len(set(reader.colnames)) == len(header)
        summary = run_catalogue(inp, out, engine=fake_estimate, quiet=True)
        assert summary.rows == len(data)
        assert sum("renamed" in n for n in summary.notes) == sum(1 for i, h in enumerate(header) if h in header[:i])
