"""The disk cache of band tables: same numbers as a fresh build, keyed by content, safe to share."""

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from stelltemp import bandgrid as bg
from stelltemp import cache

ROOT = Path(__file__).resolve().parents[1]


def _arrays():
    return {"a": np.arange(5.0), "b": np.eye(2)}


def test_entry_is_built_once_then_read(tmp_path, monkeypatch):
    monkeypatch.setenv(cache.ENV_VAR, str(tmp_path))
    calls = []

    def build():
        calls.append(1)
        return _arrays()

    key = cache.digest("x", np.arange(3))
    first = cache.load_or_build("t", key, build)
    again = cache.load_or_build("t", key, build)
    assert len(calls) == 1
    for name in first:
        np.testing.assert_array_equal(first[name], again[name])
    assert [p.suffix for p in tmp_path.iterdir()] == [".npz"]  # no temporary file left behind


def test_key_follows_content_not_names():
    assert cache.digest("a", np.arange(3.0)) == cache.digest("a", np.arange(3.0))
    assert cache.digest("a", np.arange(3.0)) != cache.digest("a", np.arange(3.0) + 1e-12)
    assert cache.digest("a", 1) != cache.digest("a", 1.0)
    assert cache.digest("ab", "c") != cache.digest("a", "bc")


def test_damaged_entry_is_rebuilt(tmp_path, monkeypatch):
    monkeypatch.setenv(cache.ENV_VAR, str(tmp_path))
    key = cache.digest("damaged")
    cache.load_or_build("t", key, _arrays)
    (entry,) = tmp_path.iterdir()
    entry.write_bytes(b"not a zip file")
    out = cache.load_or_build("t", key, _arrays)
    np.testing.assert_array_equal(out["a"], np.arange(5.0))
    np.load(entry)  # rewritten whole


def test_unwritable_folder_or_switched_off_runs_without_cache(tmp_path, monkeypatch):
    blocker = tmp_path / "file"
    blocker.write_text("a file where the folder should be")
    monkeypatch.setenv(cache.ENV_VAR, str(blocker / "sub"))
    np.testing.assert_array_equal(cache.load_or_build("t", cache.digest(1), _arrays)["a"], np.arange(5.0))
    monkeypatch.setenv(cache.ENV_VAR, "off")
    assert cache.cache_dir() is None
    np.testing.assert_array_equal(cache.load_or_build("t", cache.digest(1), _arrays)["a"], np.arange(5.0))


def test_default_folder_is_the_users_cache(monkeypatch, tmp_path):
    monkeypatch.delenv(cache.ENV_VAR, raising=False)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    if sys.platform not in ("win32", "darwin"):
        assert cache.cache_dir() == tmp_path / "stelltemp"


def test_cached_band_table_equals_a_fresh_build(tmp_path, monkeypatch):
    monkeypatch.setenv(cache.ENV_VAR, str(tmp_path))
    bg._band_table.cache_clear()
    try:
        first = bg.band_table("V_JC")  # built, stored
        bg._band_table.cache_clear()
        again = bg.band_table("V_JC")  # read back, its cell polynomials too (not rebuilt)
        assert any(p.name.startswith("band-") for p in tmp_path.iterdir())
        np.testing.assert_array_equal(first.coef, again.coef)
        np.testing.assert_array_equal(again.coef, bg._build_coef("V_JC", "G23", 3.1))
        rebuilt = bg.HermiteTable(again.coef, again.lnt0, again.h_t, again.e0, again.h_e).patches
        np.testing.assert_array_equal(again.patches, rebuilt)
        assert not again.patches.flags.writeable
    finally:
        bg._band_table.cache_clear()


