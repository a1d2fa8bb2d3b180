"""Spark host: every tsql function in a Spark session, as vectorised Arrow UDFs over :mod:`tsql.forms`.

``tsql.spark.register(spark)``; how to call the functions and how they differ from DuckDB's: docs/spark.md.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from tsql.forms.agg import AggForm, on_grid_values
from tsql.forms.arguments import by_settings
from tsql.forms.arrow import scalar_parameter, to_ragged
from tsql.forms.list_form import list_udf
from tsql.forms.time import Clock, arrow_clock, read_span, ticks_of, times_of, whole_days
from tsql.forms.types import BOOLEAN, DOUBLE, SPAN_ARGUMENT
from tsql.kernels.ragged import Ragged
from tsql.registry import FUNCTIONS, GRID_PARAMS, Function, Param

__all__ = ["TIME_TYPES", "positional_forms", "register"]

TIME_TYPES = ("date", "timestamp_ntz", "timestamp", "double")
"""The Spark types ``register(spark, time_type=...)`` can give times in."""

_NUMERIC_TIMES = {
    pa.int8(): "TINYINT",
    pa.int16(): "SMALLINT",
    pa.int32(): "INTEGER",
    pa.int64(): "BIGINT",
    pa.float32(): "FLOAT",
    pa.float64(): "DOUBLE",
}


def register(spark: Any, time_type: str = "date") -> Any:
    """Register every tsql function on the Spark session ``spark``; calling it again replaces them.

    ``time_type`` is the Spark type in which ``*_agg`` answers give times (one of
    :data:`TIME_TYPES`). Returns ``spark``.
    """
    from pyspark.sql.functions import arrow_udf

    if time_type not in TIME_TYPES:
        allowed = ", ".join(repr(t) for t in TIME_TYPES)
        raise ValueError(f"tsql.spark.register: time_type must be one of {allowed}, got {time_type!r}")
    for fn in FUNCTIONS:
        spark.udf.register(fn.name, arrow_udf(_list_udf(fn), fn.returns.spark()))
        if fn.aggregate:
            returns = fn.answer.in_steps.host_returns(fn.returns)
            spark.udf.register(f"{fn.name}_agg", arrow_udf(_agg_udf(fn, time_type), returns.spark(time_type)))
    return spark


def positional_forms() -> list[str]:
    """Every Spark SQL call form, arguments in positional order with their defaults."""
    forms = []
    for fn in FUNCTIONS:
        forms.append(_form(fn.name, fn.series, fn.params))
        if fn.aggregate:
            forms.append(_form(f"{fn.name}_agg", (*fn.agg_values, "time"), fn.agg_params))
    return forms


def _form(name: str, series: Sequence[str], params: Sequence[Param]) -> str:
    args = list(series) + [p.name if p.default is None else f"{p.name} = {p.default}" for p in params]
    return f"{name}({', '.join(args)})"


# --- arguments -----------------------------------------------------------------


def _default(sql: str | None) -> Any:
    """A macro default (SQL text) as a Python value."""
    if sql is None or sql == "NULL":
        return None
    if sql.startswith("'"):
        return sql.strip("'")
    if sql in ("true", "false"):
        return sql == "true"
    return float(sql)


def _complete(
    name: str, series: Sequence[str], params: Sequence[Param], columns: Sequence[Any], named: dict[str, Any]
) -> list[pa.Array]:
    """Every argument's column in positional order: those given by position, then by name (``lag => 12``),
    then a column of its default for each one left off."""
    form = _form(name, series, params)
    names = list(series) + [p.name for p in params]
    if len(columns) > len(names):
        raise ValueError(f"{name}: takes at most {len(names)} arguments, {form}; got {len(columns)}")
    given = dict(zip(names, columns))
    for key, column in named.items():
        if key not in names:
            raise ValueError(f"{name}: no argument is named {key}, {form}")
        if key in given:
            raise ValueError(f"{name}: {key} is given twice, {form}")
        given[key] = column
    for argument in series:
        if argument not in given:
            raise ValueError(f"{name}: {argument} is required, {form}")
    given = {k: c.combine_chunks() if isinstance(c, pa.ChunkedArray) else c for k, c in given.items()}
    n_rows = len(given[series[0]])
    for p in params:
        if p.name not in given:
            if p.default is None:
                raise ValueError(f"{name}: {p.name} is required, {form}")
            given[p.name] = pa.array([_default(p.default)] * n_rows)
    return [given[n] for n in names]


def _is_number(t: pa.DataType) -> bool:
    return pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t)


def _numbers_column(name: str, argument: str, column: pa.Array) -> pa.Array:
    t = column.type
    if not (pa.types.is_list(t) or pa.types.is_large_list(t)) or not (
        _is_number(t.value_type) or pa.types.is_null(t.value_type)
    ):
        raise ValueError(f"{name}: {argument} must be an array of numbers, got {t}")
    return column


def _plain(name: str, p: Param, column: pa.Array) -> pa.Array:
    """A plain argument as the DuckDB UDF receives it (DOUBLE parameters as float64, decimals as floats)."""
    t = column.type
    if pa.types.is_null(t) or (p.sql_type == BOOLEAN and pa.types.is_boolean(t)):
        return column
    if p.sql_type == DOUBLE or pa.types.is_decimal(t):
        if pa.types.is_boolean(t) or not (_is_number(t) or pa.types.is_string(t) or pa.types.is_large_string(t)):
            raise ValueError(f"{name}: {p.name} must be a number, got {t}")
        try:
            return pc.cast(column, pa.float64())
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            bad = next((v for v in column.to_pylist() if v is not None and not _parses(v)), None)
            raise ValueError(f"{name}: {p.name} must be a number, got {bad!r}") from None
    if p.sql_type == BOOLEAN:
        raise ValueError(f"{name}: {p.name} must be true or false, got {t}")
    return column


def _parses(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _span(name: str, p: Param, column: pa.Array) -> pa.StructArray:
    """A length of time as the timed UDFs take it: (text, INTERVAL, number) per row."""
    t = column.type
    values = column.to_pylist()
    if pa.types.is_null(t):
        rows = [(None, None, None)] * len(values)
    elif _is_number(t):
        rows = [(None, None, None) if v is None else (str(v), None, float(v)) for v in values]
    elif pa.types.is_duration(t):
        micros = pc.cast(pc.cast(column, pa.duration("us")), pa.int64()).to_pylist()
        rows = [
            (None, None, None) if v is None else (str(d), pa.MonthDayNano([0, 0, v * 1000]), None)
            for v, d in zip(micros, values)
        ]
    elif pa.types.is_string(t) or pa.types.is_large_string(t):
        rows = [(None, None, None) if v is None else read_span(v) for v in values]
    else:
        rows = [(None, None, None) if v is None else (str(v), None, None) for v in values]
    return pa.array([{"text": a, "interval": b, "number": c} for a, b, c in rows], type=SPAN_ARGUMENT.arrow)


def _constant(name: str, p: Param, column: pa.Array) -> pa.Array:
    """A group's argument column as one value; it must not vary within the group."""
    if len(column) > 1 and not pa.types.is_null(column.type):
        try:
            varies = pc.count_distinct(column, mode="all").as_py() > 1
        except pa.ArrowNotImplementedError:  # a type no argument takes: the checks after this one say so
            varies = False
        if varies:
            raise ValueError(f"{name}: {p.name} must be the same on every row of a group")
    return column.slice(0, 1) if len(column) else pa.nulls(1, column.type)


