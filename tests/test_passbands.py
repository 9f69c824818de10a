"""Tests of stelltemp.passbands: the built-in registry and user passband files."""

import dataclasses

import numpy as np
import pytest
from astropy import units as u
from astropy.table import Table
from synphot import SpectralElement
from synphot.models import Empirical1D

from stelltemp import passbands as pb
from stelltemp.errors import StelltempError

KEYS = pb.builtin_keys()


# ------------------------------------------------------------ registry

def test_registry_has_the_documented_keys():
    documented = {"U_JC", "B_JC", "V_JC", "Rc_JC", "Ic_JC", "u_SDSS", "g_SDSS", "r_SDSS", "i_SDSS", "z_SDSS",
                  "J_2MASS", "H_2MASS", "Ks_2MASS", "G_GDR3", "BP_GDR3", "RP_GDR3"}
    assert len(KEYS) >= 16
    assert documented <= set(KEYS)
    assert len(set(KEYS)) == len(KEYS)


@pytest.mark.parametrize("key", KEYS)
def test_builtin_passband_is_complete(key):
    band = pb.get_passband(key)
    assert band.key == key
    assert key.rsplit("_", 1)[0] == band.band
    assert band.system and band.citation
    assert band.magsys in ("Vega", "AB")
    assert band.detector in ("energy", "photon")
    assert np.all(np.diff(band.wave) > 0)
    assert band.response.max() == 1.0 and band.response.min() >= 0
    assert band.photon_response.max() == pytest.approx(1.0)
    if band.magsys == "Vega":
        assert np.isfinite(band.vega_mag) and abs(band.vega_mag) < 0.1
        assert "Vega magnitude" in band.citation
    else:
        assert np.isnan(band.vega_mag)
    summary = band.summary()
    for field in ("key", "system", "band", "magsys", "detector", "pivot_wavelength_nm", "source"):
        assert summary[field] not in (None, "")
    lo, hi = band.wave_range
    assert band.wave[0] <= lo < band.pivot_wavelength.to_value(u.AA) < hi <= band.wave[-1]
    assert 0 < band.fwhm.to_value(u.AA) < hi - lo
    assert lo < band.mean_wavelength.to_value(u.AA) < hi


def test_passbands_are_immutable():
    band = pb.get_passband("V_JC")
    with pytest.raises(dataclasses.FrozenInstanceError):
        band.magsys = "AB"


def test_keys_are_case_sensitive_and_distinct():
    g_sdss, g_gaia = pb.get_passband("g_SDSS"), pb.get_passband("G_GDR3")
    assert g_sdss is not g_gaia
    assert (g_sdss.system, g_sdss.magsys) != (g_gaia.system, g_gaia.magsys)
    assert abs(g_sdss.pivot_wavelength - g_gaia.pivot_wavelength) > 1000 * u.AA
    with pytest.raises(StelltempError, match="g_SDSS"):  # suggestion for the wrong case
        pb.get_passband("G_SDSS")


@pytest.mark.parametrize("text,hint", [("v_jc", "V_JC"), ("KS_2MASS", "Ks_2MASS"), ("G_SDSS", "g_SDSS"),
                                       ("g_gdr3", "G_GDR3"), ("bp", "BP_GDR3")])
def test_unknown_key_gives_one_line_with_suggestion(text, hint):
    with pytest.raises(StelltempError) as err:
        pb.get_passband(text)
    msg = str(err.value)
    assert "unknown passband" in msg and hint in msg and "\n" not in msg


def test_registry_table_is_a_copy():
    tab = pb.registry_table()
    tab.remove_rows(slice(None))
    assert len(pb.registry_table()) == len(KEYS)


