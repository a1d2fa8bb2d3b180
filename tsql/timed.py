"""The time-aware forms: ``on_grid`` and every ``*_agg`` form, which go through the grid.

An ``*_agg(value, time, ...)`` macro hands its UDF one list of ``{t, v}`` records
per group, in no particular order, where ``t`` is a "tick": microseconds
since 1970 for DATE and TIMESTAMP times (TIMESTAMPTZ: the UTC instant), or the
number itself. The UDF puts each group on its regular grid
(:func:`tsql.kernels.grid.on_grid`), runs the function's kernel on the gridded
series, and answers in time terms:

- a period becomes ``UNION(span INTERVAL, number DOUBLE)``: an INTERVAL for
  temporal times (whole months on a calendar grid), a number for numeric times;
- change points and segment bounds become positions in the time-ordered rows,
  which the macro turns into the rows' own times;
- a smoothed series becomes ``(time, value)`` records on the grid (the UDF gives
  ``(tick, kind, value)``; the macro makes the time).

Arguments that are lengths of time (``period``, ``min_period`` ...) may be an
INTERVAL for temporal times; a number counts grid steps, as in the list forms.
"""

from __future__ import annotations

import sys
from typing import Any

import duckdb
import numpy as np
import pyarrow as pa

from tsql import batch as arrow_batch
from tsql.binding import _Converter, by_keys, by_settings, check_argument, checked_arguments, create_udf, with_arity
from tsql.kernels.grid import Grid, on_grid
from tsql.kernels.ragged import CACHE_ELEMENTS, Ragged, RaggedRecords
from tsql.registry import BY_NAME, FUNCTIONS, GRID_PARAMS, SPAN, Function, Param

_DAY_US = 86_400_000_000
_TEMPORAL = {"DATE", "TIMESTAMP", "TIMESTAMP_S", "TIMESTAMP_MS", "TIMESTAMP_NS", "TIMESTAMP WITH TIME ZONE"}
_NUMERIC = (
    "TINYINT",
    "SMALLINT",
    "INTEGER",
    "BIGINT",
    "HUGEINT",
    "UTINYINT",
    "USMALLINT",
    "UINTEGER",
    "UBIGINT",
    "UHUGEINT",
    "FLOAT",
    "DOUBLE",
    "DECIMAL",
)
# one group's observations (macro __tsql_observations): per row the bits of its tick (DOUBLE) in the
# high 64 bits and of its value (DOUBLE, NaN for NULL) in the low 64
_OBSERVATIONS = "UHUGEINT[]"
_TICK_WORD, _VALUE_WORD = (0, 1) if sys.byteorder == "big" else (1, 0)
# how the step and every span argument reach a UDF (macro __tsql_span): its text, as INTERVAL, as DOUBLE
_SPAN_STRUCT = 'STRUCT("text" VARCHAR, "interval" INTERVAL, number DOUBLE)'
_SPAN_ARROW = [pa.field("span", pa.month_day_nano_interval()), pa.field("number", pa.float64())]
# grid times leave the UDF as (tick, kind) and become a UNION in SQL (macro __tsql_moment):
# DuckDB builds unions there far faster than it imports Arrow unions
_WALL, _UTC, _NUMBER = 0, 1, 2
_SERIES_RECORDS = "STRUCT(tick DOUBLE, kind TINYINT, value DOUBLE)[]"
# observations per piece of a UDF call (a group is never split)
_PIECE_POINTS = CACHE_ELEMENTS


def create_udfs(con: duckdb.DuckDBPyConnection) -> None:
    """Register ``__tsql_on_grid`` and one ``__tsql_<name>_on_grid`` per aggregate form."""
    grid_args = ["VARCHAR", _SPAN_STRUCT, "VARCHAR"]  # time type, step, fill
    on_grid_udf = with_arity(
        _on_grid_udf, "__tsql_on_grid", BY_NAME["on_grid"].doc, ["values", "times", "time_type", "step", "fill"]
    )
    create_udf(con, "__tsql_on_grid", on_grid_udf, ["DOUBLE[]", "DOUBLE[]"] + grid_args, "DOUBLE[]")
    for fn in FUNCTIONS:
        if fn.aggregate:
            params = [_SPAN_STRUCT if p.span else p.sql_type for p in fn.params]
            create_udf(
                con,
                f"{fn.udf_name}_on_grid",
                make_timed_udf(fn),
                [_OBSERVATIONS] + grid_args + params,
                _sql_returns(fn),
            )


