"""``seriesql plot``: draw the series of a query as a PNG or SVG picture.

The query returns one row per observation: a time, a value and, optionally, a
series. Columns named ``time``, ``value`` and ``series`` are taken by name;
otherwise by type: the text column is the series, the DATE or TIMESTAMP column
the time and the numeric column the value (of two numeric columns, the first
is the time). Each series is one line, broken where its grid (as ``on_grid``
infers it) has steps without a row or rows without a value. ``marks`` is a
second query whose rows are times, optionally with a series (a list of times,
as ``change_points_agg`` returns, counts as one mark per element); each becomes
a dotted vertical line in its series' colour. ``smooth`` overlays
``harmonic_smooth_agg`` of each series, computed in SQL over the same query, at
the given period or else at each series' dominant period.

matplotlib is an optional dependency (``pip install 'seriesql[plot]'``); it is
imported only here, and drawn with the Agg canvas, so no display is needed.
"""

from __future__ import annotations

import datetime as dt
import math
import os
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import pyarrow as pa

from tsql.pipeline import UsageError, open_database, output_path, quote_name

__all__ = ["FORMATS", "MISSING_MATPLOTLIB", "Drawn", "PlotError", "Series", "plot", "plot_query"]

FORMATS = {".png": "png", ".svg": "svg"}
MISSING_MATPLOTLIB = "matplotlib is not installed; install it with: pip install 'seriesql[plot]'"
LEGEND_LIMIT = 12
"""More series than this get no legend (it would hide the picture)."""
LONG_LINE = 50_000
"""A single line (no series column) of more points than this is most likely several series or raw
rows that were meant to be aggregated: the picture then warns."""
_ROLES = ("time", "value", "series")


class PlotError(Exception):
    """A mistake in the call or the queries (exit code 2); the message is for the user."""


@dataclass
class Series:
    """One line of the picture: its name, times and values (NaN: missing), and what to draw on it."""

    name: str
    times: list[Any] = field(default_factory=list)
    values: list[float] = field(default_factory=list)
    smooth_times: list[Any] = field(default_factory=list)
    smooth_values: list[float] = field(default_factory=list)
    marks: list[Any] = field(default_factory=list)
    alone: list[int] = field(default_factory=list)
    """Positions of values with no present neighbour, drawn as dots."""


@dataclass(frozen=True)
class Drawn:
    """What :func:`plot_query` wrote."""

    path: Path
    series: int
    points: int
    unsmoothed: tuple[str, ...] = ()
    """Series that got no smooth curve (too few values for the harmonics asked for)."""
    no_period: tuple[str, ...] = ()
    """Series smoothed over their whole record, having no dominant period (``smooth`` without ``period``)."""
    one_long_line: bool = False
    """The query had no series column and gave more than :data:`LONG_LINE` points."""


def plot_query(
    con: duckdb.DuckDBPyConnection,
    sql: str,
    out: str | os.PathLike,
    marks: str | None = None,
    smooth: bool = False,
    harmonics: int = 3,
    period: str | None = None,
    title: str | None = None,
    replace: bool = False,
) -> Drawn:
    """Run ``sql`` (and ``marks``) on ``con`` and draw the picture at ``out``.

    ``con`` needs the tsql functions registered when ``smooth`` is set. Raises
    :class:`PlotError` for anything the user should fix; ``out`` is then left as it was.
    """
    path, fmt = check_out(out, replace)
    if smooth and harmonics < 1:
        raise PlotError(f"--harmonics must be a whole number >= 1, got {harmonics}")
    figure_parts = _matplotlib()
    sql = _one_statement(sql, "--sql")
    table = _query(con, sql, "--sql")
    roles = column_roles(table.schema, "--sql")
    series = _series(table, roles)
    no_period: tuple[str, ...] = ()
    if smooth:
        no_period = _add_smooth(con, sql, table.schema, roles, series, harmonics, period)
    points = sum(len(s.times) for s in series.values())
    for s in series.values():
        _break_at_gaps(s)
    time_kind = _kind(table.schema.field(roles["time"]).type)
    if marks is not None:
        _add_marks(_query(con, _one_statement(marks, "--marks"), "--marks"), series, time_kind)
    names = {role: table.schema.field(index).name for role, index in roles.items()}
    try:
        plot(series, path, fmt, figure_parts, names["time"], names["value"], title)
    except (ValueError, TypeError, OverflowError) as error:  # matplotlib refusing the data
        raise PlotError(f"cannot draw the picture: {_first_line(error)}") from None
    unsmoothed = tuple(s.name for s in series.values() if smooth and not s.smooth_times)
    no_period = tuple(name for name in no_period if name not in unsmoothed)
    long_line = "series" not in roles and points > LONG_LINE
    return Drawn(path, len(series), points, unsmoothed, no_period, long_line)


