"""Row hygiene: parsing raw cells and flagging unusable values."""

import numpy as np
import pyarrow as pa
from astropy.table import MaskedColumn

from stelltemp.catalog.hygiene import RowNotes, clean, column_to_float, prepare_inputs
from stelltemp.catalog.mapping import BandColumns, ColumnMap
from stelltemp.engine import flags as F


def test_text_cells_parse_or_flag():
    raw = ["1.5", " 2 ", "inf", "-Infinity", "nan", "", "NA", None, "abc", "1e3", ".5", "1d3"]
    values, text = column_to_float(pa.array(raw))
    np.testing.assert_array_equal(values[[0, 1, 9, 10]], [1.5, 2.0, 1000.0, 0.5])
    assert values[2] == np.inf and values[3] == -np.inf
    assert np.isnan(values[[4, 5, 6, 7, 8, 11]]).all()
    assert text.tolist() == [False] * 8 + [True, False, False, True]


def test_numpy_object_and_masked_columns():
    values, text = column_to_float(np.array([1, "x", None, 2.5, b"3"], dtype=object))
    assert np.isnan(values[[1, 2]]).all() and values[[0, 3, 4]].tolist() == [1.0, 2.5, 3.0]
    assert text.tolist() == [False, True, False, False, False]
    col = MaskedColumn([1.0, 2.0, 3.0], mask=[False, True, False])
    values, text = column_to_float(col)
    assert np.isnan(values[1]) and values[2] == 3.0 and not text.any()
    values, text = column_to_float(np.array([True, False]))
    assert text.all() and np.isnan(values).all()


def test_clean_sets_flags_and_notes():
    notes = RowNotes(5)
    vals = np.array([10.0, np.inf, 99.0, np.nan, -41.0])
    text = np.array([False, False, False, True, False])
    out = clean(vals, text, "mag", "Vmag", notes)
    assert np.isfinite(out).tolist() == [True, False, False, False, False]
    assert notes.flags.tolist() == [0, F.BAD_INPUT, F.ABSURD_VALUE, F.BAD_INPUT, F.ABSURD_VALUE]
    assert notes.notes[1] == "Vmag: infinite"
    assert notes.notes[2] == "Vmag: outside [-40, 40]"
    assert notes.notes[3] == "Vmag: not a number"


def test_prepare_inputs_negative_error_missing_ebv_and_empty_rows():
    chunk = pa.table({
        "B": [11.0, np.nan, 12.0], "V": [10.0, np.nan, 11.0],
        "eV": [0.02, 0.02, -0.1], "E": [0.1, 0.1, np.nan],
    })
    cmap = ColumnMap(bands={"B_JC": BandColumns("B"), "V_JC": BandColumns("V", "eV")}, columns={"ebv": "E"})
    clean_in = prepare_inputs(lambda n: chunk[n], cmap, 3)
    assert clean_in.flags.tolist() == [0, F.BAD_INPUT, F.ABSURD_VALUE | F.BAD_INPUT]
    assert clean_in.notes[1] == "no usable magnitude"
    assert clean_in.notes[2] == "E: missing, no result without E(B-V); eV: outside [0, 5]"
    assert np.isnan(clean_in.mags["B_JC"][2])  # no reddening: no result, never that of E(B-V) = 0
    assert np.isnan(clean_in.errs["V_JC"][2])
    # fitting E(B-V): an empty reddening cell is not a problem
    fitted = prepare_inputs(lambda n: chunk[n], cmap, 3, fit_ebv=True)
    assert fitted.flags[2] == F.ABSURD_VALUE
