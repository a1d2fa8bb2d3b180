"""The list form ``name(values, ...)``: one vectorised Arrow function per registry entry."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pyarrow as pa

from tsql.forms.arguments import by_settings, checked_arguments, with_arity
from tsql.forms.arrow import single, to_arrow, to_ragged
from tsql.registry import Function


def list_udf(fn: Function) -> Callable[..., pa.Array]:
    """The vectorised function a host calls: one Arrow column per argument for a whole vector of rows.

    Plain parameters are usually the same on every row; rows are grouped by their parameter
    values so the kernel always sees one setting per call.
    """
    n_series = len(fn.series)

    def udf(*columns: Any) -> pa.Array:
        series = [single(c) for c in columns[:n_series]]

        def run(rows: np.ndarray | None, key: tuple) -> pa.Array:
            subset = series if rows is None else [s.take(pa.array(rows)) for s in series]
            return _answer(fn, subset, key, len(series[0]) if rows is None else len(rows))

        return by_settings(len(series[0]), columns[n_series:], run)

    return with_arity(udf, fn.udf_name, fn.doc, list(fn.series) + [p.name for p in fn.params])


def _answer(fn: Function, series: list[pa.Array], key: tuple, n_rows: int) -> pa.Array:
    kwargs = checked_arguments(fn, key)
    if kwargs is None:  # a NULL argument that has no "not set" meaning
        return pa.nulls(n_rows, type=fn.returns.arrow)
    batches = [to_ragged(s) for s in series]
    result = fn.kernel(*batches, **kwargs)
    valid = batches[0].row_valid
    for b in batches[1:]:
        valid = valid & b.row_valid
    return to_arrow(fn.returns, result, valid)
