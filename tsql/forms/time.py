"""Time in one place: ticks, the clock of a time column, steps and spans, and spans back in time terms.

A tick is a DOUBLE: microseconds since 1970 for DATE and TIMESTAMP times (TIMESTAMPTZ: the UTC
instant), otherwise the number itself. A span argument (the step, a period, ...) arrives as
``(text, interval, number)``: its text for messages, and what it reads as an INTERVAL and as a
number (either may be None).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from fractions import Fraction
from typing import Any, NamedTuple

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from tsql.forms.arrow import to_arrow_scalar
from tsql.kernels.grid import DAY_US, Grid, add_months, month_index

MONTH_DAYS = 365.2425 / 12
"""Days in a month where a month must have a length (a period in months on a grid of days or weeks): the
Gregorian calendar's mean, 30.436875 (a year: 365.2425 days, 52.1775 weeks)."""
CALENDAR_LENGTHS = (1, 3, 12)
"""The calendar lengths a period may read as, in months: a month, a quarter, a year."""
CALENDAR_TOLERANCE = 0.02
"""A length within this share of a calendar length is that length (a month: 29.8 to 31.0 days, a quarter:
89.5 to 93.1, a year: 357.9 to 372.5, 51.1 to 53.2 weeks); wide enough for a period estimated off the
Fourier grid from a few years of weekly data, narrow enough to leave 4 weeks and 29 days alone."""
_MONDAY = 4 * DAY_US
"""1970-01-05 00:00, a Monday: phase 0 of cycles in whole days and weeks."""

Span = tuple[str | None, Any, float | None]
"""A span argument as (text, interval, number); all None when the argument is NULL."""
NO_SPAN: Span = (None, None, None)


@dataclass(frozen=True)
class Clock:
    """What the time column of an ``*_agg`` call means: ``kind`` is 'date', 'timestamp', 'timestamptz',
    'number', or None for an aggregate over no rows (its one NULL row needs no clock)."""

    kind: str | None

    @property
    def temporal(self) -> bool:
        return self.kind in ("date", "timestamp", "timestamptz")

    @property
    def utc(self) -> bool:
        return self.kind == "timestamptz"


def step(function: str, clock: Clock, span: Span | None) -> tuple[int, float]:
    """The grid step as (months, length in ticks); (0, 0) means infer it."""
    text, interval, number = span or NO_SPAN
    if text is None or clock.kind is None:  # inferred, or an aggregate over no rows (no grid)
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
    months, length = interval_ticks(interval)
    if months and length:
        raise ValueError(f"{function}: step must be whole months or a fixed length, not both, got {text!r}")
    if months < 0 or length < 0 or not (months or length):
        raise ValueError(f"{function}: step must be a positive INTERVAL, got {text!r}")
    return months, length


def interval_ticks(value: Any) -> tuple[int, float]:
    """An Arrow month-day-nano interval as (months, microseconds of its days and time)."""
    return int(value.months), value.days * float(DAY_US) + value.nanoseconds / 1000.0


def static_span(function: str, name: str, clock: Clock, span: Span | None, words: tuple[str, ...] = ()) -> Any:
    """A length-of-time argument as far as it can be read without the data: None (NULL), a word, a number of
    grid steps, or ``...`` for an INTERVAL on temporal times; an error for anything else (as :func:`span_in_steps`)."""
    text, interval, number = span or NO_SPAN
    if text is None:
        return None
    if text in words:
        return text
    if number is not None:
        return float(number)
    if interval is None or not clock.temporal:
        what = "an INTERVAL or a number of grid steps" if clock.temporal else "a number of grid steps"
        if words:
            what = ", ".join(repr(w) for w in words) + ", " + what
        raise ValueError(f"{function}: {name} must be {what}, got {text!r}")
    return ...


