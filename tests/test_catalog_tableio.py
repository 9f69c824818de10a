"""Table files: formats by extension, units and run record, atomic output, malformed files."""

import json
import os
from pathlib import Path

import astropy.units as u
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from astropy.table import Table

from stelltemp.catalog import tableio
from stelltemp.catalog.tableio import ChunkReader, open_sink, read_table, table_format, write_table
from stelltemp.errors import StelltempError

FORMATS = ["parquet", "csv", "ecsv", "fits", "vot"]
RUN = {"tool_name": "stelltemp", "tool_version": "9.9", "method_requested": "auto", "passbands": "B_JC,V_JC",
       "extinction_law": "G23", "R_V": 3.1, "ebv_source": "0.1 mag for every row", "flag_1_name": "bad_input",
       "run_time_utc": "2026-01-01T00:00:00+00:00"}


def _table():
    t = Table()
    t["name"] = ["invented-1", "invented-2", "invented-3"]
    t["V_JC"] = [10.0, 11.5, np.nan]
    t["t_bb"] = [5000.0, 6000.0, np.nan] * u.K
    t["flags"] = np.array([0, 1, 2], dtype=np.int64)
    return t


@pytest.mark.parametrize("ext", FORMATS)
def test_round_trip_keeps_values_units_and_run_record(tmp_path, ext):
    path = tmp_path / f"out.{ext}"
    write_table(_table(), path, run_meta=RUN)
    back = read_table(path)
    assert back.colnames == ["name", "V_JC", "t_bb", "flags"]
    assert list(back["name"]) == ["invented-1", "invented-2", "invented-3"]
    np.testing.assert_array_equal(np.asarray(back["t_bb"], float), [5000.0, 6000.0, np.nan])
    assert back["t_bb"].unit == u.K
    assert list(back["flags"]) == [0, 1, 2]
    assert back.meta == RUN  # one layout, every format
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


def test_csv_is_plain_csv_with_a_json_sidecar(tmp_path):
    import csv

    path = tmp_path / "out.csv"
    write_table(_table(), path, run_meta=RUN)
    lines = path.read_text().splitlines()
    assert lines[0] == "name,V_JC,t_bb,flags" and len(lines) == 4  # nothing before the names, one line a row
    # any CSV reader takes it as it is: astropy's plain CSV reader, Python's csv module, pandas
    for fmt in ("ascii.csv", "csv"):
        plain = Table.read(path, format=fmt)
        assert plain.colnames == ["name", "V_JC", "t_bb", "flags"] and len(plain) == 3
        assert list(plain["name"]) == ["invented-1", "invented-2", "invented-3"]
        assert list(plain["flags"]) == [0, 1, 2] and float(plain["t_bb"][1]) == 6000.0
    rows = list(csv.reader(path.open(newline="")))
    assert rows[0] == ["name", "V_JC", "t_bb", "flags"] and len(rows) == 4 and all(len(r) == 4 for r in rows)
    assert rows[2] == ["invented-2", "11.5", "6000", "1"] and rows[3] == ["invented-3", "nan", "nan", "2"]
    pd = pytest.importorskip("pandas")
    frame = pd.read_csv(path)
    assert list(frame.columns) == ["name", "V_JC", "t_bb", "flags"] and frame.shape == (3, 4)
    assert frame["t_bb"].iloc[0] == 5000.0 and frame["flags"].tolist() == [0, 1, 2]
    # the metadata: the sidecar of the same stem, JSON, as documented in tableio
    side = json.loads((tmp_path / "out.meta.json").read_text())
    assert side["layout"] == tableio.SIDECAR_LAYOUT and side["table"] == "out.csv"
    assert side["meta"] == RUN
    assert list(side["columns"]) == ["name", "V_JC", "t_bb", "flags"]
    assert side["columns"]["t_bb"] == {"datatype": "float64", "unit": "K"}
    assert side["columns"]["flags"]["datatype"] == "int64"


def test_csv_sidecar_is_never_silently_replaced(tmp_path):
    path = tmp_path / "out.csv"
    (tmp_path / "out.meta.json").write_text("{}")
    with pytest.raises(StelltempError, match="already exists"):
        tableio.check_output(path)
    with pytest.raises(StelltempError, match="already exists"):
        write_table(_table(), path, run_meta=RUN)
    assert not path.exists() and (tmp_path / "out.meta.json").read_text() == "{}"
    write_table(_table(), path, run_meta=RUN, overwrite=True)
    assert json.loads((tmp_path / "out.meta.json").read_text())["meta"] == RUN


