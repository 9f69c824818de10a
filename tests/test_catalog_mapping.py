"""Column maps: default naming, the TOML map file, clear errors."""

import pytest

from stelltemp.catalog.mapping import BandColumns, ColumnMap, default_mapping, load_mapping
from stelltemp.errors import StelltempError


def test_default_mapping_picks_band_keys_and_error_columns():
    cols = ["id", "B_JC", "V_JC", "V_JC_err", "Ks_2MASS", "obs.date", "ebv", "parallax", "feh"]
    cmap = default_mapping(cols)
    assert list(cmap.bands) == ["B_JC", "V_JC", "Ks_2MASS"]
    assert cmap.bands["V_JC"] == BandColumns("V_JC", "V_JC_err")
    assert cmap.bands["B_JC"].err is None
    assert "obs.date" not in cmap.bands  # unknown system: not a passband
    assert cmap.columns == {"ebv": "ebv", "parallax": "parallax", "feh": "feh"}


def test_map_file_reads_bands_columns_values(tmp_path):
    path = tmp_path / "map.toml"
    path.write_text(
        '[bands]\n"B_JC" = "Bmag"\n"V_JC" = { mag = "Vmag", err = "e_Vmag" }\n'
        '[columns]\nparallax = "plx"\nlogg = "grav"\n'
        "[values]\nebv = 0.03\nebv_err = 0.01\n"
    )
    cmap = load_mapping(path)
    assert cmap.bands == {"B_JC": BandColumns("Bmag"), "V_JC": BandColumns("Vmag", "e_Vmag")}
    assert cmap.columns == {"parallax": "plx", "logg": "grav"}
    assert cmap.values == {"ebv": 0.03, "ebv_err": 0.01}
    assert cmap.required_columns() == ["Bmag", "Vmag", "e_Vmag", "plx", "grav"]


@pytest.mark.parametrize(
    "text, words",
    [
        ("[bands]\ng = 'gmag'\n", "'g' is ambiguous"),
        ("[colour]\n", "unknown table [colour]"),
        ("[columns]\nteff = 'T'\n", "unknown key 'teff'"),
        ("[values]\nebv = 'lots'\n", "ebv must be a number"),
        ("[columns]\nebv = 'E'\n[values]\nebv = 0.1\n", "both as a column and as a value"),
        ("[bands\n", "map.toml"),
        ("[bands]\n'V_JC' = { magnitude = 'V' }\n", "needs mag"),
    ],
)
def test_bad_map_files_give_one_clear_line(tmp_path, text, words):
    path = tmp_path / "map.toml"
    path.write_text(text)
    with pytest.raises(StelltempError) as err:
        load_mapping(path)
    assert words in str(err.value)
    assert "\n" not in str(err.value)


def test_missing_map_file(tmp_path):
    with pytest.raises(StelltempError, match="cannot read column map"):
        load_mapping(tmp_path / "nothing.toml")


def test_missing_column_is_named():
    cmap = ColumnMap(bands={"V_JC": BandColumns("Vmag", "e_Vmag")}, columns={"ebv": "EBV"})
    with pytest.raises(StelltempError, match=r"column 'e_Vmag' \(error of V_JC\)"):
        cmap.check(["Vmag", "EBV"])
    with pytest.raises(StelltempError, match=r"column 'EBV' \(for ebv\)"):
        cmap.check(["Vmag", "e_Vmag"])
    with pytest.raises(StelltempError, match="no magnitude columns"):
        ColumnMap().check(["x"])


def test_ebv_override_number_or_column():
    cmap = ColumnMap(bands={"V_JC": BandColumns("V")}, columns={"ebv": "E"})
    as_value = cmap.with_ebv("0.12")
    assert as_value.values == {"ebv": 0.12} and "ebv" not in as_value.columns
    as_column = as_value.with_ebv("EBV_sfd", ebv_err=0.02)
    assert as_column.columns["ebv"] == "EBV_sfd" and as_column.values == {"ebv_err": 0.02}