def check_out(out: str | os.PathLike, replace: bool) -> tuple[Path, str]:
    """The output path and its format; refuses an unknown extension, a missing folder, an existing file."""
    try:
        path = output_path(out, replace, tuple(FORMATS))
    except ValueError as error:
        raise PlotError(str(error)) from None
    return path, FORMATS[path.suffix.lower()]


def _matplotlib() -> tuple[Any, Any]:
    """matplotlib's Figure and Agg canvas classes, or a PlotError telling how to install them."""
    try:
        import matplotlib  # noqa: F401  (first: a blocked parent import must fail here)
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError:
        raise PlotError(MISSING_MATPLOTLIB) from None
    return Figure, FigureCanvasAgg


def _one_statement(sql: str, option: str) -> str:
    from tsql.statements import split_statements

    statements = split_statements(sql)
    if len(statements) != 1:
        raise PlotError(f"{option} wants exactly one SQL query, got {len(statements)} statements")
    return statements[0].text


def _query(con: duckdb.DuckDBPyConnection, sql: str, option: str) -> pa.Table:
    try:
        relation = con.sql(sql)
        if relation is None:
            raise PlotError(f"{option} must be a query that returns rows")
        return relation.to_arrow_table()
    except duckdb.Error as error:
        raise PlotError(f"{option} query failed: {_first_line(error)}") from None


def _first_line(error: BaseException) -> str:
    return str(error).strip().splitlines()[0] if str(error).strip() else type(error).__name__


def _kind(data_type: pa.DataType) -> str:
    if pa.types.is_date(data_type) or pa.types.is_timestamp(data_type):
        return "temporal"
    if pa.types.is_integer(data_type) or pa.types.is_floating(data_type) or pa.types.is_decimal(data_type):
        return "numeric"
    return "other"


def column_roles(schema: pa.Schema, option: str = "--sql") -> dict[str, int]:
    """Which column is the time, the value and (if any) the series: ``{'time': i, 'value': j, ...}``."""
    names = [name.lower() for name in schema.names]
    shown = ", ".join(f"{f.name} {f.type}" for f in schema)
    problem = PlotError(
        f"{option} must return a time, a value and optionally a series column "
        f"(e.g. SELECT day, price, instrument FROM ...); got ({shown}). "
        "Name the columns time, value and series to say which is which"
    )
    if len(names) not in (2, 3):
        raise problem
    if "time" in names and "value" in names:
        roles = {"time": names.index("time"), "value": names.index("value")}
        rest = [i for i in range(len(names)) if i not in roles.values()]
        if rest:
            roles["series"] = names.index("series") if "series" in names else rest[0]
    else:
        kinds = [_kind(f.type) for f in schema]
        others = [i for i, k in enumerate(kinds) if k == "other"]
        if len(others) > 1 or (len(names) == 3 and not others) or (len(names) == 2 and others):
            raise problem
        rest = [i for i in range(len(names)) if i not in others]
        temporal = [i for i in rest if kinds[i] == "temporal"]
        if len(temporal) == 1:
            roles = {"time": temporal[0], "value": next(i for i in rest if i != temporal[0])}
        elif not temporal:
            roles = {"time": rest[0], "value": rest[1]}
        else:
            raise problem
        if others:
            roles["series"] = others[0]
    if _kind(schema.field(roles["value"]).type) != "numeric":
        raise PlotError(f"{option}: the value column {schema.names[roles['value']]!r} is not a number")
    if _kind(schema.field(roles["time"]).type) == "other":
        raise PlotError(f"{option}: the time column {schema.names[roles['time']]!r} is not a date, time or number")
    return roles


def _label(value: Any) -> str:
    return "NULL" if value is None else str(value)


def _number(value: Any) -> float:
    return math.nan if value is None else float(value)


