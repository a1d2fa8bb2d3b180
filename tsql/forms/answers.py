"""How an ``*_agg`` form answers in time terms: one class per kind of answer.

Each kind owns its SQL types, how it computes from a gridded batch, the SQL that finishes the
answer in a DuckDB macro, and how a host that hands over times (Spark) gets them back.
"""

from __future__ import annotations

import mmap
import threading
from collections.abc import Callable
from typing import Any

import numpy as np
import pyarrow as pa

from tsql.forms.arrow import to_arrow, to_arrow_list
from tsql.forms.time import Clock, calendar_offset, span_array
from tsql.forms.types import DOUBLE, INTEGER, MOMENT, SPAN, TIME, TINYINT, ListOf, SqlType, Struct, struct
from tsql.kernels.grid import Grid
from tsql.kernels.ragged import Ragged, RaggedRecords

Kernel = Callable[..., Any]
Times = Callable[[np.ndarray], pa.Array]
"""A host's time column from ticks."""
ROW_TIMES = "list(time ORDER BY time NULLS LAST)"
"""SQL: the group's times in time order, which 1-based row positions index."""


class Answer:
    """The answer as the list form gives it (a correlation, a test, a profile ...)."""

    errors_inside = False
    """Whether the ``*_agg`` UDF answers an error found in the data inside its answer (:class:`Series`, see
    :meth:`Series.error_rows`) instead of beside it, as ``STRUCT(answer, error)`` (``__tsql_answer``)."""

    def agg_returns(self, returns: SqlType) -> SqlType:
        """The type the ``*_agg`` form answers with in SQL."""
        return returns

    def udf_returns(self, returns: SqlType) -> SqlType:
        """The type the ``*_agg`` UDF returns, before :meth:`finish_sql`."""
        return self.agg_returns(returns)

    def host_returns(self, returns: SqlType) -> SqlType:
        """The type after :meth:`in_host_times` (``time``: the host's time type)."""
        return returns

    def compute(self, kernel: Kernel, returns: SqlType, clock: Clock, grid: Grid, kwargs: dict) -> pa.Array:
        """The answers of a gridded batch."""
        return to_arrow(returns, kernel(grid.values, **kwargs), grid.values.row_valid)

    def pieces(self, count: int, points: int) -> Pieces:
        """Where a call cut into ``count`` pieces (about ``points`` observations in all) gathers their answers."""
        return Pieces(count)

    def finish_sql(self, returns: SqlType, call: str) -> str:
        """The macro body around the UDF call: ``__tsql_answer(udf(...))``, or the bare call (:attr:`errors_inside`)."""
        return call

    def in_host_times(
        self, answer: pa.Array, in_order: np.ndarray, times: Callable[[np.ndarray], pa.Array]
    ) -> pa.Array:
        """One group's answer with its positions and grid ticks as the host's times: ``in_order`` holds the
        rows' ticks in time order, ``times`` makes the host's time column from ticks."""
        return answer

    @property
    def in_steps(self) -> Answer:
        """The kind a host uses that cannot answer in spans of time."""
        return self


SAME = Answer()


class Pieces:
    """A call's answer from the answers of its pieces (numbered from 0, in any order): :meth:`add` each, then
    :meth:`joined`."""

    def __init__(self, count: int):
        self.count = count
        self.found: dict[int, pa.Array] = {}

    def add(self, i: int, piece: pa.Array) -> None:
        self.found[i] = piece

    def joined(self) -> pa.Array:
        pieces = [self.found.pop(i) for i in range(self.count)]
        return pieces[0] if len(pieces) == 1 else pa.concat_arrays(pieces)


class Period(Answer):
    """A period (the answer, or its ``period`` field) as a span of time: an INTERVAL or a number."""

    def agg_returns(self, returns: SqlType) -> SqlType:
        return returns.replace(period=SPAN) if isinstance(returns, Struct) else SPAN

    def compute(self, kernel: Kernel, returns: SqlType, clock: Clock, grid: Grid, kwargs: dict) -> pa.Array:
        return self.in_spans(kernel(grid.values, **kwargs), returns, clock, grid)

    def in_spans(self, result: Any, returns: SqlType, clock: Clock, grid: Grid) -> pa.Array:
        """A kernel's answer (per-row periods, or a dict with a ``period`` field) with its periods as spans."""
        valid = grid.values.row_valid
        is_struct = isinstance(returns, Struct)
        steps = result["period"] if is_struct else result
        span = span_array(clock, grid, np.where(valid, steps, np.nan))
        if not is_struct:
            return span
        fields = to_arrow(returns, result, valid)
        names = [f.name for f in fields.type]
        arrays = [span if n == "period" else fields.field(n) for n in names]
        return pa.StructArray.from_arrays(arrays, names=names, mask=fields.is_null())

    @property
    def in_steps(self) -> Answer:
        return SAME


