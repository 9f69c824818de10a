"""Bad table input never crashes, loses a row or passes silently (one test per failure class).

All tables are invented fixtures made on the fly.
"""

import csv
import datetime
import warnings

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

import pytest
from astropy.table import Table

from stelltemp.catalog import estimate_table, run_catalogue
from stelltemp.catalog.mapping import default_mapping
from stelltemp.catalog.tableio import ChunkReader, read_table
from stelltemp.cli import main
from stelltemp.engine import estimate
from stelltemp.engine import flags as F
from stelltemp.errors import StelltempError

try:
    from test_catalog_helpers import fake_estimate
except ImportError:  # tests run as a package
    from tests.test_catalog_helpers import fake_estimate

HEADER = "name,B_JC,V_JC,ebv"


def _lines(n=12):
    return [f"s{i},{10 + i * 0.1:.2f},{9.5 + i * 0.1:.2f},0.1" for i in range(n)]


def _rows(path):
    with open(path, encoding="utf-8", newline="") as fh:  # below the ECSV header of '#' lines
        return list(csv.DictReader(line for line in fh if not line.startswith("#")))


def _run(tmp_path, data, out="out.csv", **kw):
    inp = tmp_path / "in.csv"
    inp.write_bytes(data if isinstance(data, bytes) else data.encode())
    summary = run_catalogue(inp, tmp_path / out, engine=kw.pop("engine", fake_estimate), quiet=True, **kw)
    return summary, tmp_path / out


# ------------------------------------------------------------------ line endings, encodings
@pytest.mark.parametrize("eol", ["\r", "\r\n", "\n"])
def test_csv_line_endings_cr_crlf_lf_all_read(tmp_path, eol):
    summary, out = _run(tmp_path, eol.join([HEADER] + _lines()) + eol)
    rows = _rows(out)
    assert summary.rows == 12 and [r["name"] for r in rows] == [f"s{i}" for i in range(12)]
    assert all(r["flags"] == "0" for r in rows)


def test_non_utf8_cell_gives_a_flagged_row_not_an_abort(tmp_path):
    data = "\n".join([HEADER] + _lines()).encode().replace(b"s3,", b"s\xff3,") + b"\n"
    summary, out = _run(tmp_path, data)
    rows = _rows(out)
    assert len(rows) == 12
    assert rows[3]["name"] == "s\ufffd3" and int(rows[3]["flags"]) & F.BAD_INPUT
    assert rows[3]["input_notes"] == "name: bytes that are not UTF-8 text replaced by U+FFFD"
    assert np.isfinite(float(rows[3]["t_bb"]))  # the photometry itself was fine
    assert all(r["input_notes"] == "" for i, r in enumerate(rows) if i != 3)