def _series(table: pa.Table, roles: dict[str, int]) -> dict[str, Series]:
    """The rows grouped into series (sorted by name, so colours do not depend on row order), each sorted by time."""
    if table.num_rows == 0:
        raise PlotError("the --sql query returned no rows; there is nothing to draw")
    times = table.column(roles["time"]).to_pylist()
    values = table.column(roles["value"]).to_pylist()
    keys = table.column(roles["series"]).to_pylist() if "series" in roles else [None] * len(times)
    default = table.schema.names[roles["value"]]
    grouped: dict[str, list[tuple[Any, float]]] = {}
    for key, t, v in zip(keys, times, values):
        if t is not None:
            grouped.setdefault(_label(key) if "series" in roles else default, []).append((t, _number(v)))
    if not grouped:
        raise PlotError("every row of the --sql query has a NULL time; there is nothing to draw")
    series = {}
    for name, points in sorted(grouped.items()):
        points.sort(key=lambda p: _sort_key(p[0]))
        series[name] = Series(name, [p[0] for p in points], [p[1] for p in points])
    return series


def _sort_key(t: Any) -> Any:
    """Dates and timestamps compare together (a DATE is its midnight)."""
    if isinstance(t, dt.datetime):
        return t.replace(tzinfo=None) if t.tzinfo is None else t.astimezone(dt.UTC).replace(tzinfo=None)
    if isinstance(t, dt.date):
        return dt.datetime(t.year, t.month, t.day)
    return t


def _ticks(times: list[Any]) -> tuple[np.ndarray, bool]:
    """Times as the grid kernel's ticks (microseconds since 1970 for dates and timestamps, UTC for a
    zone), and whether they are temporal."""
    if not isinstance(times[0], dt.date):
        return np.array([float(t) for t in times]), False
    epoch = dt.datetime(1970, 1, 1)
    ticks = np.empty(len(times))
    for i, t in enumerate(times):
        delta = _sort_key(t) - epoch
        ticks[i] = (delta.days * 86_400 + delta.seconds) * 1_000_000 + delta.microseconds
    return ticks, True


def _break_at_gaps(s: Series) -> None:
    """Put a missing value between two observations with grid steps missing between them, so the line
    breaks there; a point left alone between breaks gets a dot (a line of one point draws nothing)."""
    from tsql.kernels.grid import on_grid
    from tsql.kernels.ragged import Ragged

    if len(s.times) < 2:
        return
    ticks, temporal = _ticks(s.times)
    try:
        grid = on_grid(Ragged.from_list([ticks]), Ragged.from_list([s.values]), temporal)
    except ValueError:  # a grid too fine for its span: draw the line as it is
        return
    if len(grid.points) != len(s.times):  # no grid for this series (a stray time far away)
        return
    after = np.flatnonzero(np.diff(grid.points) > 1)  # a break goes after these, at the same time
    source = np.insert(np.arange(len(s.times)), after + 1, after)
    values = np.insert(np.asarray(s.values, dtype=np.float64), after + 1, np.nan)
    s.times, s.values = [s.times[i] for i in source], values.tolist()
    present = ~np.isnan(values)
    before = np.concatenate(([False], present[:-1]))
    later = np.concatenate((present[1:], [False]))
    s.alone = np.flatnonzero(present & ~before & ~later).tolist()


def _period_literal(con: duckdb.DuckDBPyConnection, period: str | None) -> str:
    if period is None:
        return "NULL"
    try:
        number = float(period)
    except ValueError:
        pass
    else:
        if not math.isfinite(number) or number <= 0:
            raise PlotError(f"--period must be positive, got {period!r}")
        return repr(number)
    try:
        con.execute("SELECT CAST(? AS INTERVAL)", [period]).fetchall()
    except duckdb.Error:
        raise PlotError(f"--period must be a number of steps or an interval such as '1 day', got {period!r}") from None
    return "INTERVAL '" + period.replace("'", "''") + "'"