class Profile(Answer):
    """One cycle by phase (``harmonic_profile``), phase 0 where ``anchor`` says: 'calendar' (the calendar's,
    :func:`~tsql.forms.time.calendar_offset`) or 'first' (the group's first time, as the list form)."""

    def compute(self, kernel: Kernel, returns: SqlType, clock: Clock, grid: Grid, kwargs: dict) -> pa.Array:
        kwargs = dict(kwargs)
        if kwargs.pop("anchor") == "calendar":
            kwargs["offset"] = calendar_offset(clock, grid, kwargs["period"])
        return to_arrow(returns, kernel(grid.values, **kwargs), grid.values.row_valid)


class Screen(Period):
    """A record describing a series (``screen``): its ``period`` a span of time as :class:`Period` gives it, and its
    ``merged`` field the number of the group's rows that fell on a grid point another row already held."""

    def compute(self, kernel: Kernel, returns: SqlType, clock: Clock, grid: Grid, kwargs: dict) -> pa.Array:
        return self.in_spans(_screen(kernel, grid, kwargs), returns, clock, grid)

    @property
    def in_steps(self) -> Answer:
        return SCREEN_IN_STEPS


class ScreenInSteps(Answer):
    """:class:`Screen` with its period in grid steps, for hosts that cannot answer in spans (Spark)."""

    def compute(self, kernel: Kernel, returns: SqlType, clock: Clock, grid: Grid, kwargs: dict) -> pa.Array:
        return to_arrow(returns, _screen(kernel, grid, kwargs), grid.values.row_valid)


def _screen(kernel: Kernel, grid: Grid, kwargs: dict) -> dict[str, np.ndarray]:
    result = kernel(grid.values, **kwargs)
    return dict(result, merged=merged_rows(grid, result["merged"]))


def merged_rows(grid: Grid, answered: np.ndarray) -> np.ndarray:
    """Per row, the observations that share their grid point with an earlier one (NaN where ``answered`` is)."""
    points = grid.points
    counts = np.diff(grid.observation_offsets)
    repeat = np.zeros(len(points), dtype=bool)
    repeat[1:] = points[1:] == points[:-1]  # in time order; rows never share a grid point
    rows = np.repeat(np.arange(len(counts)), counts)
    merged = np.bincount(rows[repeat], minlength=len(counts)).astype(np.float64)
    return np.where(np.isnan(answered), np.nan, merged)


class Starts(Answer):
    """1-based positions on the grid become the times of the rows where segments start."""

    def agg_returns(self, returns: SqlType) -> SqlType:
        return ListOf(TIME)

    def udf_returns(self, returns: SqlType) -> SqlType:
        return ListOf(INTEGER)

    host_returns = agg_returns

    def compute(self, kernel: Kernel, returns: SqlType, clock: Clock, grid: Grid, kwargs: dict) -> pa.Array:
        positions: Ragged = kernel(grid.values, **kwargs)
        flat = np.repeat(grid.values.offsets[:-1], positions.lengths) + positions.values.astype(np.int64) - 1
        rows = Ragged(grid.observed[flat].astype(np.float64) + 1, positions.offsets, positions.valid)
        return to_arrow(ListOf(INTEGER), rows, grid.values.row_valid)

    def finish_sql(self, returns: SqlType, call: str) -> str:
        return f"list_select({ROW_TIMES}, {call})"

    def in_host_times(
        self, answer: pa.Array, in_order: np.ndarray, times: Callable[[np.ndarray], pa.Array]
    ) -> pa.Array:
        mask = answer.is_null() if answer.null_count else None
        return pa.ListArray.from_arrays(answer.offsets, _at(answer.values, in_order, times), mask=mask)


