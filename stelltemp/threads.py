"""Threads for the engine's blocks of stars and a catalogue's chunks, results in order.

The compiled kernels release the GIL (numba ``nogil``) and numpy's
operations on large arrays do too, so independent blocks of stars run
side by side on the machine's cores: measured on 2 cores, `estimate` with
2 bands over 1e6 stars in blocks of 65,536 took 2.35–3.33 s on two
threads against 4.06–5.01 s on one (1.5–1.7×, same run).  Each block is
computed exactly as it would be alone, so the results are the same bits
whatever the number of threads (``tests/test_threads.py``).

The number of threads is the number of cores this process may use (at
most `MAX_DEFAULT`), or ``STELLTEMP_THREADS``.  Work that is already
spread over processes, a Dask worker's partitions, runs inside
`single_thread` (one core per worker), and so does the work of a thread
started here: blocks inside a catalogue chunk that is itself on a thread
do not start threads of their own.
"""

from __future__ import annotations

import collections
import contextlib
import os
import threading

from .errors import StelltempError

#: environment variable: the number of threads (a whole number, at least 1)
ENV = "STELLTEMP_THREADS"
#: at most this many threads unless `ENV` asks for more
MAX_DEFAULT = 8
#: fewest stars worth a thread of their own (below it, starting the thread costs more than it saves)
MIN_ROWS_PER_THREAD = 1 << 14

_local = threading.local()


def engine_threads():
    """Threads the engine may use here: 1 inside `single_thread`, else `ENV` or the usable cores.

    Raises
    ------
    StelltempError
        ``STELLTEMP_THREADS`` is set to something other than a whole number ≥ 1.

    Examples
    --------
    >>> with single_thread():
    ...     engine_threads()
    1
    """
    if getattr(_local, "depth", 0):
        return 1
    text = os.environ.get(ENV, "").strip()
    if text:
        try:
            count = int(text)
        except ValueError:
            count = 0
        if count < 1:
            raise StelltempError(f"{ENV} must be a whole number of at least 1, got {text!r}")
        return count
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        cores = os.cpu_count() or 1
    return max(1, min(cores, MAX_DEFAULT))


@contextlib.contextmanager
def single_thread():
    """The enclosed work of this thread starts no threads (`engine_threads` is 1); re-entrant."""
    _local.depth = getattr(_local, "depth", 0) + 1
    try:
        yield
    finally:
        _local.depth -= 1


def in_order(submit, items, ahead):
    """``submit(item).result()`` for every item, in order, with at most `ahead` submitted and unread.

    ``submit`` returns a future (`concurrent.futures`, dask.distributed);
    items are taken from the iterable only as room frees up, so a stream of
    chunks is read no further ahead than that.  Futures still waiting when
    the caller stops early are cancelled.
    """
    waiting = collections.deque()
    try:
        for item in items:
            waiting.append(submit(item))
            if len(waiting) >= ahead:
                yield waiting.popleft().result()
        while waiting:
            yield waiting.popleft().result()
    finally:
        for future in waiting:
            future.cancel()


def ordered_map(fn, items, threads=None):
    """``fn(item)`` for every item, in order, on up to ``threads`` threads (default `engine_threads`).

    One thread: a plain loop here.  More: a pool of that many threads, one
    more item submitted than threads (the next is ready when one finishes),
    each call inside `single_thread`.

    Examples
    --------
    >>> list(ordered_map(lambda k: k * k, range(5), threads=2))
    [0, 1, 4, 9, 16]
    """
    threads = engine_threads() if threads is None else int(threads)
    if threads <= 1:
        yield from map(fn, items)
        return
    from concurrent.futures import ThreadPoolExecutor

    def alone(item):
        with single_thread():
            return fn(item)

    pool = ThreadPoolExecutor(threads, thread_name_prefix="stelltemp")
    try:
        yield from in_order(lambda item: pool.submit(alone, item), items, threads + 1)
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def split_rows(n, min_rows, threads=None):
    """Slices of ``n`` rows as equal as can be, one per thread (default `engine_threads`), none under ``min_rows``.

    For a compiled loop over independent stars: each slice is computed
    exactly as the whole would be, so the split changes no bit.

    Examples
    --------
    >>> split_rows(100, 30, threads=2), split_rows(100, 60, threads=2)
    ([slice(0, 50, None), slice(50, 100, None)], [slice(0, 100, None)])
    """
    threads = engine_threads() if threads is None else int(threads)
    count = max(1, min(threads, n // max(1, min_rows)))
    edges = [k * n // count for k in range(count + 1)]  # sizes differ by one at most
    return [slice(lo, hi) for lo, hi in zip(edges[:-1], edges[1:])]


def run_split(fn, n, min_rows):
    """``fn(rows)`` for each slice of `split_rows`, side by side; for work that writes its own output."""
    for _ in ordered_map(fn, split_rows(n, min_rows)):
        pass


__all__ = ["ENV", "MIN_ROWS_PER_THREAD", "engine_threads", "in_order", "ordered_map", "run_split", "single_thread", "split_rows"]
