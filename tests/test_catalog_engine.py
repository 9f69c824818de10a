"""End to end with the real temperature engine (``stelltemp.engine.estimate``)."""

import tempfile
from pathlib import Path

import astropy.units as u
import numpy as np
import pyarrow as pa
import pyarrow.csv as pcsv
import pyarrow.parquet as pq
import pytest
from astropy.table import Table
from hypothesis import given, settings
from hypothesis import strategies as st

from stelltemp.catalog import estimate_table, run_catalogue
from stelltemp.catalog.tableio import read_table
from stelltemp.engine import estimate
from stelltemp.engine import flags as F
from stelltemp.errors import StelltempError
from stelltemp.passbands import get_passband
from stelltemp.photometry import synthetic_mag
from stelltemp.planck import planck_lambda_cgs

KEYS = ["B_JC", "V_JC", "Ic_JC", "J_2MASS", "Ks_2MASS"]
TEMPS = np.array([3500.0, 4500.0, 6000.0, 9000.0, 15000.0])


def _blackbody_mags():
    """Synthetic magnitudes of blackbodies (Planck law), each scaled by an invented distance."""
    wave = np.linspace(1000.0, 30000.0, 20000)
    rng = np.random.default_rng(5)
    cols = {k: [] for k in KEYS}
    for t in TEMPS:
        flam = planck_lambda_cgs(t, wave) * 1e-20
        offset = rng.uniform(0, 8)  # distance modulus: colours do not change
        for k in KEYS:
            cols[k].append(float(synthetic_mag(wave, flam, get_passband(k))) + offset)
    return {k: np.array(v) for k, v in cols.items()}


def test_blackbody_catalogue_gives_back_its_temperatures(tmp_path):
    mags = _blackbody_mags()
    inp = tmp_path / "bb.parquet"
    pq.write_table(pa.table({"id": np.arange(len(TEMPS)), **mags}), inp)
    out = tmp_path / "out.ecsv"
    summary = run_catalogue(inp, out, quiet=True)
    back = read_table(out)
    # a blackbody's colours invert to its own temperature (Planck law; exact by construction)
    np.testing.assert_allclose(back["t_bb"].quantity.to_value(u.K), TEMPS, rtol=1e-3)
    assert back["t_bb"].unit == u.K
    assert summary.rows == summary.successes == len(TEMPS)
    assert back.meta["passbands"] == ",".join(KEYS) and back.meta["extinction_law"] == "G23"


@pytest.mark.parametrize("ext", ["parquet", "csv"])
def test_file_run_equals_direct_engine_call(tmp_path, ext):
    rng = np.random.default_rng(8)
    n = 150
    v = rng.uniform(6, 15, n)
    cols = {"B_JC": v + rng.uniform(0.0, 1.4, n), "V_JC": v, "Ic_JC": v - rng.uniform(0.3, 1.5, n),
            "V_JC_err": np.full(n, 0.02), "ebv": rng.uniform(0.0, 0.4, n), "parallax": rng.uniform(1, 30, n)}
    table = pa.table(cols)
    inp = tmp_path / f"in.{ext}"
    (pq.write_table if ext == "parquet" else pcsv.write_csv)(table, inp)
    out = tmp_path / "out.parquet"
    run_catalogue(inp, out, quiet=True, chunk_rows=40)
    got = pq.read_table(out)
    units = Table.read(out).columns  # units travel in astropy's Parquet metadata
    ref = estimate({k: cols[k] for k in ("B_JC", "V_JC", "Ic_JC")}, {"V_JC": cols["V_JC_err"]},
                   ebv=cols["ebv"], parallax=cols["parallax"])
    for name in ref.colnames:
        want = np.asarray(getattr(ref[name], "value", ref[name]))
        have = got[name].to_numpy(zero_copy_only=False)
        if want.dtype.kind == "f":
            np.testing.assert_allclose(have, want, rtol=1e-12, equal_nan=True, err_msg=name)
        else:
            assert list(have) == list(want), name
        unit = getattr(ref[name], "unit", None)
        if unit is not None and str(unit):
            assert units[name].unit == unit, name


