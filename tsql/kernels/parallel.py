"""When numba's parallel kernels may run on many threads: one batch at a time, and not after a fork of OpenMP."""

from __future__ import annotations

import os
import threading

import numba

__all__ = ["forked_after_openmp", "kernel_lock"]

# numba releases the GIL around a parallel region (nogil or not), so two Python threads (DuckDB
# runs a UDF from several of its own) could enter the threading layer at once, which its
# 'workqueue' layer (used where neither TBB nor OpenMP loads) answers by aborting the process.
# Calls of parallel kernels therefore take turns; each already keeps every core busy.
_lock = threading.Lock()

# True in a process forked from one that had loaded numba's OpenMP threading layer: GNU OpenMP
# cannot run after such a fork (numba terminates the process), so there the rows run on the
# calling thread. Inherited by further forks.
_forked_after_openmp = False


def kernel_lock() -> threading.Lock:
    """The lock every call of a parallel (``prange``) kernel holds."""
    return _lock


def forked_after_openmp() -> bool:
    """Whether this process must run its parallel kernels' rows on the calling thread instead."""
    return _forked_after_openmp


def _openmp_layer_loaded() -> bool:
    try:
        return numba.threading_layer() == "omp"
    except ValueError:  # no parallel function has run in this process yet
        return False


def _after_fork_in_child() -> None:
    global _forked_after_openmp, _lock
    _forked_after_openmp = _forked_after_openmp or _openmp_layer_loaded()
    _lock = threading.Lock()  # another thread of the parent may have held it


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_after_fork_in_child)