def _sql_returns(fn: Function) -> str:
    if fn.time_answer == "starts":
        return "INTEGER[]"
    if fn.time_answer == "segments":
        return fn.returns
    if fn.time_answer == "series":
        return _SERIES_RECORDS
    return fn.agg_returns


class _Clock:
    """What a time column's type means for the grid."""

    def __init__(self, function: str, type_name: str | None):
        self.temporal = self.utc = False
        if type_name is None:  # an aggregate over no rows: its one NULL row needs no clock
            return
        name = type_name.removesuffix("[]")
        self.temporal = name in _TEMPORAL
        self.utc = name == "TIMESTAMP WITH TIME ZONE"
        if not self.temporal and not name.startswith(_NUMERIC):
            raise ValueError(f"{function}: time must be DATE, TIMESTAMP, TIMESTAMPTZ or a number, got {name}")


def _step(function: str, clock: _Clock, span: tuple | None) -> tuple[int, float]:
    """The step as (months, length in ticks); (0, 0) means infer it."""
    text, interval, number = span or (None, None, None)
    if text is None:
        return 0, 0.0
    if number is not None:
        if clock.temporal:
            raise ValueError(f"{function}: step must be an INTERVAL for DATE or TIMESTAMP times, got {text}")
        if not np.isfinite(number) or number <= 0:
            raise ValueError(f"{function}: step must be > 0, got {text}")
        return 0, float(number)
    if interval is None:
        raise ValueError(f"{function}: step must be an INTERVAL or a number, got {text!r}")
    if not clock.temporal:
        raise ValueError(f"{function}: step must be a number for numeric times, got INTERVAL {text!r}")
    months, length = _interval(interval)
    if months and length:
        raise ValueError(f"{function}: step must be whole months or a fixed length, not both, got {text!r}")
    if months < 0 or length < 0 or not (months or length):
        raise ValueError(f"{function}: step must be a positive INTERVAL, got {text!r}")
    return months, length


def _interval(value: Any) -> tuple[int, float]:
    return int(value.months), value.days * float(_DAY_US) + value.nanoseconds / 1000.0


def _observations(column: Any) -> tuple[Ragged, Ragged]:
    """Ticks and values of each group: from the macro's packed UHUGEINTs, or from ``{t, v}`` records
    (the Spark binding's)."""
    arr = arrow_batch._single(column)
    if not (pa.types.is_list(arr.type) or pa.types.is_large_list(arr.type)):
        raise TypeError(f"expected a list array of observations, got {arr.type}")
    offsets = np.asarray(arr.offsets, dtype=np.int64)
    first = int(offsets[0])
    records = arr.values.slice(first, int(offsets[-1]) - first)
    if pa.types.is_struct(records.type):
        ticks, values = records.field("t"), records.field("v")
    else:
        # 16 bytes per observation, whatever Arrow calls them (decimal128, or DuckDB's opaque
        # extension type around fixed_size_binary[16]); never NULL (NaN stands for NULL)
        packed = records.storage if isinstance(records, pa.ExtensionArray) else records
        start, n = packed.offset, len(packed)
        words = np.frombuffer(packed.buffers()[1], dtype=np.float64, count=2 * (start + n))[2 * start :]
        ticks = pa.array(np.ascontiguousarray(words[_TICK_WORD::2]))
        values = pa.array(np.ascontiguousarray(words[_VALUE_WORD::2]))
    lists = pa.LargeListArray if pa.types.is_large_list(arr.type) else pa.ListArray
    offsets = pa.array(offsets - first, type=arr.offsets.type)
    mask = arr.is_null() if arr.null_count else None
    return (
        arrow_batch.to_ragged(lists.from_arrays(offsets, ticks, mask=mask)),
        arrow_batch.to_ragged(lists.from_arrays(offsets, values, mask=mask)),
    )


