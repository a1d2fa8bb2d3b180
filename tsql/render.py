"""Query results as plain-text tables that fit a given width.

Used by ``seriesql shell`` and ``seriesql run``. Layout: a header, a rule of dashes,
the rows, and a footer line with the row count; columns two spaces apart,
numbers right-aligned, NULL written as ``NULL``, lists as ``[1, 2]`` and
structs as ``{name: value}`` (or, expanded, one column per field: ``s.period``,
``s.p_value``). Floating-point numbers show ``digits`` significant digits, in
exponent form when small or large (a p-value of 1.2e-38 stays 1.2e-38). Columns
that do not fit are left out and the footer says how many; long results show
their first rows.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from collections.abc import Sequence
from decimal import Decimal
from typing import Any

import pyarrow as pa

NULL = "NULL"
GAP = "  "
MIN_WIDTH = 12
"""Columns are narrowed, never below this (or their natural width), before any is left out."""
DIGITS = 10
"""Significant digits of a floating-point number, unless told otherwise."""
MAX_DIGITS = 17
"""Enough to tell any two doubles apart."""
ELLIPSIS = "…"
_ESCAPES = str.maketrans({"\n": "\\n", "\r": "\\r", "\t": "\\t"})


def format_table(
    column_names: Sequence[str],
    rows: Sequence[Sequence[Any]],
    width: int = 80,
    max_rows: int = 40,
    total_rows: int | None = None,
    digits: int = DIGITS,
) -> str:
    """Render rows of Python values as a table at most ``width`` characters wide.

    At most ``max_rows`` rows are shown. ``total_rows`` is the size of the
    whole result when ``rows`` holds only its beginning (default: ``len(rows)``).
    Floating-point numbers show ``digits`` significant digits.
    """
    total = len(rows) if total_rows is None else total_rows
    shown = [[cell(v, digits) for v in row] for row in rows[:max_rows]]
    names = [str(n).translate(_ESCAPES) for n in column_names]
    columns = list(zip(*shown)) if shown else [()] * len(names)
    numeric = [_is_numeric(row[i] for row in rows[:max_rows]) for i in range(len(names))]
    natural = [max([len(n), *map(len, col)]) for n, col in zip(names, columns)]
    widths = _fit(natural, max(width, 1))
    kept = len(widths)

    def line(cells: Sequence[str]) -> str:
        parts = []
        for text, w, right in zip(cells, widths, numeric):
            text = _cut(text, w)
            parts.append(text.rjust(w) if right else text.ljust(w))
        return GAP.join(parts).rstrip()

    out = [line(names), GAP.join("-" * w for w in widths)]
    out += [line(row[:kept]) for row in shown]
    footer = f"{total:,} row{'' if total == 1 else 's'}"
    if total > len(shown):
        footer += f" (first {len(shown):,} shown)"
    hidden = names[kept:]
    if hidden:
        footer += f"; {len(hidden)} column{'' if len(hidden) == 1 else 's'} not shown: {', '.join(hidden)}"
    out.append(_cut(footer, max(width, 1)))
    return "\n".join(out)


def format_arrow(
    table: pa.Table, width: int = 80, max_rows: int = 40, digits: int = DIGITS, expand: bool = False
) -> str:
    """:func:`format_table` for an Arrow table (only the rows shown are converted).

    ``expand`` shows each STRUCT column as one column per field, named ``column.field`` (nested
    structs too); a NULL struct shows NULL in each.
    """
    head = table.slice(0, max_rows)
    if expand:
        head = expanded(head)
    rows = list(zip(*(column.to_pylist() for column in head.columns))) if head.num_columns else []
    return format_table(head.column_names, rows, width, max_rows, total_rows=table.num_rows, digits=digits)


def expanded(table: pa.Table) -> pa.Table:
    """``table`` with every STRUCT column replaced by its fields, named ``column.field``, at every depth."""
    while any(pa.types.is_struct(t) for t in table.schema.types):
        table = table.flatten()
    return table


def cell(value: Any, digits: int = DIGITS) -> str:
    """One value as table text: NULL for None, nested values compactly, no line breaks."""
    if isinstance(value, str):
        return value.translate(_ESCAPES)
    return _text(value, digits)


def _text(value: Any, digits: int = DIGITS) -> str:
    if value is None:
        return NULL
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return _float(value, digits)
    if isinstance(value, str):  # inside a list or struct
        return "'" + value.replace("'", "''").translate(_ESCAPES) + "'"
    if isinstance(value, pa.MonthDayNano):
        return _interval(value.months, value.days, value.nanoseconds // 1000)
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k}: {_text(v, digits)}" for k, v in value.items()) + "}"
    if isinstance(value, list):
        return "[" + ", ".join(_text(v, digits) for v in value) + "]"
    if isinstance(value, tuple):  # a map entry
        return "(" + ", ".join(_text(v, digits) for v in value) + ")"
    if isinstance(value, dt.timedelta):
        return _interval(0, value.days, value.seconds * 1_000_000 + value.microseconds)
    if isinstance(value, bytes):
        return "".join(chr(b) if 32 <= b < 127 and b != 92 else f"\\x{b:02x}" for b in value)
    if isinstance(value, dt.datetime):
        return value.isoformat(sep=" ")
    return str(value)


def _float(x: float, digits: int = DIGITS) -> str:
    if math.isnan(x):
        return "NaN"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return f"{x + 0.0:.{digits}g}"  # + 0.0 turns -0.0 (e.g. a rounded -0.001) into 0


def _interval(months: int, days: int, micros: int) -> str:
    parts = []
    years = int(months / 12)  # toward zero, so that -14 months is -1 year -2 months
    months -= 12 * years
    for n, unit in ((years, "year"), (months, "month"), (days, "day")):
        if n:
            parts.append(f"{n} {unit}{'' if abs(n) == 1 else 's'}")
    if micros or not parts:
        sign = "-" if micros < 0 else ""
        seconds, fraction = divmod(abs(micros), 1_000_000)
        clock = f"{sign}{seconds // 3600:02d}:{seconds // 60 % 60:02d}:{seconds % 60:02d}"
        parts.append(clock + (f".{fraction:06d}".rstrip("0") if fraction else ""))
    return " ".join(parts)


def _is_numeric(values: Any) -> bool:
    present = [v for v in values if v is not None]
    return bool(present) and all(isinstance(v, int | float | Decimal) and not isinstance(v, bool) for v in present)


def _fit(natural: list[int], width: int) -> list[int]:
    """Column widths that fit ``width``: narrow the widest columns first, then drop columns from the right."""
    floor = [min(w, MIN_WIDTH) for w in natural]
    count = len(natural)
    while count > 1 and sum(floor[:count]) + len(GAP) * (count - 1) > width:
        count -= 1
    wanted, floor = natural[:count], floor[:count]
    room = width - len(GAP) * max(count - 1, 0)
    if sum(wanted) <= room:
        return wanted
    if count == 1:
        return [room]
    cap = 0  # the largest cap on the widths that still fits; no column goes below its floor
    while sum(max(min(w, cap + 1), f) for w, f in zip(wanted, floor)) <= room:
        cap += 1
    return [max(min(w, cap), f) for w, f in zip(wanted, floor)]


def _cut(text: str, width: int) -> str:
    return text if len(text) <= width else text[: max(width - 1, 0)] + ELLIPSIS


_UDF_WRAPPER = re.compile(r"Python exception occurred while executing the UDF: \w+: ")


def error_message(error: BaseException) -> str:
    """A DuckDB error as a user should read it: an argument error from a tsql function loses the
    wrapper DuckDB puts around errors raised in Python functions."""
    return _UDF_WRAPPER.sub("", str(error))
