"""The ``*_agg`` forms and ``on_grid``: each group's (ticks, values) -> its regular grid -> the kernel -> an answer.

A host hands over each group's ticks and values as two :class:`~tsql.kernels.ragged.Ragged`
batches with the same offsets (rows in no particular order: the grid sorts them), the
:class:`~tsql.forms.time.Clock` of the time column and the plain arguments. Lengths of time
(``period``, ``min_period`` ...) may be INTERVALs for temporal times; a number counts grid steps,
as in the list forms. How the answer is put in time terms is the entry's
:class:`~tsql.forms.answers.Answer`.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import partial

import numpy as np
import pyarrow as pa

from tsql.forms.answers import Answer
from tsql.forms.arguments import argument_problem, by_keys, check_argument, checked_arguments
from tsql.forms.arrow import to_arrow_list
from tsql.forms.time import Clock, Span, moment_text, span_in_steps, static_span, step
from tsql.kernels.grid import Grid, RepeatedTime, on_grid
from tsql.kernels.ragged import CACHE_ELEMENTS, Ragged
from tsql.registry import FILL, SAME_TIME, Function

PIECE_POINTS = CACHE_ELEMENTS
"""Observations per piece of a call (a group is never split): the work stays in cache."""

ROW_PIECE_POINTS = 4 * CACHE_ELEMENTS
"""The same for :data:`ROW_BY_ROW`, whose kernels work row by row and pay a cost per call (the search for
change points screens the call's rows for a cycle first): a quarter of the calls, about a tenth less time
through GROUP BY (``benchmarks.change_points_sql``)."""

ROW_BY_ROW = ("change_points", "segments", "screen")
"""Functions whose calls are also cut for DuckDB's threads (the UDF takes ``current_setting('threads')``; see
``forms.list_form.CUT_FOR_THREADS``); ``screen`` runs the search for change points among its diagnostics."""

STEPPED_PIECE_POINTS = 4 * CACHE_ELEMENTS
"""The same for :data:`STEPPED`, whose kernels are many small numpy steps over all the rows at once (the periodogram's
peak refined off the grid) with Python between them that holds the GIL: in pieces four times larger they take
a tenth to a fifth less CPU time (4,096 groups of 500 points, one thread), and the steps hold the GIL
fewer times, so DuckDB's threads run their calls at once more."""

STEPPED = ("seasonality", "dominant_period")


Settings = tuple[Span | None, str | None, str | None]
"""The grid's settings as a host hands them over: the step (a span), ``fill`` and ``same_time``."""


def grid_of(function: str, clock: Clock, settings: Settings, ticks: Ragged, values: Ragged) -> Grid:
    """Each group on its regular grid; errors name ``function``."""
    span, fill, same_time = settings
    months, length = step(function, clock, span)
    fill = check_argument(function, FILL, fill if fill is not None else "null")
    same_time = check_argument(function, SAME_TIME, same_time if same_time is not None else "mean")
    try:
        return on_grid(ticks, values, clock.temporal, months, length, fill, same_time)
    except RepeatedTime as error:
        first, second = (moment_text(clock, t) for t in error.ticks)
        where = f"at {first}" if first == second else f"at {first} and {second}, on one grid point"
        raise ValueError(
            f"{function}: several rows {where} (same_time := 'error'); aggregate them first, or say how to "
            "combine them: same_time := 'mean', 'sum' (counts), 'first' or 'last'"
        ) from None
    except ValueError as error:
        raise ValueError(f"{function}: {error}") from None