def _grid(function: str, key: tuple, ticks: Ragged, values: Ragged) -> tuple[_Clock, Grid]:
    type_name, step, fill = key
    clock = _Clock(function, type_name)
    months, length = _step(function, clock, step)
    fill = check_argument(function, GRID_PARAMS[1], fill if fill is not None else "null")
    try:
        return clock, on_grid(ticks, values, clock.temporal, months, length, fill)
    except ValueError as error:
        raise ValueError(f"{function}: {error}") from None


def _on_grid_udf(values: Any, ticks: Any, *settings: Any) -> pa.Array:
    values, ticks = arrow_batch._single(values), arrow_batch._single(ticks)

    def run(rows: np.ndarray | None, key: tuple) -> pa.Array:
        v = arrow_batch.to_ragged(values if rows is None else values.take(pa.array(rows)))
        t = arrow_batch.to_ragged(ticks if rows is None else ticks.take(pa.array(rows)))
        valid = v.row_valid & t.row_valid
        if not np.array_equal(v.lengths[valid], t.lengths[valid]):
            raise ValueError("on_grid: values and times must have the same length in every row")
        v, t = Ragged(v.values, v.offsets, valid), Ragged(t.values, t.offsets, valid)
        if (v.lengths != t.lengths).any():  # a NULL row on one side only
            keep = np.flatnonzero(valid)
            v, t = _with_rows(v.take(keep), len(valid), keep), _with_rows(t.take(keep), len(valid), keep)
        _, grid = _grid("on_grid", key, t, v)
        return arrow_batch.to_arrow_list(grid.values)

    return by_settings(len(values), settings, run)


def _with_rows(batch: Ragged, n_rows: int, rows: np.ndarray) -> Ragged:
    """``batch`` (holding ``rows`` of a larger batch) spread back to ``n_rows`` rows, the others empty and invalid."""
    lengths = np.zeros(n_rows, dtype=np.int64)
    lengths[rows] = batch.lengths
    offsets = np.zeros(n_rows + 1, dtype=np.int64)
    np.cumsum(lengths, out=offsets[1:])
    valid = np.zeros(n_rows, dtype=bool)
    valid[rows] = True
    return Ragged(batch.values, offsets, valid)


def make_timed_udf(fn: Function) -> Any:
    """The UDF behind ``<name>_agg``: grid each group, run the kernel, answer in time terms."""
    name = f"{fn.name}_agg"
    answer = _ANSWERS[fn.time_answer](fn)

    def udf(observations: Any, *settings: Any) -> pa.Array:
        obs = arrow_batch._single(observations)

        def piece(part: pa.Array, key: tuple) -> pa.Array:
            ticks, values = _observations(part)
            clock, grid = _grid(name, key[:3], ticks, values)
            per_row = [
                _span_in_steps(fn, p, clock, grid, value) if p.span else value for p, value in zip(fn.params, key[3:])
            ]
            return _per_argument_group(fn, grid, per_row, lambda g, kwargs: answer(fn, clock, g, kwargs))

        def run(rows: np.ndarray | None, key: tuple) -> pa.Array:
            part = obs if rows is None else obs.take(pa.array(rows))
            pieces = [piece(part.slice(lo, hi - lo), key) for lo, hi in arrow_batch.row_pieces([part], _PIECE_POINTS)]
            return pieces[0] if len(pieces) == 1 else pa.concat_arrays(pieces)

        return by_settings(len(obs), settings, run)

    args = ["observations", "time_type", "step", "fill"] + [p.name for p in fn.params]
    return with_arity(udf, f"{fn.udf_name}_on_grid", fn.doc, args)