def test_changed_curve_gets_a_new_entry(tmp_path, monkeypatch):
    """A user curve edited between runs is a new key (content, not file name)."""
    monkeypatch.setenv(cache.ENV_VAR, str(tmp_path / "cache"))
    curve = tmp_path / "band.dat"
    lam = np.linspace(4000.0, 6000.0, 41)
    curve.write_text("\n".join(f"{w} {np.exp(-((w - 5000) / 400) ** 2)}" for w in lam))
    from stelltemp.passbands import load_passband_file

    key1 = bg.table_key(load_passband_file(curve, wave_unit="AA"), "G23", 3.1)
    curve.write_text("\n".join(f"{w} {np.exp(-((w - 5100) / 400) ** 2)}" for w in lam))
    key2 = bg.table_key(load_passband_file(curve, wave_unit="AA"), "G23", 3.1)
    assert key1 != key2
    assert bg.table_key("V_JC", "G23", 3.1) != bg.table_key("V_JC", "G23", 3.2)
    assert bg.table_key("V_JC", "G23", 3.1) != bg.table_key("V_JC", "F99", 3.1)


def test_two_processes_building_at_once_both_get_the_table(tmp_path):
    env = dict(os.environ, PYTHONPATH=str(ROOT), **{cache.ENV_VAR: str(tmp_path)})
    code = ("from stelltemp import bandgrid as bg; import numpy as np; "
            "c = bg.band_table('B_JC').coef; print(float(np.sum(c)))")
    procs = [subprocess.Popen([sys.executable, "-c", code], env=env, stdout=subprocess.PIPE, text=True)
             for _ in range(2)]
    sums = [float(p.communicate(timeout=300)[0]) for p in procs]
    assert all(p.returncode == 0 for p in procs)
    assert sums[0] == sums[1]
    entries = [p for p in tmp_path.iterdir()]
    assert all(p.suffix == ".npz" for p in entries)  # whole files only, no temporary left
    with np.load(next(p for p in entries if p.name.startswith("band-"))) as z:
        assert float(np.sum(z["coef"])) == pytest.approx(sums[0], rel=0, abs=0)


def _same_table(a, b):
    assert a.colnames == b.colnames
    assert dict(a.meta) == dict(b.meta)
    for name in a.colnames:
        x, y = a[name], b[name]
        assert type(x) is type(y) and x.dtype == y.dtype and x.unit == y.unit
        assert x.info.description == y.info.description and x.info.format == y.info.format
        assert np.array_equal(np.ma.getmaskarray(x), np.ma.getmaskarray(y))
        if x.dtype.kind == "f":
            np.testing.assert_array_equal(np.ma.filled(x, 0.0), np.ma.filled(y, 0.0))
        else:
            assert list(x) == list(y)


def test_ecsv_from_the_cache_equals_a_fresh_parse(tmp_path, monkeypatch):
    from astropy.table import Table

    from stelltemp.calibrations import CALIBRATION_DIR

    monkeypatch.setenv(cache.ENV_VAR, str(tmp_path / "c"))
    path = tmp_path / "t.ecsv"
    t = Table({"key": ["a", "bb", "c"], "x": [1.5, np.nan, 3.0], "n": [1, 2, 3]},
              meta={"citation": "invented", "terms": ["1", "X"], "scale": 5040.0})
    t["x"].unit = "mag"
    t["x"].info.description = "a number"
    t["n"] = np.ma.MaskedArray([1, 2, 3], mask=[False, True, False])
    t.write(path, format="ascii.ecsv")
    fresh = Table.read(path, format="ascii.ecsv")
    first = cache.read_ecsv(path)  # parsed and stored
    assert len(list((tmp_path / "c").glob("ecsv-*.npz"))) == 1
    _same_table(fresh, first)
    _same_table(fresh, cache.read_ecsv(path))  # from the entry
    for builtin in sorted(CALIBRATION_DIR.glob("*.ecsv"))[:3]:
        cache.read_ecsv(builtin)
        _same_table(Table.read(builtin, format="ascii.ecsv"), cache.read_ecsv(builtin))
    path.write_text(path.read_text().replace("3.0", "4.0"))  # new content: a new entry
    assert cache.read_ecsv(path)["x"][2] == 4.0