def test_non_utf8_cell_through_the_cli_in_a_child_process_exits_cleanly(tmp_path):
    """The abort (SIGABRT after the error) happened at interpreter exit: check a real process."""
    import subprocess
    import sys

    inp = tmp_path / "in.csv"
    inp.write_bytes(("\n".join([HEADER] + _lines()) + "\n").encode().replace(b"9.60", b"9.\xe90"))
    proc = subprocess.run([sys.executable, "-m", "stelltemp.cli", "catalogue", str(inp),
                           "-o", str(tmp_path / "o.parquet"), "--quiet"], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    assert "terminate" not in proc.stderr and proc.stderr == ""
    back = read_table(tmp_path / "o.parquet")
    assert len(back) == 12 and "V_JC: not a number" in back["input_notes"][1]


def test_non_utf8_header_is_one_clear_line(tmp_path):
    inp = tmp_path / "in.csv"
    inp.write_bytes(b"# invented\nna\xffme,B_JC,V_JC\n1,2,3\n")
    with pytest.raises(StelltempError, match=r"line 2: the header is not UTF-8 text \(byte 0xff at column 3\)"):
        ChunkReader(inp)


# ------------------------------------------------------------------ rows in = rows out
def test_short_line_becomes_a_flagged_row_in_place(tmp_path):
    lines = _lines()
    lines[3] = "s3,10.3"
    summary, out = _run(tmp_path, "\n".join([HEADER] + lines) + "\n")
    rows = _rows(out)
    assert summary.rows == 12 and [r["name"] for r in rows] == [f"s{i}" for i in range(12)]
    assert rows[3]["input_notes"].startswith("line 5: 2 field(s) for 4 columns, values not used")
    assert int(rows[3]["flags"]) & F.BAD_INPUT and rows[3]["t_bb"] in ("", "nan")
    assert any("kept as flagged rows" in n for n in summary.notes)


def test_long_line_and_line_numbers_after_a_multiline_cell(tmp_path):
    text = HEADER + '\n"s\n0",10,9.5,0.1\n\ns1,10,9.5,0.1,extra\ns2,10,9.5,0.1\n'
    summary, out = _run(tmp_path, text)
    rows = _rows(out)
    assert [r["name"] for r in rows] == ["s\n0", "s1", "s2"]
    assert rows[1]["input_notes"].startswith("line 5: 5 field(s) for 4 columns")  # physical line


@pytest.mark.parametrize("where", ["middle", "last column"])
def test_unclosed_quote_refuses_the_file_with_the_line(tmp_path, where):
    lines = _lines()
    lines[3] = 's3,"10.3,9.8,0.1' if where == "middle" else 's3,10.3,9.8,"0.1'
    inp = tmp_path / "in.csv"
    inp.write_text("\n".join([HEADER] + lines) + "\n")
    with pytest.raises(StelltempError, match=r"line 5.*unclosed quote\?\); the file's structure cannot be trusted"):
        run_catalogue(inp, tmp_path / "out.csv", engine=fake_estimate, quiet=True)
    assert not (tmp_path / "out.csv").exists()
    assert [p.name for p in tmp_path.iterdir()] == ["in.csv"]


def test_header_only_csv_gives_an_empty_table(tmp_path):
    summary, out = _run(tmp_path, HEADER + "\n")
    assert summary.rows == 0 and _rows(out) == []


# ------------------------------------------------------------------ reddening cells
def test_bad_ebv_cells_give_nan_results_with_a_reason_real_engine(tmp_path):
    lines = _lines(5)
    lines[0] = "s0,10.0,9.5,"
    lines[1] = "s1,10.1,9.6,50"
    lines[2] = "s2,10.2,9.7,-5"
    lines[3] = "s3,10.3,9.8,abc"
    summary, out = _run(tmp_path, "\n".join([HEADER] + lines) + "\n", engine=estimate)
    rows = _rows(out)
    for r in rows[:4]:
        assert int(r["flags"]) & F.BAD_INPUT
        assert r["t_bb"] in ("", "nan") and r["teff_cal"] in ("", "nan")  # never the E(B-V) = 0 values
    assert rows[0]["input_notes"] == "ebv: missing, no result without E(B-V)"
    assert rows[1]["input_notes"] == "ebv: outside [-0.5, 6]"
    assert rows[2]["input_notes"] == "ebv: outside [-0.5, 6]"
    assert rows[3]["input_notes"] == "ebv: not a number"
    assert np.isfinite(float(rows[4]["t_bb"]))


def test_ebv_option_outside_the_kernel_grid_says_why(tmp_path, capsys):
    inp = tmp_path / "in.csv"
    inp.write_text("\n".join([HEADER] + _lines(3)) + "\n")
    assert main(["catalogue", str(inp), "-o", str(tmp_path / "o.csv"), "--ebv", "10"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["stelltemp: error: --ebv (E(B-V)) must be a finite number in [-0.5, 6] mag, got 10"]


def test_engine_api_bad_reddening_per_star_gives_nan_not_zero_reddening():
    res = estimate({"B_JC": [10.6, 10.6], "V_JC": [10.0, 10.0]}, ebv=np.array([np.nan, 0.1]))
    assert res["flags"][0] & F.BAD_INPUT and np.isnan(res["t_bb"][0].value)
    assert np.isfinite(res["t_bb"][1].value)


# ------------------------------------------------------------------ columns
def test_fits_vector_column_mapped_as_a_band_is_refused_in_one_line(tmp_path, capsys):
    t = Table({"name": ["a", "b"], "B_JC": [10.0, 11.0], "V_JC": [[9.5, 9.6], [10.5, 10.6]]})
    t.write(tmp_path / "in.fits")
    assert main(["catalogue", str(tmp_path / "in.fits"), "-o", str(tmp_path / "o.csv")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["stelltemp: error: column 'V_JC' holds several values per row (a vector column): "
                   "map a column with one value per row"]
    with pytest.raises(StelltempError, match="vector column"):
        estimate_table(t, engine=fake_estimate)


@pytest.mark.parametrize("ext", ["vot", "fits"])
def test_mangled_column_names_still_match_their_passband(tmp_path, ext):
    t = Table({"name": ["a", "b"], "B_JC": [10.0, 11.0], "V_JC": [9.5, 10.4], "Ks_2MASS": [8.0, 8.9]})
    path = tmp_path / f"in.{ext}"
    if ext == "vot":
        t.rename_column("Ks_2MASS", "2mass.Ks")  # an old key; VOTable names cannot start with a digit
        with pytest.warns(Warning):
            t.write(path, format="votable")
    else:
        t.rename_column("Ks_2MASS", "2MASS.KS")  # an upper-casing writer
        t.write(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # the old key of the VOTable case
        summary = run_catalogue(path, tmp_path / "o.csv", engine=fake_estimate, quiet=True)
    back = read_table(tmp_path / "o.csv")
    assert back.meta["passbands"] == "B_JC,V_JC,Ks_2MASS"
    mangled = "_2mass.Ks" if ext == "vot" else "2MASS.KS"
    assert f"column '{mangled}' read as passband Ks_2MASS" in summary.notes


def test_band_like_columns_matching_nothing_are_reported():
    cmap = default_mapping(["B_JC", "V_JC", "jc.X", "sdss.q_err", "jc.R_err", "obs.date", "V_JX"])
    assert set(cmap.bands) == {"B_JC", "V_JC"}
    assert "column 'jc.X' looks like a passband key but matches no passband: not used" in cmap.notes
    assert any(n.startswith("column 'sdss.q_err' looks like an error column") for n in cmap.notes)
    assert any(n.startswith("column 'jc.R_err'") for n in cmap.notes)
    assert not any("obs.date" in n for n in cmap.notes)


# ------------------------------------------------------------------ what outputs can hold
def test_integers_beyond_64_bits_to_parquet_kept_as_text_with_a_note(tmp_path):
    text = "name,id,B_JC,V_JC\n" + "".join(f"s{i},{2**64 + i},10.{i},9.5\n" for i in range(3))
    summary, out = _run(tmp_path, text, out="o.parquet")
    back = pq.read_table(out)
    assert back["id"].to_pylist() == [str(2**64 + i) for i in range(3)]
    note = "column 'id': integers beyond the 64-bit range kept as text"
    assert note in summary.notes and note in read_table(out).meta["conversions"]


def test_fits_output_holds_non_ascii_names_lists_and_times_with_notes(tmp_path):
    t = pa.table({
        "name": ["Étoile-a", "b"], "B_JC": [10.0, 11.0], "V_JC": [9.5, 10.4],
        "tags": [[1, 2], None], "when": pa.array([datetime.datetime(2020, 1, 1), None]),
        "ñ": [1, 2],
    })
    pq.write_table(t, tmp_path / "in.parquet")
    summary = run_catalogue(tmp_path / "in.parquet", tmp_path / "o.fits", engine=fake_estimate, quiet=True)
    back = Table.read(tmp_path / "o.fits")
    assert len(back) == 2 and list(back["name"]) == ["\\xc9toile-a", "b"]
    assert back["tags"][0] == "[1, 2]" and str(back["when"][0]).startswith("2020-01-01")
    assert "\\xf1" in back.colnames
    notes = " | ".join(summary.notes)
    for col in ("name", "tags", "when"):
        assert f"column '{col}'" in notes
    assert "non-ASCII text" in back.meta["conversions"]


def test_votable_output_holds_unsigned_integers(tmp_path):
    t = pa.table({"B_JC": [10.0, 11.0], "V_JC": [9.5, 10.4], "big": pa.array([2**64 - 1, 1], pa.uint64())})
    pq.write_table(t, tmp_path / "in.parquet")
    summary = run_catalogue(tmp_path / "in.parquet", tmp_path / "o.vot", engine=fake_estimate, quiet=True)
    assert any("column 'big': unsigned integers" in n for n in summary.notes)
    assert len(read_table(tmp_path / "o.vot")) == 2