def span_in_steps(
    function: str,
    name: str,
    minimum: float | None,
    clock: Clock,
    grid: Grid,
    span: Span | None,
    words: tuple[str, ...] = (),
    whole: bool = False,
) -> Any:
    """A length-of-time argument in grid steps: one value, or one per row when it depends on the row's step.

    An argument that may also be a word (``seasonal := 'auto'``) names them in ``words``: one comes back as it is.
    Months on a grid of fixed steps (``INTERVAL 1 YEAR`` on weekly data) count :data:`MONTH_DAYS` days each:
    a year is 52.1775 weeks or 365.2425 days; an argument that must be ``whole`` takes the nearest whole
    number of steps (52 weeks). A fixed length on a calendar grid (days on monthly data) is an error.
    """
    read = static_span(function, name, clock, span, words)
    if read is not ...:
        return read  # NULL, a word, or grid steps as in the list form
    text, interval, _ = span
    months, length = interval_ticks(interval)
    steps = grid.steps(months, length)
    fixed = grid.length > 0
    if months and fixed.any():
        steps[fixed] = (months * MONTH_DAYS * DAY_US + length) / grid.length[fixed]
        if whole:
            steps[fixed] = np.maximum(np.round(steps[fixed]), 1.0)
    # a group of one observation has no step (0) and so no span in steps: it gets the NULL meaning of
    # the argument, whatever the other groups of its batch
    stepped = (grid.months > 0) | (grid.length > 0)
    counted = steps[grid.values.row_valid & (grid.values.lengths > 0) & stepped]
    if np.isnan(counted).any():
        raise ValueError(
            f"{function}: {name} {text!r} cannot be counted in the grid's steps "
            "(days or hours on a calendar step of months); give it in months or as a number of steps"
        )
    if minimum is not None and (counted < minimum).any():
        raise ValueError(
            f"{function}: {name} must be >= {minimum:g} grid steps, got {text!r} ({counted.min():.6g} steps)"
        )
    return steps


def span_array(clock: Clock, grid: Grid, steps: np.ndarray) -> pa.Array:
    """Periods in grid steps as spans of time: INTERVALs for temporal times, numbers otherwise.

    On calendar grids a period is whole months (a fraction of a month has no fixed length). On grids of
    whole days (daily, weekly) a period within :data:`CALENDAR_TOLERANCE` of a month, a quarter or a year
    (:func:`calendar_months`) is that many months, and any other is rounded to whole days: a yearly cycle
    on weekly data reads ``1 year``, not ``364 days 05:06:37``. Finer grids (hours) keep the exact length.
    """
    n = len(steps)
    missing = np.isnan(steps)
    months, ticks = grid.span(steps)
    days = np.where(grid.length > 0, grid.length / DAY_US, np.nan)
    in_days = (days == np.round(days)) & ~np.isnan(ticks)
    if clock.temporal and in_days.any():
        whole_days = np.round(ticks[in_days] / DAY_US)
        calendar = calendar_months(ticks[in_days] / DAY_US)
        months[in_days] = calendar
        ticks[in_days] = np.where(calendar > 0, 0.0, whole_days * DAY_US)
    if clock.temporal:
        micros = np.where(np.isnan(ticks), 0, np.round(np.nan_to_num(ticks))).astype(np.int64)
        days, rest = np.divmod(micros, DAY_US)
        whole_months = np.nan_to_num(months).astype(np.int64)
        children = [intervals(whole_months, days, rest * 1000, missing), pa.nulls(n, pa.float64())]
        tag = 0
    else:
        children = [pa.nulls(n, pa.month_day_nano_interval()), to_arrow_scalar(ticks)]
        tag = 1
    return pa.UnionArray.from_sparse(pa.array(np.full(n, tag, dtype=np.int8)), children, field_names=["span", "number"])


_INTERVAL = np.dtype([("months", "<i4"), ("days", "<i4"), ("nanoseconds", "<i8")])


