"""Work handed to a second process while this one goes on (the tour's figures).

Drawing a figure is Python work that holds the interpreter lock, so a
thread would not draw beside the computation; a second process does, on
the machine's second core, while the first computes the next step.  On one
usable core (`threads.engine_threads`, so also with ``STELLTEMP_THREADS=1``)
and wherever a process cannot be started, every job runs here, in the
order given, exactly as a plain call.

Each job must write its own output (a figure file, atomically) and return
nothing the caller needs; its error comes back from `Sidecar.finish` as the
same exception (a `~stelltemp.errors.StelltempError` stays one clear line).
A job the second process could not take (its arguments do not pickle, or
the process died) is run here instead.

Examples
--------
>>> with Sidecar(use=False) as side:
...     side.run(print, "drawn here, at once")
drawn here, at once
"""

from __future__ import annotations

import pickle

from .threads import engine_threads

__all__ = ["Sidecar"]


def _warm_up():
    """The imports of a figure job, made while the first process computes its first step."""
    import matplotlib.figure  # noqa: F401
    from astropy.table import Table  # noqa: F401
    from matplotlib.backends import backend_agg  # noqa: F401

    from . import plots  # noqa: F401


class Sidecar:
    """Jobs run in one second process (``use``: default when two or more cores are usable).

    Use as a context manager: leaving the block waits for every job (and
    raises the first job's error); leaving it with an exception cancels the
    jobs not yet started.
    """

    def __init__(self, use=None):
        self._pool = None
        self._jobs = []  # (future, fn, args, kwargs): the job kept to run here if the process dies
        if use is None:
            use = engine_threads() > 1
        if not use:
            return
        try:
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor

            # spawn, not fork: this process may already run threads (the engine's, pyarrow's)
            self._pool = ProcessPoolExecutor(1, mp_context=multiprocessing.get_context("spawn"))
            self._pool.submit(_warm_up)
        except (ImportError, NotImplementedError, OSError, RuntimeError, ValueError):
            self._pool = None

    @property
    def parallel(self):
        """Whether jobs go to the second process."""
        return self._pool is not None

    def run(self, fn, *args, **kwargs):
        """``fn(*args, **kwargs)``: on the second process, or here at once without one."""
        if self._pool is not None:
            try:
                pickle.dumps((fn, args, kwargs))  # what cannot travel is drawn here
                self._jobs.append((self._pool.submit(fn, *args, **kwargs), fn, args, kwargs))
                return
            except Exception:  # noqa: BLE001 - unpicklable, or the pool is broken: here instead
                pass
        fn(*args, **kwargs)

    def finish(self):
        """Wait for every job; a job the second process could not run is run here; the first error is raised."""
        from concurrent.futures.process import BrokenProcessPool

        jobs, self._jobs = self._jobs, []
        error = None
        for future, fn, args, kwargs in jobs:
            try:
                future.result()
            except BrokenProcessPool:  # the second process died: this job is drawn here
                fn(*args, **kwargs)
            except Exception as exc:  # noqa: BLE001 - the job's own error, raised below in order
                error = error or exc
        self.close()
        if error is not None:
            raise error

    def close(self, cancel=False):
        """Stop the second process (``cancel``: jobs not yet started are dropped)."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=cancel)
            self._pool = None

    def __enter__(self):
        return self

    def __exit__(self, kind, value, traceback):
        if kind is None:
            self.finish()
        else:
            self.close(cancel=True)
        return False
