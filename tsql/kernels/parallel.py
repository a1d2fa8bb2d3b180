"""Pieces of one kernel call on every core: compiled ``nogil`` functions run from a pool of Python threads.

Kernels do not use numba's ``parallel=True``: it multiplies compile time, and DuckDB already runs a
UDF from each of its threads (a ``nogil`` kernel lets those calls run at once). Only work that
arrives as one call for a whole query (``dtw_nearest`` over all items) or that DuckDB hands over from
one thread (the pairs of a self-join: ``forms.list_form``) is cut into pieces here.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

from tsql.kernels import cancel

__all__ = ["cores", "run_pieces"]

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
    owns, so that no answer depends on which thread ran which piece. The calling thread does the first
    piece; the others run on the pool as part of the calling tsql call (their
    :func:`~tsql.kernels.cancel.checkpoint` sees its interrupts). Returns when every piece is done; an
    exception of a piece is raised here.
    """
    global _pool
    size = stop - first
    bounds = [(first + p * size // pieces, first + (p + 1) * size // pieces) for p in range(pieces)]
    threads = _threads()
    if threads == 1 or size < 2:
        for a, b in bounds:
            work(a, b)
        return
    with _lock:
        if _pool is None:
            _pool = ThreadPoolExecutor(max_workers=threads, thread_name_prefix="tsql-piece")
        pool = _pool
    call = cancel.current_call()  # a piece sees the interrupts of the call it belongs to
    futures = [pool.submit(cancel.part_of, call, work, a, b) for a, b in bounds[1:]]
    errors = []
    try:
        work(*bounds[0])  # the calling thread does the first piece
    except Exception as error:
        errors.append(error)
    for future in futures:
        try:
            future.result()
        except Exception as error:
            errors.append(error)
    if errors:  # the first piece's, as if they had run in order
        raise errors[0]


def _after_fork_in_child() -> None:
    global _pool, _lock
    _pool = None  # the parent's threads do not exist in the child
    _lock = threading.Lock()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_after_fork_in_child)