def _add_smooth(
    con: duckdb.DuckDBPyConnection,
    sql: str,
    schema: pa.Schema,
    roles: dict[str, int],
    series: dict[str, Series],
    harmonics: int,
    period: str | None,
) -> tuple[str, ...]:
    """Fill in each series' smooth curve; returns the series smoothed without a period (none found)."""
    time, value = quote_name(schema.names[roles["time"]]), quote_name(schema.names[roles["value"]])
    key = quote_name(schema.names[roles["series"]]) if "series" in roles else "NULL"
    rows = f"(SELECT {key} AS k, {time} AS t, {value} AS v FROM __tsql_plot WHERE {time} IS NOT NULL)"
    if period is None:  # each series' dominant period, in steps of its grid (as the smooth's own)
        periods = (
            f"(SELECT k, dominant_period(on_grid(list(v ORDER BY t), list(t ORDER BY t))) AS p FROM {rows} GROUP BY k)"
        )
    else:
        periods = f"(SELECT DISTINCT k, {_period_literal(con, period)} AS p FROM {rows})"
    smooth_sql = (
        f"WITH __tsql_plot AS ({sql}\n) SELECT r.k, p.p IS NULL, harmonic_smooth_agg(r.v, r.t, "
        f"harmonics := {int(harmonics)}, period := p.p) AS s "
        f"FROM {rows} r JOIN {periods} p ON r.k IS NOT DISTINCT FROM p.k GROUP BY r.k, p.p"
    )
    try:
        found = con.execute(smooth_sql).fetchall()
    except duckdb.Error as error:
        raise PlotError(f"--smooth failed: {_first_line(error)}") from None
    default = schema.names[roles["value"]]
    no_period = []
    for k, unknown, points in found:
        target = series.get(_label(k) if "series" in roles else default)
        if target is None or not points:
            continue  # a series of NULL values only, or too short to fit
        target.smooth_times = [p["time"] for p in points]
        target.smooth_values = [_number(p["value"]) for p in points]
        if unknown and period is None:
            no_period.append(target.name)
    return tuple(sorted(no_period))


def _add_marks(table: pa.Table, series: dict[str, Series], time_kind: str) -> None:
    """Attach each mark to its series; a mark without a series (or of an unknown one) goes on every series."""
    if table.num_columns == 1:
        time_index, key_index = 0, None
    elif table.num_columns == 2:
        names = [n.lower() for n in table.schema.names]
        if "time" in names:
            time_index = names.index("time")
        else:
            kinds = [_list_kind(f.type) for f in table.schema]
            time_index = 1 if kinds[0] == "other" or kinds[1] == "temporal" else 0
        key_index = 1 - time_index
    else:
        raise PlotError(
            f"--marks must return a time column and optionally a series column, got {table.num_columns} columns"
        )
    kind = _list_kind(table.schema.field(time_index).type)
    if kind == "other":
        raise PlotError(f"--marks: the column {table.schema.names[time_index]!r} holds neither times nor numbers")
    if kind != time_kind:
        said = {"temporal": "dates or timestamps", "numeric": "numbers"}
        raise PlotError(f"--marks gives {said[kind]} but the times of --sql are {said[time_kind]}")
    times = table.column(time_index).to_pylist()
    keys = table.column(key_index).to_pylist() if key_index is not None else [None] * len(times)
    for key, value in zip(keys, times):
        for t in value if isinstance(value, list) else [value]:
            if t is None:
                continue
            owner = series.get(_label(key)) if key_index is not None else None
            for s in [owner] if owner is not None else series.values():
                s.marks.append(t)


def _list_kind(data_type: pa.DataType) -> str:
    if pa.types.is_list(data_type) or pa.types.is_large_list(data_type):
        return _kind(data_type.value_type)
    return _kind(data_type)