def test_csv_of_earlier_versions_still_reads_with_its_header(tmp_path):
    # earlier versions wrote an ECSV header as '#' lines above the names
    path = tmp_path / "old.csv"
    _table().write(path, format="ascii.ecsv", delimiter=",")
    back = read_table(path)
    assert back["t_bb"].unit == u.K and list(back["flags"]) == [0, 1, 2]


def test_unknown_extension_and_missing_file(tmp_path):
    with pytest.raises(StelltempError, match="unknown table extension"):
        table_format(tmp_path / "x.xlsx")
    with pytest.raises(StelltempError, match="no such file"):
        ChunkReader(tmp_path / "absent.csv")


@pytest.mark.parametrize("ext, content, words", [
    ("parquet", b"not a parquet file at all", "not a readable Parquet file"),
    ("fits", b"SIMPLE  = nonsense", "not a readable FITS table"),
    ("vot", b"<VOTABLE><oops", "not a readable VOTABLE table"),
    ("ecsv", b"# %ECSV 1.0\n# ---\n# broken: [\n", "not a readable ECSV table"),
    ("csv", b"", "no header line"),
    ("csv", b"\n\n# only comments\n", "no header line"),
])
def test_malformed_files_give_one_clear_line(tmp_path, ext, content, words):
    path = tmp_path / f"bad.{ext}"
    path.write_bytes(content)
    with pytest.raises(StelltempError) as err:
        ChunkReader(path)
    assert words in str(err.value) and "\n" not in str(err.value)


def test_csv_duplicate_names_comments_and_bad_lines(tmp_path):
    path = tmp_path / "in.csv"
    path.write_text("# invented survey\nid,V_JC,V_JC,x\n1,10,11,a\n2,12\n3,13,14,c,extra\n4,15,16,d\n")
    reader = ChunkReader(path)
    assert reader.colnames == ["id", "V_JC", "V_JC.dup2", "x"]
    chunks, notes = [], []
    for chunk in reader:
        chunks.append(chunk)
        notes += reader.row_notes
    rows = pa.concat_tables(chunks)
    # rows in = rows out: the two malformed lines stay, in place, flagged as unusable
    assert rows["id"].to_pylist() == ["1", "2", "3", "4"]
    assert rows["V_JC"].to_pylist() == ["10", "12", "13", "15"] and rows["x"].to_pylist() == ["a", "", "c", "d"]
    assert notes == [(1, "line 4: 2 field(s) for 4 columns, values not used", True),
                     (2, "line 5: 5 field(s) for 4 columns, values not used", True)]
    assert any("renamed 'V_JC.dup2'" in n for n in reader.notes)
    assert any("2 CSV line(s) with a wrong number of fields kept as flagged rows" in n for n in reader.notes)


def test_malformed_lines_of_a_later_block_stay_in_place(tmp_path):
    # the parser reports the bad lines of the block it reads ahead while the block before is
    # handed out: those rows belong to the next chunk, not to the end of this one
    n = 100_000  # invented rows, about 2.6 MB: several blocks of at least 1 MB
    lines = ["id,V_JC,x"] + [f"{k},{10 + k % 700 / 100:.4f},{k % 3}.123456" for k in range(n)]
    lines[45_001] = "45000,12.0"
    lines[80_001] = "80000,11.0,2,extra"
    path = tmp_path / "in.csv"
    path.write_text("\n".join(lines) + "\n")
    reader = ChunkReader(path, chunk_rows=100)
    ids, notes = [], []
    for chunk in reader:
        notes += [(len(ids) + row, text) for row, text, _ in reader.row_notes]
        ids += [int(v) for v in chunk["id"].to_pylist()]
    assert ids == list(range(n))
    assert notes == [(45_000, "line 45002: 2 field(s) for 3 columns, values not used"),
                     (80_000, "line 80002: 4 field(s) for 3 columns, values not used")]


def test_csv_streams_in_bounded_chunks(tmp_path):
    path = tmp_path / "big.csv"
    n = 200_000
    path.write_text("a,b\n" + "".join(f"{i},{i * 0.5}\n" for i in range(n)))
    chunks = list(ChunkReader(path, chunk_rows=20_000))
    assert sum(len(c) for c in chunks) == n
    assert len(chunks) > 1 and max(len(c) for c in chunks) < n


