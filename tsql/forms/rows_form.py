"""The form of an aggregate over rows (``dtw_nearest(id, series)``): one group's series, in id order, in a row.

The host's macro aggregates ``list(series ORDER BY id)`` per group; the UDF answers every item of the
group in 1-based positions of that list, which the macro turns into ids with ``list(id ORDER BY id)``.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pyarrow as pa

from tsql.forms.arguments import by_settings, checked_arguments, with_arity
from tsql.forms.arrow import single, to_arrow, to_ragged
from tsql.kernels.cancel import checkpoint
from tsql.kernels.ragged import RaggedRecords
from tsql.registry import Function


def rows_udf(fn: Function) -> Callable[..., pa.Array]:
    """The vectorised function a host calls: per row, one group's series (a list of lists) and the settings."""

    def udf(items: Any, *settings: Any) -> pa.Array:
        groups = single(items)

        def run(rows: np.ndarray | None, key: tuple) -> pa.Array:
            subset = groups if rows is None else groups.take(pa.array(rows))
            kwargs = checked_arguments(fn, key)
            if kwargs is None:
                return pa.nulls(len(subset), type=fn.returns.arrow)
            return pa.concat_arrays([_group(fn, subset[i : i + 1], kwargs) for i in range(len(subset))])

        return by_settings(len(groups), settings, run)

    return with_arity(udf, fn.udf_name, fn.doc, ["series"] + [p.name for p in fn.params])


def _group(fn: Function, group: pa.ListArray, kwargs: dict) -> pa.Array:
    """One group's answer: a list of records whose position fields (``fn.positions``) are 1-based."""
    checkpoint()
    if not group.is_valid()[0].as_py():  # an aggregate over no rows
        return pa.nulls(1, type=fn.returns.arrow)
    series = to_ragged(group.flatten())  # the group's own series (``values`` ignores a slice)
    found = fn.kernel(np.arange(series.n_rows), series, **kwargs)
    if "item" not in found:  # one answer per item, ``valid`` where there is one: every item gets a record
        answered = found.pop("valid")
        found = {n: np.where(answered, v, np.nan) for n, v in found.items()}
        found["item"] = np.arange(series.n_rows)
    fields = {n: v + 1 if n in fn.positions else v for n, v in found.items()}
    records = RaggedRecords(fields, np.array([0, len(fields["item"])], dtype=np.int64), np.ones(1, dtype=bool))
    return to_arrow(fn.returns, records, np.ones(1, dtype=bool))
