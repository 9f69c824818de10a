"""Jobs on a second process (`stelltemp.sidecar`): done, in order, errors back as they were."""

import os
from pathlib import Path

import pytest

from stelltemp.errors import StelltempError
from stelltemp.safeio import read_text_file
from stelltemp.sidecar import Sidecar


def test_jobs_run_on_the_second_process_and_are_done_when_the_block_ends(tmp_path):
    paths = [tmp_path / f"job{i}.txt" for i in range(3)]
    with Sidecar(use=True) as side:
        assert side.parallel
        for i, path in enumerate(paths):
            side.run(Path(path).write_text, f"job {i}")
    assert [p.read_text() for p in paths] == ["job 0", "job 1", "job 2"]
    assert not side.parallel  # the second process has stopped


def test_a_job_error_comes_back_as_the_same_one_line_error(tmp_path):
    done = tmp_path / "done.txt"
    with pytest.raises(StelltempError, match=r"^cannot read column map /no/such/file.toml: no such file"):
        with Sidecar(use=True) as side:
            side.run(read_text_file, "/no/such/file.toml", "column map")
            side.run(Path(done).write_text, "later jobs still run")
    assert done.read_text() == "later jobs still run"


def test_a_job_that_cannot_travel_runs_here():
    ran = []
    with Sidecar(use=True) as side:
        side.run(lambda: ran.append(os.getpid()))  # a lambda does not pickle
    assert ran == [os.getpid()]


def test_one_usable_core_means_no_second_process(monkeypatch):
    monkeypatch.setenv("STELLTEMP_THREADS", "1")
    ran = []
    with Sidecar() as side:
        assert not side.parallel
        side.run(ran.append, "at once")
        assert ran == ["at once"]  # a plain call, before the block ends


def test_leaving_with_an_error_stops_the_second_process(tmp_path):
    with pytest.raises(KeyError):
        with Sidecar(use=True) as side:
            side.run(Path(tmp_path / "a.txt").write_text, "a")
            raise KeyError("the caller's own error")
    assert not side.parallel