def test_narrowest_types():
    chunk = pa.table({"i": ["1", "", "-3"], "f": ["1", "2.5", "nan"], "s": ["1", "x", ""], "e": ["", "", ""]})
    types = tableio.narrowest_types([chunk], chunk.column_names)
    assert types == {"i": pa.int64(), "f": pa.float64(), "s": pa.string(), "e": pa.string()}
    typed = tableio.apply_types(chunk, types)
    assert typed["i"].to_pylist() == [1, None, -3]


@pytest.mark.parametrize("ext", ["parquet", "csv", "fits"])
def test_interrupted_write_leaves_nothing(tmp_path, ext):
    path = tmp_path / f"out.{ext}"
    chunk = tableio.astropy_to_arrow(_table())
    with pytest.raises(RuntimeError, match="simulated"):
        with open_sink(path, RUN) as sink:
            sink.write(chunk if sink.kind == "arrow" else _table())
            raise RuntimeError("simulated failure mid-write")
    assert list(tmp_path.iterdir()) == []


def test_interrupt_keeps_an_existing_target_intact(tmp_path):
    path = tmp_path / "out.parquet"
    write_table(_table(), path, run_meta=RUN)
    before = path.read_bytes()
    with pytest.raises(KeyboardInterrupt):
        with open_sink(path, RUN, overwrite=True) as sink:
            sink.write(tableio.astropy_to_arrow(_table()[:1]))
            raise KeyboardInterrupt
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["out.parquet"]


def test_existing_output_needs_explicit_overwrite(tmp_path):
    path = tmp_path / "out.ecsv"
    write_table(_table(), path)
    with pytest.raises(StelltempError, match="already exists"):
        write_table(_table(), path)
    with pytest.raises(StelltempError, match="already exists"):
        tableio.check_output(path)
    write_table(_table()[:1], path, overwrite=True)
    assert len(read_table(path)) == 1
    with pytest.raises(StelltempError, match="replace the input"):
        tableio.check_output(path, overwrite=True, input_path=path)


def test_output_file_mode_follows_umask(tmp_path):
    path = tmp_path / "out.parquet"
    write_table(_table(), path)
    mask = os.umask(0)
    os.umask(mask)
    assert os.stat(path).st_mode & 0o777 == 0o666 & ~mask


def test_parquet_reader_streams_batches(tmp_path):
    path = tmp_path / "in.parquet"
    pq.write_table(pa.table({"x": np.arange(1000.0)}), path, row_group_size=300)
    reader = ChunkReader(path, chunk_rows=250)
    sizes = [len(c) for c in reader]
    assert reader.num_rows == 1000 and sum(sizes) == 1000 and max(sizes) <= 300


HEADER_METAS = [
    {},
    {"tool_name": "stelltemp", "rv": 3.1, "n": 7, "ok": True, "none": None},
    {"big": 1e17, "small": 1e-300, "neg": -2.5e-7, "nan": float("nan"), "inf": float("inf"), "minf": -float("inf"),
     "zero": 0.0, "negzero": -0.0},
    {"np": [np.float64(0.1), np.float32(2.5), np.float16(1.0), np.int64(-3), np.uint8(7), np.bool_(False),
            np.str_("text"), np.intc(4)]},
    {"quoted": "a: b", "hash": "# not a comment", "multi": "line one\nline two", "unicode": "E(B−V) ≥ 0 Å",
     "empty": "", "yes": "yes", "number_text": "1.5", "long": "word " * 60},
    {"nested": {"z": 1, "a": [1, 2, {"k": "v"}], "t": (1, "two", 3.0)}, "list_of_lists": [[1, 2], [3, [4]]]},
    {3: "int key", "mixed": {1: "a", "b": 2}},
]