def _span_in_steps(fn: Function, p: Param, clock: _Clock, grid: Grid, span: tuple | None) -> Any:
    """A length-of-time argument in grid steps: one value, or one per row when it depends on the row's step."""
    text, interval, number = span or (None, None, None)
    if text is None:
        return None
    if number is not None:
        return float(number)  # grid steps, as in the list form
    if interval is None or not clock.temporal:
        what = "an INTERVAL or a number of grid steps" if clock.temporal else "a number of grid steps"
        raise ValueError(f"{fn.name}_agg: {p.name} must be {what}, got {text!r}")
    months, length = _interval(interval)
    steps = grid.steps(months, length)
    # a group of one observation has no step (0) and so no span in steps: it gets the NULL meaning of
    # the argument, whatever the other groups of its batch
    stepped = (grid.months > 0) | (grid.length > 0)
    counted = steps[grid.values.row_valid & (grid.values.lengths > 0) & stepped]
    if np.isnan(counted).any():
        raise ValueError(
            f"{fn.name}_agg: {p.name} {text!r} cannot be counted in the grid's steps "
            "(months on a fixed step, or days on a calendar step); give it in the step's own terms"
        )
    if p.minimum is not None and (counted < p.minimum).any():
        raise ValueError(
            f"{fn.name}_agg: {p.name} must be >= {p.minimum:g} grid steps, got {text!r} ({counted.min():.6g} steps)"
        )
    return steps


def _per_argument_group(fn: Function, grid: Grid, per_row: list[Any], answer: Any) -> pa.Array:
    """Run ``answer`` once per distinct set of (per-row) argument values."""
    n_rows = grid.values.n_rows
    if n_rows and not any(isinstance(a, np.ndarray) for a in per_row):  # the same arguments on every row
        columns = [[a] for a in per_row]
    else:
        columns = [a if isinstance(a, np.ndarray) else [a] * n_rows for a in per_row]
    keys = [tuple(None if (isinstance(x, float) and np.isnan(x)) else x for x in row) for row in zip(*columns)]

    def call(rows: np.ndarray | None, key: tuple) -> pa.Array:
        kwargs = checked_arguments(fn, key, f"{fn.name}_agg")
        sub = grid if rows is None else grid.take(rows)
        if kwargs is None:
            return pa.nulls(sub.values.n_rows, type=_arrow_type(fn))
        return answer(sub, kwargs)

    return by_keys(keys or [()] * n_rows, call)


def _arrow_type(fn: Function) -> pa.DataType:
    returns = _sql_returns(fn)
    if returns == SPAN:
        return pa.sparse_union(_SPAN_ARROW)
    if fn.time_answer == "period":  # a struct whose period field is the span union
        fields = _Converter(fn.returns).arrow_type
        return pa.struct([pa.field(f.name, pa.sparse_union(_SPAN_ARROW)) if f.name == "period" else f for f in fields])
    if fn.time_answer == "series":
        fields = [("tick", pa.float64()), ("kind", pa.int8()), ("value", pa.float64())]
        return pa.list_(pa.struct(fields))
    return _Converter(returns).arrow_type


# --- answers in time terms ---------------------------------------------------


def _same(fn: Function) -> Any:
    convert = _Converter(fn.returns)

    def answer(fn: Function, clock: _Clock, grid: Grid, kwargs: dict) -> pa.Array:
        return convert(fn.kernel(grid.values, **kwargs), grid.values.row_valid)

    return answer


def _period(fn: Function) -> Any:
    struct = "STRUCT" in fn.returns
    others = _Converter(fn.returns) if struct else None

    def answer(fn: Function, clock: _Clock, grid: Grid, kwargs: dict) -> pa.Array:
        result = fn.kernel(grid.values, **kwargs)
        valid = grid.values.row_valid
        steps = result["period"] if struct else result
        span = _span_array(clock, grid, np.where(valid, steps, np.nan))
        if not struct:
            return span
        fields = others(result, valid)
        names = [f.name for f in fields.type]
        arrays = [span if n == "period" else fields.field(n) for n in names]
        return pa.StructArray.from_arrays(arrays, names=names, mask=fields.is_null())

    return answer