def intervals(months: np.ndarray, days: np.ndarray, nanoseconds: np.ndarray, missing: np.ndarray) -> pa.Array:
    """An Arrow ``month_day_nano_interval`` array from its three parts (NULL where ``missing``), built from
    its buffers in a few vectorised steps rather than one Python object per row."""
    n = len(missing)
    parts = np.zeros(n, dtype=_INTERVAL)
    parts["months"], parts["days"], parts["nanoseconds"] = months, days, nanoseconds
    validity = pa.py_buffer(np.packbits(~missing, bitorder="little")) if missing.any() else None
    return pa.Array.from_buffers(pa.month_day_nano_interval(), n, [validity, pa.py_buffer(parts)])


def calendar_months(days: np.ndarray) -> np.ndarray:
    """The calendar length (1, 3 or 12 months) each length in days reads as, within
    :data:`CALENDAR_TOLERANCE`; 0 where it reads as none."""
    days = np.asarray(days, dtype=np.float64)
    out = np.zeros(days.shape, dtype=np.int64)
    for months in CALENDAR_LENGTHS:
        out[np.abs(days - months * MONTH_DAYS) <= CALENDAR_TOLERANCE * months * MONTH_DAYS] = months
    return out


def calendar_offset(clock: Clock, grid: Grid, period: float) -> np.ndarray:
    """Where phase 0 of a cycle of ``period`` grid steps lies on the calendar, in steps after each row's first
    grid point (in ``(-period, 0]``).

    Phase 0 is at 0 for numbers; on calendar grids at January 1970 and every ``period`` from it (a year's
    cycle: January, a quarter's: January, April ...); on fixed grids, for a cycle that reads as a month, a
    quarter or a year (:func:`calendar_months`), at the start of that calendar period in which the row
    starts (the fit's cycle has the calendar's mean length, so later cycles may sit up to a day or two
    off the calendar's), otherwise at Monday 1970-01-05 00:00 and every ``period`` from it (00:00 for a
    day, Monday 00:00 for a week).
    """
    start = np.nan_to_num(grid.start)
    steps = np.zeros(len(start))
    fixed = grid.length > 0
    if not clock.temporal:
        steps[fixed] = start[fixed] / grid.length[fixed]
        return -np.mod(steps, period)
    calendar = grid.months > 0
    if calendar.any():
        steps[calendar] = month_index(start[calendar]) / grid.months[calendar]
    if fixed.any():
        first, length = start[fixed], grid.length[fixed]
        months = calendar_months(period * length / DAY_US)
        origin = np.full(len(first), float(_MONDAY))
        monthly = months > 0
        if monthly.any():
            block = month_index(first[monthly]) // months[monthly] * months[monthly]
            origin[monthly] = add_months(np.zeros(len(block)), block)
        steps[fixed] = (first - origin) / length
    return -np.mod(steps, period)


class PeriodParts(NamedTuple):
    """An INTERVAL's own parts, exact: whole months, whole days and microseconds (as DuckDB keeps them)."""

    months: int
    days: int
    microseconds: int