class Segments(Answer):
    """Segments whose ``first`` and ``last`` grid positions become the times of their first and last rows."""

    BOUNDS = ("first", "last")

    def agg_returns(self, returns: SqlType) -> SqlType:
        assert isinstance(returns, ListOf) and isinstance(returns.element, Struct)
        return ListOf(returns.element.replace(**dict.fromkeys(self.BOUNDS, TIME)))

    def udf_returns(self, returns: SqlType) -> SqlType:
        return returns

    host_returns = agg_returns

    def compute(self, kernel: Kernel, returns: SqlType, clock: Clock, grid: Grid, kwargs: dict) -> pa.Array:
        found: RaggedRecords = kernel(grid.values, **kwargs)
        rows = np.repeat(np.arange(found.n_rows), np.diff(found.offsets))
        base = grid.values.offsets[rows]
        first = grid.observed[base + found.fields["first"].astype(np.int64) - 1] + 1
        after_last = base + found.fields["last"].astype(np.int64)  # the grid point after the segment
        n_obs = np.diff(grid.observation_offsets)[rows]
        last_point = after_last >= grid.values.offsets[rows + 1]
        last = np.where(last_point, n_obs, grid.observed[np.minimum(after_last, len(grid.observed) - 1)])
        fields = dict(found.fields, first=first, last=last)
        return to_arrow(returns, RaggedRecords(fields, found.offsets, found.valid), grid.values.row_valid)

    def finish_sql(self, returns: SqlType, call: str) -> str:
        assert isinstance(returns, ListOf) and isinstance(returns.element, Struct)
        fields = [f"{n} := {ROW_TIMES}[s.{n}]" if n in self.BOUNDS else f"{n} := s.{n}" for n in returns.element.names]
        return f"list_transform({call}, lambda s: struct_pack({', '.join(fields)}))"

    def in_host_times(
        self, answer: pa.Array, in_order: np.ndarray, times: Callable[[np.ndarray], pa.Array]
    ) -> pa.Array:
        mask = answer.is_null() if answer.null_count else None
        records = answer.values
        names = [f.name for f in records.type]
        fields = [_at(records.field(n), in_order, times) if n in self.BOUNDS else records.field(n) for n in names]
        return pa.ListArray.from_arrays(answer.offsets, pa.StructArray.from_arrays(fields, names=names), mask=mask)


class Path(Answer):
    """Records each holding a list of 1-based grid positions (``positions``), which become the rows' times.

    The kernel gives ``(records, positions)``: the records, and a Ragged with one row per record in the
    records' flat order (see :func:`tsql.kernels.changepoint.change_points_path`).
    """

    LISTS = ("positions",)

    def agg_returns(self, returns: SqlType) -> SqlType:
        assert isinstance(returns, ListOf) and isinstance(returns.element, Struct)
        return ListOf(returns.element.replace(**dict.fromkeys(self.LISTS, ListOf(TIME))))

    def udf_returns(self, returns: SqlType) -> SqlType:
        return returns

    host_returns = agg_returns

    def compute(self, kernel: Kernel, returns: SqlType, clock: Clock, grid: Grid, kwargs: dict) -> pa.Array:
        records, positions = kernel(grid.values, **kwargs)
        record_row = np.repeat(np.arange(records.n_rows), np.diff(records.offsets))
        base = np.repeat(grid.values.offsets[record_row], positions.lengths)
        rows = grid.observed[base + positions.values.astype(np.int64) - 1].astype(np.float64) + 1
        return to_arrow(returns, (records, Ragged(rows, positions.offsets)), grid.values.row_valid)

    def finish_sql(self, returns: SqlType, call: str) -> str:
        assert isinstance(returns, ListOf) and isinstance(returns.element, Struct)
        fields = [
            f"{n} := list_select({ROW_TIMES}, s.{n})" if n in self.LISTS else f"{n} := s.{n}"
            for n in returns.element.names
        ]
        return f"list_transform({call}, lambda s: struct_pack({', '.join(fields)}))"

    def in_host_times(
        self, answer: pa.Array, in_order: np.ndarray, times: Callable[[np.ndarray], pa.Array]
    ) -> pa.Array:
        mask = answer.is_null() if answer.null_count else None
        records = answer.values
        names = [f.name for f in records.type]
        fields = []
        for n in names:
            field = records.field(n)
            if n in self.LISTS:
                field = pa.ListArray.from_arrays(field.offsets, _at(field.values, in_order, times))
            fields.append(field)
        return pa.ListArray.from_arrays(answer.offsets, pa.StructArray.from_arrays(fields, names=names), mask=mask)


_WALL, _UTC, _NUMBER = 0, 1, 2
"""How a grid tick becomes a time in SQL (macro ``__tsql_moment``): TIMESTAMP, TIMESTAMPTZ, a number."""