@pytest.mark.parametrize("meta", HEADER_METAS)
def test_parquet_header_text_is_astropys(meta):
    """The light YAML writer of the Parquet header gives astropy's own text, byte for byte."""
    from astropy.table import meta as astropy_meta

    arrays = [pa.array([1.5, None]), pa.array(["a", None]), pa.array([1, 2], pa.int64()), pa.array([True, False]),
              pa.array([1.0, 2.0], pa.float32())]
    fields = [pa.field("t_bb", pa.float64(), metadata={b"unit": b"K", b"description": b"temperature: fitted"}),
              pa.field("flag_names", pa.string(), metadata={b"description": b"names, comma separated"}),
              pa.field("row", pa.int64()), pa.field("good", pa.bool_()),
              pa.field("fbol", pa.float32(), metadata={b"unit": b"erg / (s cm2)"})]
    schema = pa.Table.from_arrays(arrays, schema=pa.schema(fields)).schema
    empty = tableio.arrow_to_astropy(schema.empty_table())
    empty.meta.update(meta)
    expected = "\n".join(astropy_meta.get_yaml_from_table(empty))
    assert tableio.astropy_header(schema, meta) == expected
    assert tableio._plain_yaml_value({"meta": dict(meta)})  # the light writer made it, not the fallback


def test_parquet_header_falls_back_to_astropy_for_other_values():
    """Values the light writer does not know (a unit, an array) go through astropy's dumper."""
    from astropy.table import meta as astropy_meta

    schema = pa.schema([pa.field("x", pa.float64())])
    meta = {"unit": u.K, "array": np.arange(3)}
    assert not tableio._plain_yaml_value(meta)
    empty = tableio.arrow_to_astropy(schema.empty_table())
    empty.meta.update(meta)
    assert tableio.astropy_header(schema, meta) == "\n".join(astropy_meta.get_yaml_from_table(empty))


@pytest.mark.parametrize("data", [np.arange(5.0), np.arange(10.0)[::3], np.arange(4, dtype=np.float32),
                                  np.arange(6, dtype=np.int64), np.arange(3, dtype=np.uint8),
                                  np.array([True, False, True, True, False, False, True, False, True]),
                                  np.array([np.nan, 1.0]), np.zeros(0)])
def test_numbers_to_arrow_as_pa_array(data):
    arr = tableio.numpy_to_arrow(data)
    arr.validate(full=True)
    same = lambda a, b: a.type == b.type and a.null_count == b.null_count and a.to_string() == b.to_string()  # NaN too
    assert same(arr, pa.array(data))
    mask = np.arange(len(data)) % 3 == 0
    masked = tableio.numpy_to_arrow(data, mask)
    masked.validate(full=True)
    assert same(masked, pa.array(data, mask=mask))


@pytest.mark.parametrize("data", [np.array(["a", "", "E(B-V) 0.1", "tail  "]), np.array(["x" * 60, "y"])[::-1],
                                  np.array(["Å, E(B−V)", "plain"]), np.array(["a\x00b", "\x00c", "d"]),
                                  np.zeros(0, "U3"), np.array(["", ""])])
def test_text_to_arrow_as_pa_array(data):
    arr = tableio.text_to_arrow(data)
    arr.validate(full=True)
    assert arr.type == pa.string() and arr.equals(pa.array(data, pa.string()))


@pytest.mark.parametrize("values", [["fit", None, "colour", "fit", None], [None, None], [], ["one"],
                                    ["x", float("nan")], ["Å", "b"]])
def test_objects_to_arrow_as_pa_array(values):
    data = np.array(values, dtype=object)
    arr = tableio.objects_to_arrow(data)
    arr.validate(full=True)
    assert arr.equals(pa.array(data, pa.string(), from_pandas=True))


def test_parquet_run_leaves_heavy_modules_alone(tmp_path):
    """A Parquet catalogue run imports neither pandas nor scipy.special nor astropy's YAML module.

    Each costs a quarter of a second of a short run (see tests/benchmarks/bench_goals.py, fixed_cost).
    """
    import subprocess
    import sys

    src = tmp_path / "in.parquet"
    pq.write_table(pa.table({"B_JC": [10.2, 11.0], "V_JC": [9.8, 10.1], "B_JC_err": [0.02, 0.02],
                             "V_JC_err": [0.02, 0.03], "ebv": [0.1, 0.2]}), src)
    code = ("import sys; from stelltemp.cli import main; "
            f"code = main(['catalogue', {str(src)!r}, '-o', {str(tmp_path / 'out.parquet')!r}, '--ebv', 'ebv', "
            "'--quiet']); heavy = [m for m in ('pandas', 'scipy.special', 'astropy.io.misc.yaml', "
            "'astropy.coordinates') if m in sys.modules]; print(code, heavy)")
    env = dict(os.environ, PYTHONPATH=str(Path(tableio.__file__).parents[2]))
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True)
    assert done.stdout.strip() == "0 []", done.stdout + done.stderr
