"""Catalogue outputs describe themselves in every format, read back by astropy without a warning."""

import re
import warnings
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table

from stelltemp.catalog import run_catalogue
from stelltemp.catalog.tableio import read_table
from stelltemp.catalog.describe import RESULT_DESCRIPTIONS, describe_result, record_from_text
from stelltemp.engine import RESULT_COLUMNS
from stelltemp.engine import flags as F
from stelltemp.errors import StelltempError

DEMO = Path(__file__).resolve().parents[1] / "catalogs_demo" / "targets.csv"
FORMATS = ("csv", "ecsv", "fits", "vot", "parquet")


def _astropy_read(path):
    """Table.read as a user would call it, every warning recorded."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        if path.suffix == ".csv":  # plain CSV; units and record in the sidecar, applied by read_table
            table = read_table(path)
        elif path.suffix == ".vot":  # VOTable IDs cannot start with a digit (J_2MASS); names can
            table = Table.read(path, use_names_over_ids=True)
        else:
            table = Table.read(path)
    return table, [str(w.message) for w in caught]


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("describe")
    out = {}
    for ext in FORMATS:
        path = folder / f"demo.{ext}"
        run_catalogue(DEMO, path, quiet=True)
        out[ext] = path
    return out


@pytest.fixture(scope="module")
def reference(outputs):
    table, caught = _astropy_read(outputs["ecsv"])
    assert caught == []
    return table


def _text(value):
    return "" if value is np.ma.masked else str(value)


def _record(table):
    meta = dict(table.meta)
    if "description" in meta:  # VOTable: the record is the table description
        meta = record_from_text(meta.pop("description"))
    return meta


@pytest.mark.parametrize("ext", FORMATS)
def test_every_format_reads_back_whole_and_without_warnings(outputs, reference, ext):
    table, caught = _astropy_read(outputs[ext])
    assert caught == [], caught
    assert table.colnames == reference.colnames and len(table) == len(reference) == 60
    # one metadata layout: the same keys and values in every format
    record, ref = _record(table), dict(reference.meta)
    assert record.pop("run_time_utc") and ref.pop("run_time_utc")  # each run has its own start
    assert record == ref
    for name in reference.colnames:
        a, b = table[name], reference[name]
        # astropy's VOTable writer wraps long descriptions: the same words, other line breaks
        assert " ".join((a.info.description or "").split()) == (b.info.description or ""), name
        if b.dtype.kind == "f":
            unit_b = b.unit or u.dimensionless_unscaled
            unit_a = a.unit or u.dimensionless_unscaled
            # VOTable writes the bolometric flux in the equal VOUnit mW m^-2
            have = (np.ma.filled(np.ma.asarray(a, float), np.nan) * unit_a).to_value(unit_b)
            np.testing.assert_allclose(have, np.ma.filled(np.ma.asarray(b, float), np.nan),
                                       rtol=1e-12, equal_nan=True, err_msg=name)
        else:
            assert [_text(x) for x in a] == [_text(x) for x in b], name


def test_units_on_inputs_and_results(reference):
    t = reference
    for name in ("B_JC", "V_JC_err", "Ks_2MASS", "ebv", "mag"):
        assert t[name].unit == u.mag, name
    assert t["parallax"].unit == u.mas and t["ra"].unit == u.deg and t["dec"].unit == u.deg
    assert t["t_bb"].unit == u.K and t["theta"].unit == u.mas and t["lambda_peak"].unit == u.nm
    assert t["fbol"].unit.is_equivalent(u.erg / u.s / u.cm**2)


def test_votable_units_are_vounit(outputs):
    # VOUnit (IVOA 2014) deprecates erg; the flux is written in mW m^-2 (1 erg s^-1 cm^-2 = 1 mW m^-2)
    units = re.findall(r'unit="([^"]*)"', outputs["vot"].read_text())
    assert "mW.m**-2" in units and not any("erg" in x for x in units)


def test_every_result_column_is_described(reference):
    result_cols = [c for c in reference.colnames if c in RESULT_COLUMNS or c in RESULT_DESCRIPTIONS]
    assert set(RESULT_COLUMNS) <= set(result_cols)
    for name in result_cols:
        text = reference[name].info.description
        assert text and text == RESULT_DESCRIPTIONS[name], name
    assert describe_result("t_bb_result") == RESULT_DESCRIPTIONS["t_bb"]


def test_record_holds_passbands_flags_and_assumptions(reference):
    meta = reference.meta
    assert meta["tool_name"] == "stelltemp" and meta["tool_version"] and meta["run_time_utc"].endswith("+00:00")
    assert meta["R_V"] == 3.1 and meta["extinction_law"] == "G23"
    assert "Gordon" in meta["extinction_law_source"] and "CALSPEC" in meta["vega_spectrum"]
    bands = meta["passbands"].split(",")
    assert len(bands) == 10  # the demo list: U B V Rc Ic, J H Ks, BP RP
    for key in bands:
        k = key.replace(".", "_")
        assert meta[f"passband_{k}_source"] and meta[f"passband_{k}_magsys"] in ("Vega", "AB")
    # Bessell, Castelli & Plez 1998, A&A 333, 231: V(Vega) = 0.03 mag, the adopted zero point
    assert meta["passband_V_JC_zero_point_mag"] == pytest.approx(0.03)
    for bit, name in F.NAMES.items():
        assert meta[f"flag_{bit}_name"] == name
        if getattr(F, "SEVERITY", None):
            assert meta[f"flag_{bit}_severity"] in F.LEVELS
    assumptions = [v for k, v in meta.items() if k.startswith("assumption_")]
    assert any("0.03 mag" in a for a in assumptions)
    # the demo list has a log g column with some empty cells: those rows are taken as dwarfs
    if "logg" in reference.colnames:
        assert any("empty log g are calibrated as dwarfs" in a for a in assumptions)
    else:
        assert any("every star is calibrated as a dwarf" in a for a in assumptions)
    assert "effective temperature" in meta["blackbody_note"]
    # no record key FITS would change: short keys only in upper case, no dots
    for key in meta:
        assert "." not in key and (len(key) > 8 or key == key.upper()), key


def test_method_and_relations_per_row(reference):
    t = reference
    assert set(t["t_bb_method"]) == {"fit"}  # ten bands: the multi-band fit
    rel = [_text(x) for x in t["cal_used"]]
    n_cal = np.asarray(t["n_cal"])
    assert [len(r.split(",")) if r else 0 for r in rel] == list(n_cal)
    teff = np.ma.filled(np.ma.asarray(t["teff_cal"], float), np.nan)
    assert np.array_equal(np.isfinite(teff), n_cal > 0)
    assert any(n > 1 for n in n_cal)


def test_a_result_table_is_refused_or_renewed(outputs, reference, tmp_path):
    with pytest.raises(StelltempError, match="already holds stelltemp results.*--renew-results"):
        run_catalogue(outputs["ecsv"], tmp_path / "again.ecsv", quiet=True)
    assert not (tmp_path / "again.ecsv").exists()
    summary = run_catalogue(outputs["parquet"], tmp_path / "again.ecsv", renew_results=True, quiet=True)
    again = Table.read(tmp_path / "again.ecsv")
    assert again.colnames == reference.colnames  # replaced, not piled up as *_result columns
    assert not any(c.endswith("_result") for c in again.colnames)
    np.testing.assert_allclose(np.asarray(again["t_bb"], float), np.asarray(reference["t_bb"], float),
                               rtol=1e-12, equal_nan=True)
    assert any("replaced" in n for n in summary.notes)


def test_cli_refuses_a_result_table_in_one_line_and_renews_on_request(outputs, tmp_path, capsys):
    from stelltemp.cli import main

    out = tmp_path / "again.ecsv"
    assert main(["catalogue", str(outputs["csv"]), "-o", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("stelltemp: error:") and "--renew-results" in err[0]
    fig = tmp_path / "again.png"
    assert main(["catalogue", str(outputs["csv"]), "-o", str(out), "--renew-results", "--plot", str(fig)]) == 0
    text = capsys.readouterr().out
    assert f"figure: {fig}" in text and "replaced" in text and fig.is_file()


def test_csv_output_reads_whole_with_any_csv_reader(outputs, reference):
    """The catalogue's CSV is plain CSV: astropy's CSV reader, csv and pandas get every row and column."""
    import csv
    import json

    path = outputs["csv"]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        plain = Table.read(path, format="ascii.csv")
    assert plain.colnames == reference.colnames and len(plain) == 60
    np.testing.assert_allclose(np.asarray(plain["t_bb"], float), np.asarray(reference["t_bb"], float),
                               rtol=1e-15, equal_nan=True)
    assert [str(v) for v in plain["name"]] == [str(v) for v in reference["name"]]
    rows = list(csv.reader(path.open(newline="", encoding="utf-8")))
    assert rows[0] == reference.colnames and len(rows) == 61
    assert all(len(r) == len(reference.colnames) for r in rows)
    # text cells holding commas (lists of relations used) are quoted, and come back whole
    used = reference.colnames.index("cal_used")
    assert [r[used] for r in rows[1:]] == [_text(v) for v in reference["cal_used"]]
    pd = pytest.importorskip("pandas")
    frame = pd.read_csv(path, keep_default_na=False)
    assert list(frame.columns) == reference.colnames and frame.shape == (60, len(reference.colnames))
    # the metadata: units, descriptions and the run record in <stem>.meta.json
    side = json.loads(path.with_name("demo.meta.json").read_text())
    assert side["columns"]["t_bb"]["unit"] == "K"
    assert side["columns"]["t_bb"]["description"] == reference["t_bb"].info.description
    meta = dict(side["meta"])
    ref = dict(reference.meta)
    assert meta.pop("run_time_utc") and ref.pop("run_time_utc")
    assert meta == ref
