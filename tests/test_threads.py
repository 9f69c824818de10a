"""Blocks of stars and catalogue chunks on several threads: same results, in order, bounded."""

import threading

import numpy as np
import pytest

from stelltemp import engine
from stelltemp.catalog import run_catalogue
from stelltemp.catalog import batch
from stelltemp.catalog.batch import NOTES_COLUMN
from stelltemp.catalog.tableio import read_table
from stelltemp.errors import StelltempError
from stelltemp.threads import ENV, engine_threads, in_order, ordered_map, single_thread


@pytest.mark.parametrize("threads", [1, 2, 3])
def test_results_come_in_order_and_nested_work_is_single_threaded(threads):
    def work(k):
        return k * k, engine_threads(), threading.current_thread().name

    out = list(ordered_map(work, range(20), threads=threads))
    assert [r[0] for r in out] == [k * k for k in range(20)]
    if threads > 1:  # each call on a pool thread, which starts no threads of its own
        assert all(r[1] == 1 and r[2].startswith("stelltemp") for r in out)


def test_items_are_taken_only_as_room_frees_up():
    taken = []

    def items():
        for k in range(10):
            taken.append(k)
            yield k

    class Done:
        def __init__(self, value):
            self.value = value

        def result(self):
            return self.value

        def cancel(self):
            pass

    stream = in_order(Done, items(), ahead=3)
    assert next(stream) == 0 and taken == [0, 1, 2]  # three submitted before the first is read
    assert next(stream) == 1 and taken == [0, 1, 2, 3]
    assert list(stream) == list(range(2, 10))


def test_an_error_on_a_thread_reaches_the_caller_and_stops_the_rest():
    started = []

    def work(k):
        started.append(k)
        if k == 3:
            raise StelltempError("row block 3 is broken")
        return k

    with pytest.raises(StelltempError, match="block 3"):
        list(ordered_map(work, range(100), threads=2))
    assert len(started) < 10  # the waiting ones were cancelled, the stream not read on


def test_thread_count_from_the_environment(monkeypatch):
    monkeypatch.setenv(ENV, "3")
    assert engine_threads() == 3
    with single_thread(), single_thread():
        assert engine_threads() == 1
    assert engine_threads() == 3
    for bad in ("0", "two", "-1", "1.5"):
        monkeypatch.setenv(ENV, bad)
        with pytest.raises(StelltempError, match=f"{ENV} must be a whole number of at least 1") as err:
            engine_threads()
        assert "\n" not in str(err.value)


def _same(a, b):
    assert a.colnames == b.colnames
    for name in a.colnames:
        x, y = np.asarray(getattr(a[name], "value", a[name])), np.asarray(getattr(b[name], "value", b[name]))
        if x.dtype.kind == "f":
            assert np.array_equal(x, y, equal_nan=True), name
        else:
            assert (x == y).all(), name
    assert a.meta["flag_summary"] == b.meta["flag_summary"] and a.meta["assumptions"] == b.meta["assumptions"]


def test_estimate_in_blocks_gives_the_same_bits_on_any_number_of_threads(monkeypatch):
    # invented stars: B and V of blackbodies, noisy, some rows bad (to carry flags and notes)
    rng = np.random.default_rng(11)
    n = 5_000
    v = rng.uniform(8, 14, n)
    bv = rng.uniform(-0.2, 1.6, n)
    bv[::97] = np.nan
    mags = {"B_JC": v + bv, "V_JC": v}
    errs = {"B_JC": np.full(n, 0.02), "V_JC": rng.uniform(0.01, 0.04, n)}
    ebv = rng.uniform(0, 0.5, n)
    monkeypatch.setattr(engine, "BLOCK_ROWS", 700)  # eight blocks on one thread, nine on three
    monkeypatch.setattr(engine, "MIN_THREAD_BLOCK", 500)
    runs = []

    def counted(fn, items, threads):
        runs.append((threads, len(items)))
        return ordered_map(fn, items, threads)

    monkeypatch.setattr(engine, "ordered_map", counted)
    monkeypatch.setenv(ENV, "1")
    one = engine.estimate(mags, errs, ebv=ebv, ebv_err=0.03)
    monkeypatch.setenv(ENV, "3")
    three = engine.estimate(mags, errs, ebv=ebv, ebv_err=0.03)
    assert runs == [(1, 8), (3, 9)]
    assert len(one) == n
    _same(one, three)