def period_parts(period: Any) -> Any:
    """A period from an ``*_agg`` answer, read exactly in Python.

    DuckDB hands an INTERVAL to Python (``fetchall``, ``fetchone``, ``df``) as a ``datetime.timedelta``
    that counts a month as 30 days: ``INTERVAL 12 MONTH`` arrives as ``timedelta(days=360)``, which
    cannot be told from 360 days. Arrow keeps the parts: fetch the rows as Arrow
    (``con.sql(query).to_arrow_table()``) and pass a period from there.

    Parameters
    ----------
    period : pyarrow.MonthDayNano, pyarrow Scalar or Array, number or None
        A period (the ``UNION(span INTERVAL, number DOUBLE)`` of ``dominant_period_agg``, the ``period``
        field of ``seasonality_agg`` ...) as Arrow gives it; an Array or ChunkedArray of them.

    Returns
    -------
    PeriodParts, float, None or list
        ``PeriodParts(months, days, microseconds)`` for an INTERVAL, the number for numeric times, None
        for NULL; a list of these for an array.

    Raises
    ------
    ValueError
        For a ``datetime.timedelta`` (its months are lost already) or anything that is not a period.

    Examples
    --------
    >>> import pyarrow as pa
    >>> period_parts(pa.MonthDayNano([12, 0, 0]))
    PeriodParts(months=12, days=0, microseconds=0)
    >>> period_parts(pa.array([pa.MonthDayNano([0, 7, 0]), None], pa.month_day_nano_interval()))
    [PeriodParts(months=0, days=7, microseconds=0), None]
    """
    if isinstance(period, (pa.Array, pa.ChunkedArray)):
        return [period_parts(p) for p in period.to_pylist()]
    if isinstance(period, pa.Scalar):
        period = period.as_py()
    if period is None:
        return None
    if isinstance(period, pa.MonthDayNano):
        return PeriodParts(period.months, period.days, period.nanoseconds // 1000)  # DuckDB keeps microseconds
    if isinstance(period, dt.timedelta):
        raise ValueError(
            "tsql.period_parts: a datetime.timedelta has lost the INTERVAL's months (DuckDB hands a month to Python "
            "as 30 days); fetch the rows as Arrow, con.sql(query).to_arrow_table(), and pass the period from there"
        )
    if isinstance(period, (int, float)) and not isinstance(period, bool):
        return float(period)
    raise ValueError(f"tsql.period_parts: expected a period (an INTERVAL from Arrow or a number), got {period!r}")


# --- Arrow time columns (hosts that hand over times rather than ticks) ------------------------


def arrow_clock(t: pa.DataType) -> Clock | None:
    """The clock of an Arrow time column; None for a type that is not a time."""
    if pa.types.is_date(t):
        return Clock("date")
    if pa.types.is_timestamp(t):
        return Clock("timestamp" if t.tz is None else "timestamptz")
    if pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t) or pa.types.is_null(t):
        return Clock("number")
    return None


def ticks_of(times: pa.Array) -> np.ndarray:
    """The ticks of an Arrow time column (a timestamp with a zone: the UTC instant); NaN for NULL."""
    t = times.type
    if pa.types.is_date(t):
        days = pc.cast(pc.cast(times, pa.date32()), pa.int32())
        micros = pc.multiply(pc.cast(days, pa.int64()), DAY_US)
    elif pa.types.is_timestamp(t):
        micros = pc.cast(pc.cast(times, pa.timestamp("us", tz=t.tz)), pa.int64())
    else:
        micros = times
    return pc.cast(micros, pa.float64()).to_numpy(zero_copy_only=False)