class Series(Answer):
    """A series on the grid as (time, value) records, gaps included; a STRUCT of lists (the components of a
    decomposition) as one record per grid time with a field per component: (time, trend, seasonal, ...).

    The UDF gives ``(tick, kind, value ...)`` records; the macro makes the time (``__tsql_moment``): DuckDB
    builds UNION values in SQL about 8x faster than it imports Arrow unions. The kind comes with each point:
    read from the time column inside the macro's lambda instead, it is evaluated again per point (about 25 %
    more time over 10,000 x 1,000).
    An error found in the data comes inside the answer (:meth:`error_rows`), not beside it: through
    ``__tsql_answer`` DuckDB would copy these long lists again (the list around the answer, its lambda's
    result, ``[1]``).
    """

    errors_inside = True

    @staticmethod
    def _names(returns: SqlType) -> list[str]:
        return returns.names if isinstance(returns, Struct) else ["value"]

    def agg_returns(self, returns: SqlType) -> SqlType:
        return ListOf(struct(time=MOMENT, **dict.fromkeys(self._names(returns), DOUBLE)))

    def udf_returns(self, returns: SqlType) -> SqlType:
        return ListOf(struct(tick=DOUBLE, kind=TINYINT, **dict.fromkeys(self._names(returns), DOUBLE)))

    def host_returns(self, returns: SqlType) -> SqlType:
        return ListOf(struct(time=TIME, **dict.fromkeys(self._names(returns), DOUBLE)))

    def compute(self, kernel: Kernel, returns: SqlType, clock: Clock, grid: Grid, kwargs: dict) -> pa.Array:
        result = kernel(grid.values, **kwargs)
        parts: dict[str, Ragged] = result if isinstance(result, dict) else {"value": result}
        smooth = next(iter(parts.values()))  # the parts share their rows
        ticks = grid.ticks
        if not smooth.row_valid.all():
            ticks = ticks[np.repeat(smooth.row_valid, grid.values.lengths)]  # NULL rows have no values
        kind = (_UTC if clock.utc else _WALL) if clock.temporal else _NUMBER
        names = self._names(returns)
        values = [to_arrow_list(Ragged(parts[n].values, smooth.offsets, None)).values for n in names]
        records = pa.StructArray.from_arrays(
            [pa.array(ticks), pa.array(np.full(len(ticks), kind, dtype=np.int8)), *values],
            names=["tick", "kind", *names],
        )
        valid = smooth.row_valid & grid.values.row_valid
        offsets = pa.array(smooth.offsets.astype(np.int32))
        return pa.ListArray.from_arrays(offsets, records, mask=None if valid.all() else pa.array(~valid))

    def pieces(self, count: int, points: int) -> Pieces:
        return SeriesPieces(count, points) if count > 1 else Pieces(count)

    def error_rows(self, returns: SqlType, n_rows: int, number: int) -> pa.Array:
        """``n_rows`` answers that stand for the error numbered ``number`` (the host keeps its message): one record
        each, with no tick and ``number`` in its first value, which the macro raises (``__tsql_message``)."""
        names = self._names(returns)
        fields = [pa.nulls(n_rows, pa.float64()), pa.nulls(n_rows, pa.int8()), pa.array(np.full(n_rows, float(number)))]
        fields += [pa.nulls(n_rows, pa.float64())] * (len(names) - 1)
        records = pa.StructArray.from_arrays(fields, names=["tick", "kind", *names])
        return pa.ListArray.from_arrays(pa.array(np.arange(n_rows + 1, dtype=np.int32)), records)

    def finish_sql(self, returns: SqlType, call: str) -> str:
        names = self._names(returns)
        moment = (
            f"CASE WHEN r.tick IS NULL THEN error(__tsql_message(r.{names[0]})) ELSE __tsql_moment(r.tick, r.kind) END"
        )
        fields = "".join(f", '{n}': r.{n}" for n in names)
        return f"list_transform({call}, lambda r: {{'time': {moment}{fields}}})"

    def in_host_times(
        self, answer: pa.Array, in_order: np.ndarray, times: Callable[[np.ndarray], pa.Array]
    ) -> pa.Array:
        mask = answer.is_null() if answer.null_count else None
        records = answer.values
        names = [f.name for f in records.type][2:]
        at = times(records.field("tick").to_numpy(zero_copy_only=False))
        fields = [at] + [records.field(n) for n in names]
        records = pa.StructArray.from_arrays(fields, names=["time", *names])
        return pa.ListArray.from_arrays(answer.offsets, records, mask=mask)