def test_catalogue_chunks_on_threads_keep_rows_notes_and_order(tmp_path, monkeypatch):
    # invented catalogue with malformed lines in later chunks: their notes must stay on their rows
    rng = np.random.default_rng(5)
    n = 60_000  # about 2 MB: the CSV reader reads blocks of at least 1 MB, so several chunks
    v = rng.uniform(8, 14, n)
    bv, ebv = rng.uniform(-0.1, 1.5, n), rng.uniform(0, 0.4, n)
    lines = ["id,B_JC,V_JC,ebv"] + [f"{k},{v[k] + bv[k]:.4f},{v[k]:.4f},{ebv[k]:.3f}" for k in range(n)]
    lines[20_001] = "20000,12.0"  # too few fields
    lines[50_001] = "50000,11.0,10.5,0.1,extra"  # too many
    src = tmp_path / "in.csv"
    src.write_text("\n".join(lines) + "\n")
    where = []
    real = batch.compute_chunk

    def compute_chunk(*args):
        where.append(threading.current_thread().name)
        return real(*args)

    monkeypatch.setattr(batch, "compute_chunk", compute_chunk)
    outs = {}
    for threads in ("1", "2"):
        monkeypatch.setenv(ENV, threads)
        outs[threads] = tmp_path / f"out{threads}.parquet"
        summary = run_catalogue(src, outs[threads], ebv="ebv", chunk_rows=100, quiet=True)
        assert summary.rows == n
    chunks = len(where) // 2
    assert chunks >= 2 and where[:chunks] == ["MainThread"] * chunks
    assert all(name.startswith("stelltemp") for name in where[chunks:])
    one, two = read_table(outs["1"]), read_table(outs["2"])
    assert list(two["id"]) == list(range(n))
    for name in one.colnames:
        x, y = np.asarray(one[name]), np.asarray(two[name])
        assert (np.array_equal(x, y, equal_nan=True) if x.dtype.kind == "f" else (x == y).all()), name
    notes = np.asarray(two[NOTES_COLUMN])
    assert "line 20002" in notes[20_000] and "line 50002" in notes[50_000]
    assert sum("field(s) for" in text for text in notes) == 2


def test_a_bad_thread_count_stops_a_catalogue_run_with_no_output(tmp_path, monkeypatch):
    src = tmp_path / "in.csv"
    src.write_text("B_JC,V_JC\n11.0,10.5\n")
    monkeypatch.setenv(ENV, "many")
    with pytest.raises(StelltempError, match=ENV):
        run_catalogue(src, tmp_path / "out.csv", quiet=True)
    assert not (tmp_path / "out.csv").exists()


def test_split_rows_covers_every_row_once():
    from stelltemp.threads import split_rows

    for n in (0, 1, 5, 99, 100, 101, 1000):
        for threads in (1, 2, 3, 8):
            parts = split_rows(n, 10, threads=threads)
            rows = np.concatenate([np.arange(n)[p] for p in parts])
            assert list(rows) == list(range(n))
            assert len(parts) <= max(1, threads) and (n < 20 or all(p.stop - p.start >= 10 for p in parts))


def test_an_inversion_split_over_threads_equals_one_thread(monkeypatch):
    pytest.importorskip("numba")
    from stelltemp import kernels
    from stelltemp.engine import colour as col

    monkeypatch.setattr(kernels, "MIN_ROWS", 0)
    monkeypatch.setattr(col, "MIN_ROWS_PER_THREAD", 100)
    rng = np.random.default_rng(4)
    c = rng.uniform(-0.5, 2.5, 1001)
    e = rng.uniform(0, 2, 1001)
    c[::50] = np.nan
    monkeypatch.setenv(ENV, "3")
    split = col.invert_colour(c, "B_JC", "V_JC", e)
    monkeypatch.setenv(ENV, "1")
    whole = col.invert_colour(c, "B_JC", "V_JC", e)
    for a, b in zip(split, whole):
        assert np.array_equal(a, b, equal_nan=True)