def times_of(ticks: np.ndarray, kind: str) -> pa.Array:
    """Ticks as an Arrow column of ``kind``: 'date', 'timestamp_ntz', 'timestamp' (UTC) or 'double'."""
    missing = np.isnan(ticks)
    mask = missing if missing.any() else None
    whole = np.where(missing, 0, ticks).astype(np.int64)
    if kind == "double":
        return pa.array(ticks, type=pa.float64(), mask=mask)
    if kind == "date":
        return pa.array((whole // DAY_US).astype(np.int32), type=pa.date32(), mask=mask)
    return pa.array(whole, type=pa.timestamp("us", tz="UTC" if kind == "timestamp" else None), mask=mask)


def moment_text(clock: Clock, tick: float) -> str:
    """A tick as messages show a time: ISO text for DATE and TIMESTAMP times (UTC for TIMESTAMPTZ), else the number."""
    if not clock.temporal:
        return f"{tick:g}"
    moment = np.datetime64(int(tick), "us")
    if int(tick) % 10**6 == 0:
        moment = moment.astype("datetime64[s]")
    if clock.kind == "date" and int(tick) % DAY_US == 0:
        return str(moment.astype("datetime64[D]"))
    return str(moment).replace("T", " ") + ("+00" if clock.utc else "")


def whole_days(ticks: np.ndarray) -> bool:
    """Whether every present tick is a midnight."""
    return not (np.where(np.isnan(ticks), 0, ticks).astype(np.int64) % DAY_US).any()


# --- span text ----------------------------------------------------------------------------------

_MICROS = {"microsecond": 1, "millisecond": 1000, "second": 10**6, "minute": 60 * 10**6, "hour": 3600 * 10**6}
_UNITS: dict[str, tuple[str, int]] = {}
for _unit, _words in {
    ("us", 1): "us usec usecs microsecond microseconds",
    ("us", 1000): "ms msec msecs millisecond milliseconds",
    ("us", 10**6): "s sec secs second seconds",
    ("us", 60 * 10**6): "m min mins minute minutes",
    ("us", 3600 * 10**6): "h hr hrs hour hours",
    ("days", 1): "d day days",
    ("days", 7): "w week weeks",
    ("months", 1): "mon mons month months",
    ("months", 3): "quarter quarters",
    ("months", 12): "y yr yrs year years",
    ("months", 120): "decade decades",
    ("months", 1200): "century centuries",
    ("months", 12000): "millennium millennia",
}.items():
    _UNITS.update(dict.fromkeys(_words.split(), _unit))


def read_span(text: str) -> Span:
    """Span text as SQL reads it: ``(text, interval or None, number or None)``.

    The number is the text as a DOUBLE; the interval is read from amounts with units (``'1 month'``,
    ``'2 days 3 hours'``, ``'1.5 days'``, ``'90 min'``, ``'-1 day'``, ``'1 day ago'``), a clock time
    (``'01:30:00'``) or a bare number of seconds. A fraction of a month or longer is not read.
    """
    try:
        number: float | None = float(text)
    except ValueError:
        number = None
    return text, _read_interval(text), number


def _read_interval(text: str) -> pa.MonthDayNano | None:
    words = text.lower().split()
    sign = 1
    if words and words[-1] == "ago":
        words, sign = words[:-1], -1
    if not words:
        return None
    parts: dict[str, Fraction] = {"months": Fraction(0), "days": Fraction(0), "us": Fraction(0)}
    i = 0
    while i < len(words):
        word = words[i]
        if ":" in word:
            micros = _clock_time(word)
            if micros is None:
                return None
            parts["us"] += micros
            i += 1
            continue
        digits = len(word) - len(word.lstrip("-0123456789."))
        amount = _amount(word[:digits])
        unit = word[digits:]
        if amount is None:
            return None
        if not unit:
            if i + 1 < len(words) and words[i + 1] in _UNITS:
                unit, i = words[i + 1], i + 1
            elif len(words) == 1:
                unit = "s"  # a bare number counts seconds
            else:
                return None
        if unit not in _UNITS:
            return None
        field, size = _UNITS[unit]
        value = amount * size
        if field == "months" and value.denominator != 1:
            return None
        if field == "days" and value.denominator != 1:
            parts["us"] += (value - int(value)) * DAY_US
            value = Fraction(int(value))
        parts[field] += value
        i += 1
    if parts["us"].denominator != 1:
        return None
    return pa.MonthDayNano([sign * int(parts["months"]), sign * int(parts["days"]), sign * int(parts["us"]) * 1000])


def _amount(text: str) -> Fraction | None:
    negative = text.startswith("-")
    body = text[1:] if negative else text
    whole, _, fraction = body.partition(".")
    if not (whole or fraction) or not (whole + fraction).isdigit():
        return None
    value = Fraction(int(whole or "0")) + (Fraction(int(fraction), 10 ** len(fraction)) if fraction else 0)
    return -value if negative else value


def _clock_time(word: str) -> Fraction | None:
    negative = word.startswith("-")
    fields = (word[1:] if negative else word).split(":")
    if not 2 <= len(fields) <= 3:
        return None
    amounts = [_amount(f) for f in fields]
    if any(a is None or a < 0 for a in amounts) or any(a.denominator != 1 for a in amounts[:-1]):
        return None
    micros = sum(a * size for a, size in zip(amounts, (3600 * 10**6, 60 * 10**6, 10**6)))
    return -micros if negative else micros