class AggForm:
    """``<name>_agg`` of one registry entry, answering as ``answer`` says (default: the entry's own)."""

    def __init__(self, fn: Function, answer: Answer | None = None):
        self.fn = fn
        self.name = f"{fn.name}_agg"
        self.answer = answer or fn.answer
        self.piece_points = (
            ROW_PIECE_POINTS if fn.name in ROW_BY_ROW else STEPPED_PIECE_POINTS if fn.name in STEPPED else PIECE_POINTS
        )

    def __call__(
        self,
        clock: Clock,
        settings: Settings,
        arguments: tuple,
        ticks: Ragged,
        values: Ragged | tuple[Ragged, ...],
    ) -> pa.Array:
        """The answers of a batch of groups that share their settings (the grid's, and the plain ``arguments``).

        A function of several series (``cross_correlation``) gets a tuple of values, one per series, all at
        ``ticks``: each goes on the grid its times make (the same for all), the kernel takes them in order.
        """
        fn = self.fn
        grids = [
            grid_of(self.name, clock, settings, ticks, v) for v in (values if isinstance(values, tuple) else (values,))
        ]
        grid = grids[0]
        per_row = [
            span_in_steps(self.name, p.name, p.minimum, clock, grid, value, p.choices, p.whole) if p.span else value
            for p, value in zip(fn.params + fn.time_params, arguments)
        ]
        n_rows = grid.values.n_rows
        if n_rows and not any(isinstance(a, np.ndarray) for a in per_row):  # the same arguments on every row
            columns = [[a] for a in per_row]
        else:
            columns = [a if isinstance(a, np.ndarray) else [a] * n_rows for a in per_row]
        keys = [tuple(None if (isinstance(x, float) and np.isnan(x)) else x for x in row) for row in zip(*columns)]

        def call(rows: np.ndarray | None, key: tuple) -> pa.Array:
            kwargs = checked_arguments(fn, key, self.name, agg=True)
            sub, *others = grids if rows is None else [g.take(rows) for g in grids]
            if kwargs is None:
                return pa.nulls(sub.values.n_rows, type=self.answer.udf_returns(fn.returns).arrow)
            kernel = fn.kernel
            if others:
                kernel = partial(_with_others, kernel, [g.values for g in others])
            return self.answer.compute(kernel, fn.returns, clock, sub, kwargs)

        return by_keys(keys or [()] * n_rows, call)


def _with_others(kernel: Callable, others: list[Ragged], values: Ragged, **kwargs) -> object:
    """``kernel(values, *others)``: the first series of a function of several, the others beside it."""
    return kernel(values, *others, **kwargs)


def agg_problem(
    name: str, fn: Function | None, clock: Callable[[], Clock], settings: Settings, arguments: tuple
) -> str | None:
    """What an ``*_agg`` call (or ``on_grid``: ``fn`` None) would refuse before looking at its data; None if nothing.

    The time type (``clock()``), the grid's settings (step, ``fill``, ``same_time``) and the plain arguments; a
    length of time given as an INTERVAL is checked here only as a span (whether it fits a group's grid depends
    on its data).
    """
    span, fill, same_time = settings
    try:
        clocked = clock()
        if clocked.kind is None:  # an aggregate over no rows answers NULL
            return None
        step(name, clocked, span)
        check_argument(name, FILL, fill if fill is not None else "null")
        check_argument(name, SAME_TIME, same_time if same_time is not None else "mean")
        if fn is None:
            return None
        key = []
        for p, value in zip(fn.params, arguments):
            if p.span:
                value = static_span(name, p.name, clocked, value, p.choices)
                if value is ...:  # an INTERVAL: its count of grid steps depends on the data
                    return _each_plain(name, fn, arguments)
            key.append(value)
    except ValueError as error:
        return str(error)
    return argument_problem(fn, tuple(key), name)


def _each_plain(name: str, fn: Function, arguments: tuple) -> str | None:
    """The plain (not span) arguments checked one by one."""
    try:
        for p, value in zip(fn.params, arguments):
            if not p.span and value is not None:
                check_argument(name, p, value)
    except ValueError as error:
        return str(error)
    return None


def on_grid_values(clock: Callable[[], Clock], settings: Settings, times: Ragged, values: Ragged) -> pa.Array:
    """``on_grid(values, times)``: rows pair values with ticks element by element (NULL on either side: NULL).

    ``clock()`` gives the times' clock once their lengths are found to pair up.
    """
    valid = values.row_valid & times.row_valid
    if not np.array_equal(values.lengths[valid], times.lengths[valid]):
        raise ValueError("on_grid: values and times must have the same length in every row")
    v, t = Ragged(values.values, values.offsets, valid), Ragged(times.values, times.offsets, valid)
    if (v.lengths != t.lengths).any():  # a NULL row on one side only
        keep = np.flatnonzero(valid)
        v, t = _with_rows(v.take(keep), len(valid), keep), _with_rows(t.take(keep), len(valid), keep)
    return to_arrow_list(grid_of("on_grid", clock(), settings, t, v).values)


def _with_rows(batch: Ragged, n_rows: int, rows: np.ndarray) -> Ragged:
    """``batch`` (holding ``rows`` of a larger batch) spread back to ``n_rows`` rows, the others empty and invalid."""
    lengths = np.zeros(n_rows, dtype=np.int64)
    lengths[rows] = batch.lengths
    offsets = np.zeros(n_rows + 1, dtype=np.int64)
    np.cumsum(lengths, out=offsets[1:])
    valid = np.zeros(n_rows, dtype=bool)
    valid[rows] = True
    return Ragged(batch.values, offsets, valid)