def plot(
    series: dict[str, Series],
    path: Path,
    fmt: str,
    figure_parts: tuple[Any, Any] | None = None,
    time_label: str = "time",
    value_label: str = "value",
    title: str | None = None,
) -> None:
    """Draw ``series`` to ``path`` in ``fmt`` ('png' or 'svg'), through a temporary file and a rename.

    In an SVG, series ``k`` (1-based, in order) is the group ``tsql-series-k``, its smooth curve
    ``tsql-smooth-k`` and its marks ``tsql-mark-k-1``, ``tsql-mark-k-2`` ...
    """
    Figure, FigureCanvasAgg = figure_parts or _matplotlib()
    import matplotlib
    from matplotlib.dates import AutoDateLocator, ConciseDateFormatter
    from matplotlib.lines import Line2D

    with matplotlib.rc_context({"svg.hashsalt": "tsql", "svg.fonttype": "none"}):
        figure = Figure(figsize=(10, 4.8), layout="constrained")
        FigureCanvasAgg(figure)
        axes = figure.add_subplot()
        colours = matplotlib.rcParams["axes.prop_cycle"].by_key().get("color", ["C0"])
        temporal = False
        for k, s in enumerate(series.values(), 1):
            colour = colours[(k - 1) % len(colours)]
            temporal = temporal or isinstance(s.times[0], dt.date)
            (line,) = axes.plot(s.times, s.values, color=colour, linewidth=1.1, label=s.name)
            if s.alone:
                line.set(marker="o", markersize=2.5, markevery=s.alone)
            line.set_gid(f"tsql-series-{k}")
            if s.smooth_times:
                (curve,) = axes.plot(
                    s.smooth_times, s.smooth_values, color=colour, linewidth=2.4, alpha=0.55, label="_nolegend_"
                )
                curve.set_gid(f"tsql-smooth-{k}")
            for j, t in enumerate(s.marks, 1):
                axes.axvline(t, color=colour, linestyle=":", linewidth=1.4).set_gid(f"tsql-mark-{k}-{j}")
        if temporal:
            locator = AutoDateLocator()
            axes.xaxis.set_major_locator(locator)
            axes.xaxis.set_major_formatter(ConciseDateFormatter(locator))
        axes.set_xlabel(time_label)
        axes.set_ylabel(value_label)
        axes.grid(True, alpha=0.3)
        handles, labels = axes.get_legend_handles_labels()
        if len(series) == 1 or len(series) > LEGEND_LIMIT:
            handles, labels = [], []
        if any(s.smooth_times for s in series.values()):
            handles.append(Line2D([], [], color="grey", linewidth=2.4, alpha=0.55))
            labels.append("harmonic smooth")
        if any(s.marks for s in series.values()):
            handles.append(Line2D([], [], color="grey", linestyle=":", linewidth=1.4))
            labels.append("marks")
        if handles:
            axes.legend(handles, labels, loc="best", fontsize="small")
        only = next(iter(series.values())) if len(series) == 1 else None
        if title or (only is not None and only.name != value_label):
            axes.set_title(title or only.name)
        _save(figure, path, fmt)


def _save(figure: Any, path: Path, fmt: str) -> None:
    folder = Path(tempfile.mkdtemp(prefix=f".{path.name}.", dir=path.parent))
    try:
        metadata = {"Date": None} if fmt == "svg" else None
        figure.savefig(folder / path.name, format=fmt, dpi=120, metadata=metadata)
        os.replace(folder / path.name, path)
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def main(
    sql: str,
    out: str,
    db: str = ":memory:",
    marks: str | None = None,
    smooth: bool = False,
    harmonics: int = 3,
    period: str | None = None,
    title: str | None = None,
    replace: bool = False,
) -> int:
    """The ``seriesql plot`` command: returns the exit code and prints one line about what it wrote."""
    import sys

    try:
        check_out(out, replace)
        _matplotlib()
        if db != ":memory:" and not Path(db).expanduser().exists():
            raise PlotError(f"no database at {db}")
        try:
            con = open_database(db, read_only=db != ":memory:")
        except UsageError as error:
            raise PlotError(str(error)) from None
        with con:
            con.execute("SET enable_progress_bar = false")
            drawn = plot_query(con, sql, out, marks, smooth, harmonics, period, title, replace)
    except PlotError as error:
        print(f"seriesql plot: {error}", file=sys.stderr)
        return 2
    print(f"wrote {drawn.path} ({drawn.series:,} series, {drawn.points:,} points)")
    if drawn.unsmoothed:
        print(f"seriesql plot: too few values for a smooth curve: {', '.join(drawn.unsmoothed)}", file=sys.stderr)
    if drawn.no_period:
        print(
            f"seriesql plot: no dominant period in {', '.join(drawn.no_period)}: smoothed over the whole record; "
            "give one with --period",
            file=sys.stderr,
        )
    if drawn.one_long_line:
        print(
            f"seriesql plot: warning: one line of {drawn.points:,} points; if the rows hold several series, "
            "return the series column too (SELECT item, day, units ...), else aggregate first (one row per time)",
            file=sys.stderr,
        )
    return 0
