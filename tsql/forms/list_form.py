"""The list form ``name(values, ...)``: one vectorised Arrow function per registry entry."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pyarrow as pa

from tsql.forms.arguments import by_settings, checked_arguments, with_arity
from tsql.forms.arrow import row_pieces, single, to_arrow, to_ragged
from tsql.kernels.parallel import cores, run_each
from tsql.kernels.ragged import CACHE_ELEMENTS
from tsql.registry import Function


def list_udf(fn: Function, threads: bool = False) -> Callable[..., pa.Array]:
    """The vectorised function a host calls: one Arrow column per argument for a whole vector of rows.

    Plain parameters are usually the same on every row; rows are grouped by their parameter
    values so the kernel always sees one setting per call. ``threads``: a last column gives the
    host's number of threads, over which a large call is cut
    (:data:`PIECE_ROWS`, :func:`cut_for_threads`); the kernel of one of :data:`CUT_FOR_THREADS` gets its rows
    in pieces of at most about :data:`PIECE_POINTS` elements, whether or not the call is cut.
    """
    n_series = len(fn.series)

    def udf(*columns: Any) -> pa.Array:
        series = [single(c) for c in columns[:n_series]]
        settings = columns[n_series : len(columns) - threads]
        usable = threads_setting(columns[-1]) if threads else 1

        def run(rows: np.ndarray | None, key: tuple) -> pa.Array:
            subset = series if rows is None else [s.take(pa.array(rows)) for s in series]
            return _answer(fn, subset, key, len(series[0]) if rows is None else len(rows), usable)

        return by_settings(len(series[0]), settings, run)

    names = list(fn.series) + [p.name for p in fn.params] + (["threads"] if threads else [])
    return with_arity(udf, fn.udf_name, fn.doc, names)


def threads_setting(column: Any) -> int:
    """The host's number of threads from its column (the same on every row; 1 when empty or NULL)."""
    column = single(column)
    return int(column[0].as_py() or 1) if len(column) else 1


PIECE_ROWS = 256
"""Least rows per piece when a call is cut into one piece per DuckDB thread (see :func:`cut_for_threads`; a call of
fewer than twice as many stays whole: the Python around a kernel would outweigh a smaller piece)."""

CUT_FOR_THREADS = ("change_points", "segments", "screen")
"""Functions of one series whose calls are cut for DuckDB's threads too: their compiled row-by-row kernels let go
of the GIL, and a query of fewer groups than two calls (4,096) would otherwise run on one thread (``screen``: its
search for change points is most of its time)."""


PIECE_POINTS = 4 * CACHE_ELEMENTS
"""Most list elements the kernel of one of :data:`CUT_FOR_THREADS` gets at once (a row is never split), as its
``*_agg`` form's (``forms.agg.ROW_PIECE_POINTS``): the kernel's temporaries (``screen``'s reach a dozen times its
input) stay the same however many and long the call's series are."""


def cut_for_threads(fn: Function) -> bool:
    """Whether a host hands ``fn``'s UDF its number of threads, over which a large call is cut into pieces: a
    function of two series (DuckDB hands over a self-join's pairs from one thread whatever its ``threads``
    setting: the join's source is the small table of series) or one of :data:`CUT_FOR_THREADS`."""
    return (len(fn.series) == 2 or fn.name in CUT_FOR_THREADS) and not fn.special and not fn.sql_body


def _answer(fn: Function, series: list[pa.Array], key: tuple, n_rows: int, threads: int = 1) -> pa.Array:
    kwargs = checked_arguments(fn, key)
    if kwargs is None:  # a NULL argument that has no "not set" meaning
        return pa.nulls(n_rows, type=fn.returns.arrow)
    # a row's answer does not depend on the rows beside it: cut, the call answers as a whole
    threads = min(threads, n_rows // PIECE_ROWS)  # one thread per PIECE_ROWS rows at least
    if fn.name in CUT_FOR_THREADS:  # pieces of about PIECE_POINTS elements, taken by the threads in turn
        bounds = row_pieces(series, PIECE_POINTS, min(threads, cores()))
    else:  # the pair functions' kernels budget their own work: one piece per thread
        pieces = max(1, min(threads, cores()))
        bounds = [(p * n_rows // pieces, (p + 1) * n_rows // pieces) for p in range(pieces)]
    parts: list[pa.Array] = [None] * len(bounds)

    def work(i: int) -> None:
        lo, hi = bounds[i]
        parts[i] = _computed(fn, [s.slice(lo, hi - lo) for s in series], kwargs)

    run_each(work, len(bounds), threads)
    return parts[0] if len(parts) == 1 else pa.concat_arrays(parts)


def _computed(fn: Function, series: list[pa.Array], kwargs: dict) -> pa.Array:
    batches = [to_ragged(s) for s in series]
    result = fn.kernel(*batches, **kwargs)
    valid = batches[0].row_valid
    for b in batches[1:]:
        valid = valid & b.row_valid
    return to_arrow(fn.returns, result, valid)