def test_messy_rows_with_the_real_engine(tmp_path):
    inp = tmp_path / "in.csv"
    inp.write_text(
        "star,B_JC,V_JC,Ic_JC,ebv\n"
        "s1,11.2,10.5,9.7,0.05\n"
        "s2,n/a,10.5,9.7,0.05\n"
        "s3,abc,def,ghi,0.05\n"
        "s4,11.2,-inf,9.7,0.05\n"
        "s5,11.2,10.5,99.0,0.05\n"
        "s6,11.2,10.5,9.7,lots\n"
    )
    out = tmp_path / "out.csv"
    summary = run_catalogue(inp, out, quiet=True)
    back = read_table(out)
    flags = np.asarray(back["flags"])
    assert not flags[0] & (F.BAD_INPUT | F.ABSURD_VALUE) and np.isfinite(back["t_bb"][0])
    assert np.isfinite(back["t_bb"][1])  # a missing band is just not used
    assert flags[2] & F.BAD_INPUT and not np.isfinite(back["t_bb"][2])
    assert flags[3] & F.BAD_INPUT and back["input_notes"][3] == "V_JC: infinite"
    assert flags[4] & F.ABSURD_VALUE
    assert flags[5] & F.BAD_INPUT and back["input_notes"][5] == "ebv: not a number"
    assert summary.rows == 6


def test_unknown_passband_in_map_is_one_clear_error(tmp_path):
    from astropy.table import Table

    t = Table({"Q": [10.0], "V": [9.0]})
    with pytest.raises(StelltempError, match="unknown passband 'jc.Q'"):
        estimate_table(t, {"bands": {"jc.Q": "Q", "V_JC": "V"}})


def test_dask_equals_local_with_the_real_engine(tmp_path):
    pytest.importorskip("dask.dataframe")
    from stelltemp.catalog.scale import run_catalogue_dask

    mags = _blackbody_mags()
    big = {k: np.tile(v, 40) + np.repeat(np.linspace(0, 2, 40), len(TEMPS)) for k, v in mags.items()}
    inp = tmp_path / "in.parquet"
    pq.write_table(pa.table(big), inp, row_group_size=50)
    run_catalogue(inp, tmp_path / "a.csv", quiet=True)
    run_catalogue_dask(inp, tmp_path / "b.csv", quiet=True, workers=2)
    def rows(name):  # the header records the run's start time, which may differ by a second
        return [x for x in (tmp_path / name).read_text().splitlines() if "run_time_utc" not in x]

    assert rows("a.csv") == rows("b.csv")


cell = st.one_of(st.floats(min_value=5, max_value=15), st.sampled_from([np.nan, np.inf, -np.inf, 1e300, 45.0]),
                 st.sampled_from(["x", "", "NA"]), st.none())


@settings(max_examples=10, deadline=None)
@given(data=st.lists(st.tuples(cell, cell, cell), min_size=0, max_size=12))
def test_real_engine_never_crashes_on_messy_cells(data):
    with tempfile.TemporaryDirectory() as tmp:
        inp, out = Path(tmp) / "in.parquet", Path(tmp) / "out.parquet"
        cols = {k: pa.array([None if v is None else str(v) for v in col], pa.string())
                for k, col in zip(KEYS[:3], zip(*data))} if data else {k: pa.array([], pa.string()) for k in KEYS[:3]}
        pq.write_table(pa.table(cols), inp)
        summary = run_catalogue(inp, out, quiet=True)
        got = pq.read_table(out)
        assert got.num_rows == summary.rows == len(data)
        flags = got["flags"].to_numpy()
        for i, row in enumerate(data):
            if any(isinstance(v, str) and v == "x" for v in row) or any(
                isinstance(v, float) and np.isinf(v) for v in row
            ):
                assert flags[i] & F.BAD_INPUT
            if any(isinstance(v, float) and np.isfinite(v) and abs(v) > 40 for v in row):
                assert flags[i] & F.ABSURD_VALUE
