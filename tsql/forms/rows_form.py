"""The form of an aggregate over rows (``dtw_nearest(id, series)``): one group's series, in id order, in a row.

The host's macro aggregates ``list(series ORDER BY id)`` per group; the UDF answers every item of the
group in 1-based positions of that list, which the macro turns into ids with ``list(id ORDER BY id)``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace
from typing import Any

import numpy as np
import pyarrow as pa

from tsql.forms.arguments import by_settings, checked_arguments, with_arity
from tsql.forms.arrow import single, to_arrow, to_ragged
from tsql.kernels.cancel import checkpoint
from tsql.kernels.ragged import RaggedRecords
from tsql.registry import Function


def rows_udf(fn: Function) -> Callable[..., pa.Array]:
    """The vectorised function a host calls: per row, one group's series (a list of lists), its per-item
    lists (``Param.per_item``, in id order as the series) and the settings."""
    per_item = [p.name for p in fn.params if p.per_item]
    plain = replace(fn, params=tuple(p for p in fn.params if not p.per_item))  # the settings alone

    def udf(items: Any, *columns: Any) -> pa.Array:
        groups = single(items)
        lists = [single(c) for c in columns[: len(per_item)]]

        def run(rows: np.ndarray | None, key: tuple) -> pa.Array:
            take = (lambda c: c) if rows is None else (lambda c: c.take(pa.array(rows)))
            subset, subset_lists = take(groups), [take(c) for c in lists]
            kwargs = checked_arguments(plain, key, fn.name)
            if kwargs is None:
                return pa.nulls(len(subset), type=fn.returns.arrow)
            answers = []
            for i in range(len(subset)):
                given = {
                    n: c[i].values.to_numpy(zero_copy_only=False)
                    for n, c in zip(per_item, subset_lists)
                    if c[i].is_valid
                }
                answers.append(_group(fn, subset[i : i + 1], {**kwargs, **given}))
            return pa.concat_arrays(answers)

        return by_settings(len(groups), columns[len(per_item) :], run)

    return with_arity(udf, fn.udf_name, fn.doc, ["series", *per_item] + [p.name for p in plain.params])


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
