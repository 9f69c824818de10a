"""Heap settings around engine work in Dask workers (`stelltemp.catalog.heap`)."""

import pytest

from stelltemp.catalog import heap


class _FakeLibc:
    def __init__(self):
        self.calls = []

    def mallopt(self, param, value):
        self.calls.append(("mallopt", param, value))
        return 1

    def malloc_trim(self, pad):
        self.calls.append(("trim", pad))
        return 1


@pytest.fixture
def libc(monkeypatch):
    fake = _FakeLibc()
    monkeypatch.setitem(heap._state, "libc", fake)
    monkeypatch.setitem(heap._state, "depth", 0)
    monkeypatch.delenv("STELLTEMP_WORKER_HEAP", raising=False)
    monkeypatch.delenv("MALLOC_MMAP_THRESHOLD_", raising=False)
    return fake


def test_a_worker_environment_is_raised_while_computing_and_restored_after(libc, monkeypatch):
    # dask.distributed's nanny sets MALLOC_TRIM_THRESHOLD_=65536 for its workers (common practice
    # of the distributed defaults, distributed.yaml: nanny.pre-spawn-environ)
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    with heap.engine_heap():
        assert libc.calls == [("mallopt", heap.M_MMAP_THRESHOLD, heap.ENGINE_MMAP_THRESHOLD),
                              ("mallopt", heap.M_TRIM_THRESHOLD, heap.ENGINE_TRIM_THRESHOLD)]
        with heap.engine_heap():  # a second task of the same process: nothing more changes
            assert len(libc.calls) == 2
        assert len(libc.calls) == 2
    assert libc.calls[2:] == [("mallopt", heap.M_MMAP_THRESHOLD, heap.GLIBC_DEFAULT_THRESHOLD),
                              ("mallopt", heap.M_TRIM_THRESHOLD, 65536), ("trim", 0)]
    assert heap._state["depth"] == 0


def test_restored_even_when_the_work_fails(libc, monkeypatch):
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    monkeypatch.setenv("MALLOC_MMAP_THRESHOLD_", "1000000")
    with pytest.raises(RuntimeError), heap.engine_heap():
        raise RuntimeError("engine failed")
    assert libc.calls[-3:] == [("mallopt", heap.M_MMAP_THRESHOLD, 1000000),
                               ("mallopt", heap.M_TRIM_THRESHOLD, 65536), ("trim", 0)]
    assert heap._state["depth"] == 0


@pytest.mark.parametrize("env", [{}, {"MALLOC_TRIM_THRESHOLD_": "65536", "STELLTEMP_WORKER_HEAP": "0"},
                                 {"MALLOC_TRIM_THRESHOLD_": "not a number"}])
def test_nothing_changes_in_an_ordinary_process_or_when_switched_off(libc, monkeypatch, env):
    monkeypatch.delenv("MALLOC_TRIM_THRESHOLD_", raising=False)
    for k, v in env.items():
        monkeypatch.setenv(k, v)
    with heap.engine_heap():
        pass
    assert libc.calls == []


def test_off_glibc_nothing_is_loaded(monkeypatch):
    monkeypatch.setitem(heap._state, "libc", False)
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    assert not heap.wanted()
    with heap.engine_heap():
        pass


def test_the_real_c_library_takes_the_settings():
    # in a child process: fixing a threshold here would switch off glibc's dynamic mmap
    # threshold for the rest of the test run
    import os
    import platform
    import subprocess
    import sys

    if platform.system() != "Linux" or platform.libc_ver()[0] != "glibc":
        pytest.skip("glibc only")
    probe = ("from stelltemp.catalog import heap\n"
             "assert heap.wanted()\n"
             "assert heap._libc().mallopt(heap.M_MMAP_THRESHOLD, heap.GLIBC_DEFAULT_THRESHOLD) == 1\n"
             "with heap.engine_heap():\n"
             "    assert heap._state['depth'] == 1\n"
             "assert heap._state['depth'] == 0\n")
    env = dict(os.environ, MALLOC_TRIM_THRESHOLD_="65536")
    env.pop("STELLTEMP_WORKER_HEAP", None)
    subprocess.run([sys.executable, "-c", probe], env=env, check=True)
