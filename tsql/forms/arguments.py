"""Plain arguments: checked against their :class:`~tsql.registry.Param`, and rows grouped by their values."""

from __future__ import annotations

import inspect
from collections.abc import Callable
from typing import Any

import numpy as np
import pyarrow as pa

from tsql.forms.arrow import scalar_parameter, single
from tsql.kernels.cancel import checkpoint
from tsql.registry import Function, Param


def with_arity(udf: Callable, name: str, doc: str, argument_names: list[str]) -> Callable:
    """Name ``udf`` and give it a signature of exactly these arguments (DuckDB checks the arity)."""
    udf.__name__ = name
    udf.__doc__ = doc
    positional = inspect.Parameter.POSITIONAL_ONLY
    udf.__signature__ = inspect.Signature([inspect.Parameter(n, positional) for n in argument_names])
    return udf


def by_settings(n_rows: int, setting_columns: Any, run: Callable[[np.ndarray | None, tuple], pa.Array]) -> pa.Array:
    """Call ``run(rows, settings)`` once per distinct tuple of plain arguments and reassemble the rows.

    Plain parameters are usually the same on every row (``rows`` is then None: all of them).
    """
    columns = [single(c) for c in setting_columns]
    if n_rows and all(_constant(c) for c in columns):  # the usual case, without a Python object per row
        return run(None, tuple(scalar_parameter(c.slice(0, 1))[0] for c in columns))
    settings = [scalar_parameter(c) for c in columns]
    return by_keys(list(zip(*settings)) if settings else [()] * n_rows, run)


def _constant(column: pa.Array) -> bool:
    """Whether every row holds the same value (or every row is NULL): each row equals the next."""
    n = len(column)
    return n <= 1 or column.slice(1).equals(column.slice(0, n - 1))


def by_keys(keys: list[tuple], run: Callable[[np.ndarray | None, tuple], pa.Array]) -> pa.Array:
    """Call ``run(rows, key)`` once per distinct key (one per row) and put the rows back in order."""
    distinct = dict.fromkeys(keys)
    if len(distinct) <= 1:
        return run(None, next(iter(distinct), ()))
    groups: dict[tuple, list[int]] = {key: [] for key in distinct}
    for i, key in enumerate(keys):
        groups[key].append(i)
    parts, order = [], []
    for key, members in groups.items():
        checkpoint()
        rows = np.asarray(members, dtype=np.int64)
        parts.append(run(rows, key))
        order.append(rows)
    joined = pa.concat_arrays(parts)
    return joined.take(pa.array(np.argsort(np.concatenate(order), kind="stable")))


def checked_arguments(fn: Function, key: tuple, name: str | None = None, agg: bool = False) -> dict | None:
    """The plain arguments as keyword arguments for the kernel, checked; None when a NULL one makes the row NULL.

    Errors name ``name`` (default: the function's own name; the *_agg forms pass theirs). ``agg``: ``key``
    also holds the ``*_agg`` form's ``time_params``, for its answer kind.
    """
    name = name or fn.name
    kwargs = {}
    for p, value in zip(fn.params + fn.time_params if agg else fn.params, key):
        if value is None:
            if not p.none_ok:
                return None
            kwargs[p.name] = None
            continue
        kwargs[p.name] = check_argument(name, p, value)
    for smaller, larger, message in fn.relations:
        a, b = kwargs.get(smaller), kwargs.get(larger)
        if a is not None and b is not None and b < a:
            raise ValueError(f"{name}: {message}, got {smaller} = {_show(a)} and {larger} = {_show(b)}")
    problem = fn.check(kwargs) if fn.check else None
    if problem:
        raise ValueError(f"{name}: {problem}")
    return kwargs


def check_argument(function: str, p: Param, value: Any) -> Any:
    """Validate one plain argument; raise ``ValueError`` naming what is allowed."""
    if p.choices:
        if value in p.choices:
            return value
        allowed = ", ".join(repr(c) for c in p.choices)
        if not p.number_ok:
            raise ValueError(f"{function}: {p.name} must be one of {allowed}, got {value!r}")
        try:
            value = float(value)
        except ValueError:
            raise ValueError(f"{function}: {p.name} must be one of {allowed} or a number, got {value!r}") from None
    if isinstance(value, float) and not np.isfinite(value):
        raise ValueError(f"{function}: {p.name} must be a finite number, got {value}")
    if p.whole:
        if float(value) != int(value):
            raise ValueError(f"{function}: {p.name} must be a whole number, got {_show(value)}")
        value = int(value)
    if p.minimum is not None and value < p.minimum:
        raise ValueError(f"{function}: {p.name} must be >= {_show(p.minimum)}, got {_show(value)}")
    if p.maximum is not None and value > p.maximum:
        raise ValueError(f"{function}: {p.name} must be <= {p.maximum:,g}, got {_show(value)}")
    return value


def _show(x: Any) -> str:
    return str(int(x)) if isinstance(x, float) and x.is_integer() else str(x)


def argument_problem(fn: Function, key: tuple, name: str | None = None) -> str | None:
    """What :func:`checked_arguments` would refuse in ``key``, as a message; None when the arguments are fine.

    A host raises it in its own terms (DuckDB: the macro's ``error(...)``), before any series is touched.
    """
    try:
        checked_arguments(fn, key, name)
    except ValueError as error:
        return str(error)
    return None
