"""Stopping a long kernel call on request.

DuckDB looks at an interrupt only between two calls of a Python function, so
one long call (a DTW pair of 100,000-point series) would run to its end. The
binding wraps every call in :func:`watching`, which notes the database's
:class:`Cancellation` counter as the call starts; ``tsql.interrupt`` bumps the
counter, and long kernels call :func:`checkpoint` between pieces of work.
"""

from __future__ import annotations

import functools
import itertools
import threading
from collections.abc import Callable
from typing import Any

__all__ = ["INTERRUPTED", "Interrupted", "Cancellation", "checkpoint", "current_call", "part_of", "watching"]

#: The message of a tsql call stopped by ``tsql.interrupt``.
INTERRUPTED = "interrupted by tsql.interrupt()"


class Interrupted(Exception):
    """Raised inside a tsql function when ``tsql.interrupt`` was called on its database during the call."""


class Cancellation:
    """Interrupt requests for the tsql functions of one database: a counter that ``tsql.interrupt`` bumps."""

    _keys = itertools.count(1)

    def __init__(self) -> None:
        self.key = next(self._keys)
        self.generation = 0
        self._lock = threading.Lock()

    def bump(self) -> None:
        with self._lock:
            self.generation += 1


_CALL = threading.local()


def checkpoint() -> None:
    """Raise :class:`Interrupted` if an interrupt was requested since this tsql call began.

    For kernels: call it between pieces of work (every 0.1 s or so; in compiled code,
    between calls of the compiled function). It costs well under a microsecond and does
    nothing outside a tsql call.
    """
    call = getattr(_CALL, "state", None)
    if call is not None and call[0].generation != call[1]:
        raise Interrupted(INTERRUPTED)


def current_call() -> tuple | None:
    """The tsql call this thread runs (None outside one), for :func:`part_of` in a thread doing a piece of it."""
    return getattr(_CALL, "state", None)


def part_of(call: tuple | None, work: Callable, *args: Any) -> Any:
    """``work(*args)`` in this thread as part of ``call`` (:func:`current_call` of the thread it came from), so
    that its :func:`checkpoint` sees that call's interrupts."""
    outer = getattr(_CALL, "state", None)
    _CALL.state = call
    try:
        return work(*args)
    finally:
        _CALL.state = outer


def watching(udf: Callable, cancel: Cancellation) -> Callable:
    """``udf`` noting, for :func:`checkpoint`, the counter of ``cancel`` when a call starts."""

    @functools.wraps(udf)  # keeps the signature DuckDB counts arguments by
    def watched(*columns: Any) -> Any:
        outer = getattr(_CALL, "state", None)
        _CALL.state = (cancel, cancel.generation)
        try:
            return udf(*columns)
        finally:
            _CALL.state = outer

    return watched