# --- times ---------------------------------------------------------------------


def _time_type_name(name: str, t: pa.DataType) -> str:
    """The time column's type as messages name it."""
    if pa.types.is_date(t):
        return "DATE"
    if pa.types.is_timestamp(t):
        return "TIMESTAMP_NTZ" if t.tz is None else "TIMESTAMP"
    if pa.types.is_decimal(t):
        return "DECIMAL"
    if pa.types.is_null(t):
        return "DOUBLE"
    if t in _NUMERIC_TIMES:
        return _NUMERIC_TIMES[t]
    raise ValueError(f"{name}: time must be DATE, TIMESTAMP, TIMESTAMP_NTZ or a number, got {t}")


def _clock(name: str, t: pa.DataType) -> Clock:
    _time_type_name(name, t)  # an error for a type that is not a time
    clock = arrow_clock(t)
    assert clock is not None
    return clock


_KINDS = {"date": "date", "timestamp": "timestamp_ntz", "timestamptz": "timestamp", "number": "double"}
"""The Spark time type that holds each clock's times exactly."""


def _times(name: str, time_type: str, clock: Clock, spark_name: str, ticks: np.ndarray) -> pa.Array:
    """Answer times (ticks) in the session's time type; an error where that type cannot hold them exactly."""
    kind = _KINDS[clock.kind or "number"]
    fits = kind == time_type or (kind == "date" and time_type == "timestamp_ntz")
    if time_type == "date" and kind == "timestamp_ntz":
        fits = whole_days(ticks)
    if not fits:
        raise ValueError(
            f"{name}: the time column is {spark_name}, but tsql.spark.register(spark, time_type={time_type!r}) "
            f"answers with {time_type.upper()} times; register with time_type={kind!r}"
        )
    return times_of(ticks, time_type)


# --- the UDFs ------------------------------------------------------------------


def _scalar(body: Callable[..., pa.Array], name: str, doc: str) -> Callable[..., pa.Array]:
    """A scalar Arrow UDF (so typed for ``arrow_udf``) whose argument errors come without the inner frames."""

    def udf(*columns: pa.Array, **named: pa.Array) -> pa.Array:
        try:
            return body(*columns, **named)
        except ValueError as error:
            raise ValueError(str(error)) from None

    udf.__name__, udf.__doc__ = name, doc
    return udf


