"""Pieces of one kernel call on every core: compiled ``nogil`` functions run from a pool of Python threads.

Kernels do not use numba's ``parallel=True``: it multiplies compile time, and DuckDB already runs a
UDF from each of its threads (a ``nogil`` kernel lets those calls run at once). Only work that
arrives as one call for a whole query (``dtw_nearest`` over all items), that DuckDB hands over from
one thread (the pairs of a self-join: ``forms.list_form``) or in calls too few for its threads (the
screen's, ``forms.agg.ROW_BY_ROW``) is cut into pieces here; each thread takes the next piece left.
"""

from __future__ import annotations

import itertools
import os
import threading
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

from tsql.kernels import cancel

__all__ = ["cores", "run_each", "run_pieces"]

_lock = threading.Lock()
_pool: ThreadPoolExecutor | None = None


def cores() -> int:
    """The cores this process may run on (the pool's size)."""
    return _threads()


def _threads() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def run_pieces(work: Callable[[int, int], object], first: int, stop: int, pieces: int) -> None:
    """Call ``work(a, b)`` on ``pieces`` consecutive ranges covering ``first..stop``, on all cores.

    ``work`` must release the GIL (a ``nogil`` compiled function) and write only what its own range
    owns, so that no answer depends on which thread ran which piece. See :func:`run_each`.
    """
    size = stop - first
    bounds = [(first + p * size // pieces, first + (p + 1) * size // pieces) for p in range(pieces)]
    if size < 2:
        for a, b in bounds:
            work(a, b)
        return
    run_each(lambda p: work(*bounds[p]), pieces, pieces)


def run_each(work: Callable[[int], object], count: int, threads: int) -> None:
    """Call ``work(i)`` for every ``i`` in ``range(count)`` on up to ``threads`` threads (at most one per core).

    Each thread takes the next ``i`` no thread has taken yet, so all stay busy until the last piece
    whatever each piece costs. ``work`` should spend its time in code that lets go of the GIL (compiled
    ``nogil`` functions, numpy over large arrays) and write only what piece ``i`` owns, so that no answer
    depends on which thread ran which piece. The calling thread takes part; the others run on the pool
    as part of the calling tsql call (their :func:`~tsql.kernels.cancel.checkpoint` sees its
    interrupts). Returns when every piece is done; the exception of the first failed piece (by ``i``)
    is raised here.
    """
    global _pool
    threads = min(threads, count, cores())
    if threads <= 1:
        for i in range(count):
            work(i)
        return
    with _lock:
        if _pool is None:
            _pool = ThreadPoolExecutor(max_workers=_threads(), thread_name_prefix="tsql-piece")
        pool = _pool
    taken = itertools.count()  # next() on it is atomic: each i goes to one thread
    errors: dict[int, Exception] = {}

    def take() -> None:
        while (i := next(taken)) < count:
            try:
                work(i)
            except Exception as error:
                errors[i] = error

    call = cancel.current_call()  # a piece sees the interrupts of the call it belongs to
    futures = [pool.submit(cancel.part_of, call, take) for _ in range(threads - 1)]
    take()  # the calling thread takes pieces too
    for future in futures:
        future.result()
    if errors:  # the first piece's, as if they had run in order
        raise errors[min(errors)]


def _after_fork_in_child() -> None:
    global _pool, _lock
    _pool = None  # the parent's threads do not exist in the child
    _lock = threading.Lock()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_after_fork_in_child)