class SeriesPieces(Pieces):
    """:class:`Series` answers of a call's pieces, each copied as it comes into one buffer per field and let go:
    the pieces and the joined answer are never all held at once (as with :func:`pyarrow.concat_arrays`), nor
    the pieces all together. The buffers start at the call's number of observations and grow by half when a
    piece does not fit; the pages past the last point are never written (nor resident)."""

    def __init__(self, count: int, points: int):
        super().__init__(count)
        self.capacity = max(points, 1)
        self.fields: dict[str, np.ndarray] = {}
        self.names: list[str] = []
        self.offsets = [np.zeros(1, dtype=np.int32)]
        self.valid: list[np.ndarray] = []
        self.size = 0
        self.next = 0
        self.lock = threading.Lock()

    def add(self, i: int, piece: pa.Array) -> None:
        with self.lock:
            self.found[i] = piece
            while self.next in self.found:
                self._copy(self.found.pop(self.next))
                self.next += 1

    def _copy(self, piece: pa.Array) -> None:
        records = piece.values
        if not self.fields:
            self.names = [f.name for f in records.type]
            self.fields = {f.name: _mapped(self.capacity, f.type.to_pandas_dtype()) for f in records.type}
        start, end = self.size, self.size + len(records)
        if end > self.capacity:
            self.capacity = max(end, self.capacity + self.capacity // 2)
            for name, old in self.fields.items():
                grown = _mapped(self.capacity, old.dtype)
                grown[:start] = old[:start]
                self.fields[name] = grown
        for name in self.names:
            field = records.field(name)
            if len(field):  # the data as Series.compute gave it (NaN under each NULL): no copy to read it
                out = self.fields[name]
                data = np.frombuffer(field.buffers()[1], dtype=out.dtype, count=field.offset + len(field))
                out[start:end] = data[field.offset :]
        self.offsets.append(np.asarray(piece.offsets)[1:] + np.int32(start))
        self.valid.append(np.asarray(piece.is_valid()))
        self.size = end

    def joined(self) -> pa.Array:
        fields = [self.fields.pop(n)[: self.size] for n in self.names]
        arrays = [pa.array(fields[0]), pa.array(fields[1])]  # tick and kind: never NULL here
        for values in fields[2:]:  # NULL exactly where NaN, as Series.compute made them
            missing = np.isnan(values)
            arrays.append(pa.array(values, mask=missing if missing.any() else None))
        records = pa.StructArray.from_arrays(arrays, names=self.names)
        valid = np.concatenate(self.valid)
        mask = None if valid.all() else pa.array(~valid)
        return pa.ListArray.from_arrays(pa.array(np.concatenate(self.offsets)), records, mask=mask)


def _mapped(n: int, dtype: np.dtype) -> np.ndarray:
    """An array of its own mapped pages, given back to the system when the last view of it goes."""
    dtype = np.dtype(dtype)
    return np.frombuffer(mmap.mmap(-1, max(n * dtype.itemsize, 1)), dtype=dtype, count=n)


class Periods(Answer):
    """Records with a ``period`` field (several cycles), each period a span of time as :class:`Period` gives it."""

    def agg_returns(self, returns: SqlType) -> SqlType:
        assert isinstance(returns, ListOf) and isinstance(returns.element, Struct)
        return ListOf(returns.element.replace(period=SPAN))

    def compute(self, kernel: Kernel, returns: SqlType, clock: Clock, grid: Grid, kwargs: dict) -> pa.Array:
        found: RaggedRecords = kernel(grid.values, **kwargs)
        answer = to_arrow(returns, found, grid.values.row_valid)
        rows = np.repeat(np.arange(found.n_rows), np.diff(found.offsets))
        span = span_array(clock, grid.take(rows), np.asarray(found.fields["period"], dtype=np.float64))
        records = answer.values
        names = [f.name for f in records.type]
        fields = [span if n == "period" else records.field(n) for n in names]
        mask = answer.is_null() if answer.null_count else None
        return pa.ListArray.from_arrays(answer.offsets, pa.StructArray.from_arrays(fields, names=names), mask=mask)

    @property
    def in_steps(self) -> Answer:
        return SAME


def _at(positions: pa.Array, in_order: np.ndarray, times: Times) -> pa.Array:
    """The times of 1-based row positions."""
    rows = np.asarray(positions.to_numpy(zero_copy_only=False), dtype=np.int64) - 1
    return times(in_order[rows])


PERIOD, PERIODS, PROFILE, STARTS, SEGMENTS, SERIES, PATH = (
    Period(),
    Periods(),
    Profile(),
    Starts(),
    Segments(),
    Series(),
    Path(),
)
SCREEN, SCREEN_IN_STEPS = Screen(), ScreenInSteps()