def _grouped(body: Callable[..., pa.Scalar], name: str, doc: str) -> Callable[..., pa.Scalar]:
    """A grouped-aggregate Arrow UDF (so typed for ``arrow_udf``), errors as in :func:`_scalar`."""

    def udf(*columns: pa.Array, **named: pa.Array) -> pa.Scalar:
        try:
            return body(*columns, **named)
        except ValueError as error:
            raise ValueError(str(error)) from None

    udf.__name__, udf.__doc__ = name, doc
    return udf


def _list_udf(fn: Function) -> Callable[..., pa.Array]:
    """The scalar UDF of a list form: the engine-neutral list UDF, after positional defaults."""
    if fn.special:
        return _scalar(_on_grid, fn.name, fn.doc)
    inner = list_udf(fn)
    empty = fn.returns.arrow

    def body(*columns: pa.Array, **named: pa.Array) -> pa.Array:
        columns = _complete(fn.name, fn.series, fn.params, columns, named)
        if not len(columns[0]):
            return pa.array([], type=empty)
        k = len(fn.series)
        series = [_numbers_column(fn.name, s, c) for s, c in zip(fn.series, columns[:k])]
        return inner(*series, *(_plain(fn.name, p, c) for p, c in zip(fn.params, columns[k:])))

    return _scalar(body, fn.name, fn.doc)


def _on_grid(*columns: pa.Array, **named: pa.Array) -> pa.Array:
    """``on_grid(values, times, step, fill)``: the times' own type decides the grid."""
    name = "on_grid"
    values, times, step, fill, same_time = _complete(name, ("values", "times"), GRID_PARAMS, columns, named)
    if not len(values):
        return pa.array([], type=pa.list_(pa.float64()))
    values = _numbers_column(name, "values", values)
    if not (pa.types.is_list(times.type) or pa.types.is_large_list(times.type)):
        raise ValueError(f"{name}: times must be an array of dates, timestamps or numbers, got {times.type}")
    clock = _clock(name, times.values.type)
    mask = times.is_null() if times.null_count else None
    ticks = pa.ListArray.from_arrays(pc.cast(times.offsets, pa.int32()), pa.array(ticks_of(times.values)), mask=mask)

    def run(rows: np.ndarray | None, key: tuple) -> pa.Array:
        v = to_ragged(values if rows is None else values.take(pa.array(rows)))
        t = to_ragged(ticks if rows is None else ticks.take(pa.array(rows)))
        return on_grid_values(lambda: clock, key, t, v)

    settings = [_span(name, GRID_PARAMS[0], step)] + [
        _plain(name, p, c) for p, c in zip(GRID_PARAMS[1:], (fill, same_time))
    ]
    return by_settings(len(values), settings, run)


def _agg_udf(fn: Function, time_type: str) -> Callable[..., pa.Scalar]:
    """The grouped-aggregate UDF of ``<name>_agg``: one group's rows in, one answer out."""
    name = f"{fn.name}_agg"
    params = fn.agg_params
    answer = fn.answer.in_steps  # a period stays in grid steps, as the list form gives it
    form = AggForm(fn, answer)

    def body(*columns: pa.Array, **named: pa.Array) -> pa.Scalar:
        k = len(fn.agg_values)
        columns = _complete(name, (*fn.agg_values, "time"), params, columns, named)
        time = columns[k]
        settings = [_constant(name, p, c) for p, c in zip(params, columns[k + 1 :])]
        spark_name = _time_type_name(name, time.type)
        clock = _clock(name, time.type)
        ticks = ticks_of(time)
        values = []
        for argument, value in zip(fn.agg_values, columns[:k]):
            try:
                values.append(pc.cast(value, pa.float64()).to_numpy(zero_copy_only=False))
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
                raise ValueError(f"{name}: {argument} must be a number, got {value.type}") from None
        n = len(fn.params)
        step, fill, same_time = settings[n : n + len(GRID_PARAMS)]
        arguments = [
            _span(name, p, c) if p.span else _plain(name, p, c)
            for p, c in zip(fn.params + fn.time_params, settings[:n] + settings[n + len(GRID_PARAMS) :])
        ]
        (span,), (fill,), (same_time,) = (
            scalar_parameter(_span(name, GRID_PARAMS[0], step)),
            scalar_parameter(_plain(name, GRID_PARAMS[1], fill)),
            scalar_parameter(_plain(name, GRID_PARAMS[2], same_time)),
        )
        offsets = np.array([0, len(ticks)], dtype=np.int64)
        group = form(
            clock,
            (span, fill, same_time),
            tuple(scalar_parameter(a)[0] for a in arguments),
            Ragged(ticks, offsets),
            tuple(Ragged(v, offsets) for v in values) if k > 1 else Ragged(values[0], offsets),
        )
        in_order = np.sort(ticks)  # the rows' times in time order, NULL (NaN) last
        return answer.in_host_times(group, in_order, lambda t: _times(name, time_type, clock, spark_name, t))[0]

    return _grouped(body, name, fn.doc)
