"""Time in one place: ticks, the clock of a time column, steps and spans, and spans back in time terms.

A tick is a DOUBLE: microseconds since 1970 for DATE and TIMESTAMP times (TIMESTAMPTZ: the UTC
instant), otherwise the number itself. A span argument (the step, a period, ...) arrives as
``(text, interval, number)``: its text for messages, and what it reads as an INTERVAL and as a
number (either may be None).
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from tsql.forms.arrow import to_arrow_scalar
from tsql.kernels.grid import DAY_US, Grid

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
) -> Any:
    """A length-of-time argument in grid steps: one value, or one per row when it depends on the row's step.

    An argument that may also be a word (``seasonal := 'auto'``) names them in ``words``: one comes back as it is.
    """
    read = static_span(function, name, clock, span, words)
    if read is not ...:
        return read  # NULL, a word, or grid steps as in the list form
    text, interval, _ = span
    months, length = interval_ticks(interval)
    steps = grid.steps(months, length)
    # a group of one observation has no step (0) and so no span in steps: it gets the NULL meaning of
    # the argument, whatever the other groups of its batch
    stepped = (grid.months > 0) | (grid.length > 0)
    counted = steps[grid.values.row_valid & (grid.values.lengths > 0) & stepped]
    if np.isnan(counted).any():
        raise ValueError(
            f"{function}: {name} {text!r} cannot be counted in the grid's steps "
            "(months on a fixed step, or days on a calendar step); give it in the step's own terms"
        )
    if minimum is not None and (counted < minimum).any():
        raise ValueError(
            f"{function}: {name} must be >= {minimum:g} grid steps, got {text!r} ({counted.min():.6g} steps)"
        )
    return steps


def span_array(clock: Clock, grid: Grid, steps: np.ndarray) -> pa.Array:
    """Periods in grid steps as spans of time: INTERVALs for temporal times, numbers otherwise."""
    n = len(steps)
    missing = np.isnan(steps)
    months, ticks = grid.span(steps)
    if clock.temporal:
        micros = np.where(np.isnan(ticks), 0, np.round(np.nan_to_num(ticks))).astype(np.int64)
        days, rest = np.divmod(micros, DAY_US)
        whole_months = np.nan_to_num(months).astype(np.int64)
        spans = [
            None if missing[i] else pa.MonthDayNano([int(whole_months[i]), int(days[i]), int(rest[i]) * 1000])
            for i in range(n)
        ]
        children = [pa.array(spans, type=pa.month_day_nano_interval()), pa.nulls(n, pa.float64())]
        tag = 0
    else:
        children = [pa.nulls(n, pa.month_day_nano_interval()), to_arrow_scalar(ticks)]
        tag = 1
    return pa.UnionArray.from_sparse(pa.array(np.full(n, tag, dtype=np.int8)), children, field_names=["span", "number"])


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