def _span_array(clock: _Clock, grid: Grid, steps: np.ndarray) -> pa.Array:
    n = len(steps)
    missing = np.isnan(steps)
    months, ticks = grid.span(steps)
    if clock.temporal:
        micros = np.where(np.isnan(ticks), 0, np.round(np.nan_to_num(ticks))).astype(np.int64)
        days, rest = np.divmod(micros, _DAY_US)
        whole_months = np.nan_to_num(months).astype(np.int64)
        spans = [
            None if missing[i] else pa.MonthDayNano([int(whole_months[i]), int(days[i]), int(rest[i]) * 1000])
            for i in range(n)
        ]
        children = [pa.array(spans, type=pa.month_day_nano_interval()), pa.nulls(n, pa.float64())]
        tag = 0
    else:
        children = [pa.nulls(n, pa.month_day_nano_interval()), arrow_batch.to_arrow_scalar(ticks)]
        tag = 1
    return pa.UnionArray.from_sparse(pa.array(np.full(n, tag, dtype=np.int8)), children, field_names=["span", "number"])


def _starts(fn: Function) -> Any:
    def answer(fn: Function, clock: _Clock, grid: Grid, kwargs: dict) -> pa.Array:
        positions: Ragged = fn.kernel(grid.values, **kwargs)
        flat = np.repeat(grid.values.offsets[:-1], positions.lengths) + positions.values.astype(np.int64) - 1
        rows = Ragged(grid.observed[flat].astype(np.float64) + 1, positions.offsets, positions.valid)
        return _Converter("INTEGER[]")(rows, grid.values.row_valid)

    return answer


def _segments(fn: Function) -> Any:
    convert = _Converter(fn.returns)

    def answer(fn: Function, clock: _Clock, grid: Grid, kwargs: dict) -> pa.Array:
        found: RaggedRecords = fn.kernel(grid.values, **kwargs)
        rows = np.repeat(np.arange(found.n_rows), np.diff(found.offsets))
        base = grid.values.offsets[rows]
        first = grid.observed[base + found.fields["first"].astype(np.int64) - 1] + 1
        after_last = base + found.fields["last"].astype(np.int64)  # the grid point after the segment
        n_obs = np.diff(grid.observation_offsets)[rows]
        last_point = after_last >= grid.values.offsets[rows + 1]
        last = np.where(last_point, n_obs, grid.observed[np.minimum(after_last, len(grid.observed) - 1)])
        fields = dict(found.fields, first=first, last=last)
        return convert(RaggedRecords(fields, found.offsets, found.valid), grid.values.row_valid)

    return answer


def _series(fn: Function) -> Any:
    def answer(fn: Function, clock: _Clock, grid: Grid, kwargs: dict) -> pa.Array:
        smooth: Ragged = fn.kernel(grid.values, **kwargs)
        ticks = grid.ticks
        if not smooth.row_valid.all():
            ticks = ticks[np.repeat(smooth.row_valid, grid.values.lengths)]  # NULL rows have no values
        kind = (_UTC if clock.utc else _WALL) if clock.temporal else _NUMBER
        records = pa.StructArray.from_arrays(
            [pa.array(ticks), pa.array(np.full(len(ticks), kind, dtype=np.int8)), _values_of(smooth)],
            names=["tick", "kind", "value"],
        )
        valid = smooth.row_valid & grid.values.row_valid
        offsets = pa.array(smooth.offsets.astype(np.int32))
        return pa.ListArray.from_arrays(offsets, records, mask=None if valid.all() else pa.array(~valid))

    return answer


def _values_of(batch: Ragged) -> pa.Array:
    return arrow_batch.to_arrow_list(Ragged(batch.values, batch.offsets, None)).values


_ANSWERS = {"same": _same, "period": _period, "starts": _starts, "segments": _segments, "series": _series}