@pytest.mark.parametrize("key", KEYS)
def test_detector_convention(key, independent):
    band = pb.get_passband(key)
    if band.detector == "energy":
        # Bessell & Murphy 2012, PASP 124, 140: photon response of an energy curve is R/λ.
        expected = band.response / band.wave
        np.testing.assert_allclose(band.photon_response, expected / expected.max(), rtol=1e-14)
        assert key.endswith("_JC")  # the Bessell (1990) UBVRI curves are energy-response curves
    else:
        np.testing.assert_array_equal(band.photon_response, band.response)
    # the curve stelltemp holds is the speclite file's curve, at every tabulated node
    # (zero nodes may be added inside gaps the file left: see test_no_long_interpolation_gaps_with_response)
    wave, resp, _ = independent.raw_curve(key)
    assert np.all(np.isin(wave, band.wave))
    added = ~np.isin(band.wave, wave)
    assert np.all(band.response[added] == 0)
    np.testing.assert_allclose(band.response[~added], resp, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(band.photon_response_at(wave), independent.photon_response(key, wave),
                               rtol=1e-12, atol=1e-15)


# ------------------------------------------------------------ pivot wavelengths

@pytest.mark.parametrize("key", KEYS)
def test_pivot_matches_synphot(key, independent):
    # Pivot λ (Tokunaga & Vacca 2005, PASP 117, 421) against synphot's SpectralElement.pivot()
    # on the raw speclite curve, given to synphot as a photon-counting throughput sampled every
    # 0.5 Å (R/λ for the energy-response Bessell curves), so that synphot's linear interpolation
    # and trapezoid follow the tabulated curve closely.
    grid = independent.fine_grid(key)
    element = SpectralElement(Empirical1D, points=grid * u.AA, lookup_table=independent.photon_response(key, grid))
    ref = element.pivot().to_value(u.AA)
    ours = pb.get_passband(key).pivot_wavelength.to_value(u.AA)
    assert ours == pytest.approx(ref, rel=1e-5), f"ours {ours:.3f} Å, synphot {ref:.3f} Å"


# Published pivot wavelengths, Å, recalled but not verified against the papers here
# ("from memory"); the tolerance covers differences between curve versions.
PIVOTS_FROM_MEMORY = {
    # Bessell & Murphy 2012, PASP 124, 140 (their revised photonic UBVRI; we use Bessell 1990 curves)
    "U_JC": (3600, 0.01), "B_JC": (4380, 0.01), "V_JC": (5490, 0.01), "Rc_JC": (6500, 0.01), "Ic_JC": (8000, 0.01),
    # Riello et al. 2021, A&A 649, A3 (Gaia EDR3 passbands)
    "G_GDR3": (6218, 0.002), "BP_GDR3": (5110, 0.002), "RP_GDR3": (7769, 0.002),
    # Doi et al. 2010, AJ 139, 1628 (SDSS; u, g, r, i, z near 3560, 4700, 6180, 7490, 8950 Å)
    "g_SDSS": (4700, 0.005), "r_SDSS": (6180, 0.005), "i_SDSS": (7490, 0.005), "z_SDSS": (8950, 0.01),
    "u_SDSS": (3560, 0.015),
    # Tonry et al. 2012, ApJ 750, 99 (Pan-STARRS1)
    "g_PS1": (4850, 0.005), "r_PS1": (6200, 0.005), "i_PS1": (7535, 0.005), "z_PS1": (8675, 0.005),
    "y_PS1": (9630, 0.005),
}


@pytest.mark.parametrize("key", sorted(PIVOTS_FROM_MEMORY))
def test_pivot_near_published_value_from_memory(key):
    value, rel = PIVOTS_FROM_MEMORY[key]
    assert pb.get_passband(key).pivot_wavelength.to_value(u.AA) == pytest.approx(value, rel=rel)


@pytest.mark.parametrize("key,isophotal_um", [("J_2MASS", 1.235), ("H_2MASS", 1.662), ("Ks_2MASS", 2.159)])
def test_2mass_pivot_versus_cohen_isophotal(key, isophotal_um):
    # Cohen, Wheaton & Megeath 2003, AJ 126, 1090, Table 2 gives *isophotal* wavelengths
    # (1.235, 1.662, 2.159 µm), which depend on the Vega spectrum; the pivot depends only on the
    # curve.  They are different quantities and agree only to about 1 % (H differs most).
    pivot_um = pb.get_passband(key).pivot_wavelength.to_value(u.um)
    assert pivot_um == pytest.approx(isophotal_um, rel=0.015)


@pytest.mark.parametrize("key", ["u_SDSS"])
def test_no_long_interpolation_gaps_with_response(key):
    band = pb.get_passband(key)
    gaps = np.diff(band.wave)
    both_ends_on = (band.response[:-1] > 0) & (band.response[1:] > 0)
    assert gaps[both_ends_on].max() <= 500.0


def test_other_builtin_curves_have_no_long_gaps():
    for key in KEYS:
        if key == "u_SDSS":
            continue
        band = pb.get_passband(key)
        both_ends_on = (band.response[:-1] > 0) & (band.response[1:] > 0)
        # 500 Å is the coarsest step Bessell (1990) tabulated (R band redward of 750 nm)
        assert np.diff(band.wave)[both_ends_on].max() <= 500.0, key


# ------------------------------------------------------------ user passband files

WAVE_NM = np.array([500.0, 510.0, 520.0, 530.0, 540.0, 550.0])
RESP = np.array([0.0, 0.4, 0.9, 1.0, 0.5, 0.0])


def _same_curve(band, scale_to_aa=10.0):
    np.testing.assert_allclose(band.wave, WAVE_NM * scale_to_aa, rtol=1e-12)
    np.testing.assert_allclose(band.response, RESP / RESP.max(), rtol=1e-12)


def test_user_ecsv_with_unit(tmp_path):
    path = tmp_path / "narrow.ecsv"
    Table({"wavelength": WAVE_NM * u.nm, "response": RESP}).write(path, format="ascii.ecsv")
    band = pb.get_passband(path)
    _same_curve(band)
    assert band.system == "user" and band.magsys == "AB" and band.detector == "photon"
    assert band.key == "file:narrow" and "narrow.ecsv" in band.citation


def test_user_csv_unit_in_header(tmp_path):
    path = tmp_path / "narrow.csv"
    path.write_text("wavelength[nm],transmission\n" + "".join(f"{w},{r}\n" for w, r in zip(WAVE_NM, RESP)))
    _same_curve(pb.load_passband_file(path))


def test_user_csv_unit_as_argument(tmp_path):
    path = tmp_path / "narrow.csv"
    path.write_text("lambda,throughput\n" + "".join(f"{w / 1000},{r}\n" for w, r in zip(WAVE_NM, RESP)))
    _same_curve(pb.load_passband_file(path, wave_unit="micron"))
    _same_curve(pb.get_passband(str(path), wave_unit="um"))


def test_user_text_unit_comment(tmp_path):
    path = tmp_path / "narrow.txt"
    path.write_text("# invented test curve\n# unit: nm\n" + "".join(f"{w} {r}\n" for w, r in zip(WAVE_NM, RESP)))
    _same_curve(pb.load_passband_file(path))


def test_user_text_angstrom_argument_and_options(tmp_path):
    path = tmp_path / "narrow.dat"
    path.write_text("".join(f"{w * 10}\t{r}\n" for w, r in zip(WAVE_NM, RESP)))
    band = pb.load_passband_file(path, wave_unit="Angstrom", detector="energy", magsys="Vega", key="my.V",
                                 vega_mag=0.03)
    _same_curve(band)
    assert (band.key, band.detector, band.magsys, band.vega_mag) == ("my.V", "energy", "Vega", 0.03)
    expected = RESP / (WAVE_NM * 10)
    np.testing.assert_allclose(band.photon_response, expected / expected.max())


def _write_txt(tmp_path, wave, resp, unit="nm", name="bad.txt"):
    path = tmp_path / name
    path.write_text(f"# unit: {unit}\n" + "".join(f"{w} {r}\n" for w, r in zip(wave, resp)))
    return path


@pytest.mark.parametrize("wave,resp,unit,message", [
    ([500, 520, 510, 530], [0, 1, 1, 0], "nm", "increase strictly"),
    ([500, 510, 510, 530], [0, 1, 1, 0], "nm", "increase strictly"),
    ([500, 510, 520, 530], [0, 1, -0.2, 0], "nm", "negative"),
    ([500, 510, 520, 530], [0, 0, 0, 0], "nm", "zero everywhere"),
    ([500, 510, 520, 530], [0, 1, 1, 0], "bananas", "unknown wavelength unit"),
    ([500, 510, 520, 530], [0, 1, 1, 0], "s", "unknown wavelength unit"),
    ([-10, 510, 520, 530], [0, 1, 1, 0], "nm", "positive"),
    ([500, 510], [0, 1], "nm", "at least 3 rows"),
    ([500, 510, 520, 530], [0, 1, float("nan"), 0], "nm", "finite"),
])
def test_bad_user_curves_give_one_clear_line(tmp_path, wave, resp, unit, message):
    path = _write_txt(tmp_path, wave, resp, unit)
    with pytest.raises(StelltempError, match=message) as err:
        pb.load_passband_file(path)
    assert "\n" not in str(err.value)
    assert str(path) in str(err.value)


def test_bad_ecsv_and_csv_files(tmp_path):
    path = tmp_path / "backwards.ecsv"
    Table({"wavelength": WAVE_NM[::-1] * u.nm, "response": RESP}).write(path, format="ascii.ecsv")
    with pytest.raises(StelltempError, match="increase strictly"):
        pb.load_passband_file(path)
    path = tmp_path / "nounit.csv"
    path.write_text("wavelength,response\n" + "".join(f"{w},{r}\n" for w, r in zip(WAVE_NM, RESP)))
    with pytest.raises(StelltempError, match="wavelength unit unknown"):
        pb.load_passband_file(path)
    path = tmp_path / "onecol.csv"
    path.write_text("wavelength[nm]\n500\n510\n520\n")
    with pytest.raises(StelltempError, match="two columns"):
        pb.load_passband_file(path)
    path = tmp_path / "garbage.csv"
    path.write_text("wavelength[nm],response\n500,abc\n510,\x00\n")
    with pytest.raises(StelltempError):
        pb.load_passband_file(path)


def test_bad_user_options_and_missing_file(tmp_path):
    path = _write_txt(tmp_path, WAVE_NM, RESP)
    with pytest.raises(StelltempError, match="detector"):
        pb.load_passband_file(path, detector="bolometer")
    with pytest.raises(StelltempError, match="magnitude system"):
        pb.load_passband_file(path, magsys="Johnson")
    with pytest.raises(StelltempError, match="not found"):
        pb.get_passband(tmp_path / "missing.csv")


# ------------------------------------------------------------ names
@pytest.mark.parametrize("plain,key", [("B", "B_JC"), ("V", "V_JC"), ("Rc", "Rc_JC"), ("Ic", "Ic_JC"),
                                       ("J", "J_2MASS"), ("H", "H_2MASS"), ("Ks", "Ks_2MASS"), ("G", "G_GDR3"),
                                       ("BP", "BP_GDR3"), ("RP", "RP_GDR3"), ("y", "y_PS1")])
def test_plain_band_names_where_unambiguous(plain, key):
    assert pb.resolve_key(plain) == key
    assert pb.get_passband(plain) is pb.get_passband(key)


@pytest.mark.parametrize("plain,choices", [("g", {"g_SDSS", "g_PS1"}), ("r", {"r_SDSS", "r_PS1"}),
                                           ("i", {"i_SDSS", "i_PS1"}), ("z", {"z_SDSS", "z_PS1"}),
                                           ("U", {"U_JC", "u_SDSS"}), ("u", {"U_JC", "u_SDSS"})])
def test_ambiguous_band_names_ask_for_the_system(plain, choices):
    with pytest.raises(StelltempError, match="ambiguous") as err:
        pb.get_passband(plain)
    msg = str(err.value)
    assert "\n" not in msg and all(c in msg for c in choices)


def test_old_keys_still_work_with_a_deprecation_warning():
    reg = pb.registry_table()
    assert len(reg) == len(KEYS) and set(reg["old_key"]) >= {"jc.V", "2mass.Ks", "sdss.g", "ps1.g", "gaia3.BP"}
    for old, new in zip(reg["old_key"], reg["key"]):
        with pytest.warns(DeprecationWarning, match=f"now '{new}'"):
            assert pb.get_passband(old) is pb.get_passband(new)


def test_new_keys_follow_band_underscore_system():
    systems = {"Johnson-Cousins": "JC", "SDSS": "SDSS", "Pan-STARRS1": "PS1", "2MASS": "2MASS", "Gaia DR3": "GDR3"}
    for row in pb.registry_table():
        assert row["key"] == f"{row['band']}_{systems[row['system']]}"
