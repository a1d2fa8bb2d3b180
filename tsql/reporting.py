"""``seriesql report`` and ``tsql.report``: screen every series of a table and write one self-contained HTML page.

The engine: it checks the input, runs the screen in SQL (:func:`screen_queries` holds every
statement), and gathers the answers into plain data (numbers, text, lists), which
:mod:`tsql.report_page` turns into the page. Data flows one way; each section of the page
carries the exact SQL that produced it, so the analyst can rerun it.
"""

from __future__ import annotations

import datetime as dt
import math
import os
import time as clock
from itertools import zip_longest
from pathlib import Path
from typing import Any

import duckdb

from tsql.pipeline import output_path, partial_path, quote_name

__all__ = [
    "DETAILS",
    "GROUP_ITEMS",
    "LOAD_SERIES",
    "MISSING_PLOTLY",
    "ReportError",
    "gather",
    "main",
    "report",
    "screen_queries",
]

DETAILS = 24
"""Flagged series drawn in full (the rest are reachable from the table)."""
GROUP_ITEMS = 100
"""Series sorted into look-alike groups at most: DTW k-medoids costs the square of this."""
GROUP_MAX_POINTS = 400
"""Look-alike groups only when the series have at most this many grid points."""
LOAD_SERIES = 12
"""Expected-load profiles drawn at most."""
SPARK_POINTS = 32
"""Points of each table row's small chart (bucket means of the grid)."""
ROW_MARKS = 20
"""Change times kept per table row (the count is exact); with the spark, a row stays a few hundred bytes."""
DETAIL_POINTS = 2000
"""A detail chart draws at most about this many points (every k-th of a longer series)."""
MODELS = ("mean", "meanvar", "trend")
MISSING_PLOTLY = (
    "the page's charts need plotly, which is not installed; install it with: pip install 'seriesql[report]'"
)


class ReportError(Exception):
    """Input the report cannot screen (exit code 2); the message is for the user."""


def _literal(text: str) -> str:
    return "'" + text.replace("'", "''") + "'"


def _first_line(error: BaseException) -> str:
    text = str(error).strip()
    return text.splitlines()[0] if text else type(error).__name__


def screen_queries(
    source: str,
    series: str,
    time: str,
    value: str,
    model: str = "mean",
    flagged: list[tuple[str, bool]] | None = None,
    grouped: list[str] | None = None,
    load: tuple[str, list[str]] | None = None,
) -> dict[str, str]:
    """Every SQL statement of the screen, by section.

    ``source`` is a table name (quoted) or a query in parentheses; ``series``, ``time``
    and ``value`` are column names. ``flagged`` lists the series drawn in detail (with
    whether each is seasonal), ``grouped`` those sorted into look-alike groups, and
    ``load`` the phase ('hour' or 'weekday') and the series of the expected-load section;
    a section whose list is not given is left out.

    The per-series diagnostics are one ``GROUP BY`` of the ``*_agg`` functions; the
    q-values are Benjamini-Hochberg's, from the ``with_q_values`` table macro.
    """
    base = (
        f"WITH source AS (\n    SELECT {quote_name(series)}::VARCHAR AS series, {quote_name(time)} AS time,\n"
        f"           {quote_name(value)}::DOUBLE AS value\n    FROM {source}\n)"
    )
    m = _literal(model)
    k = SPARK_POINTS
    queries = {
        "screen": f"""{base},
per_series AS (
    SELECT series, count(*) AS rows, count(value) AS present,
           min(time) AS first_time, max(time) AS last_time,
           seasonality_agg(value, time) AS season,
           trend_test_agg(value, time) AS trend,
           change_points_agg(value, time, model := {m}) AS changes,
           autocorrelation_agg(value, time) AS acf1,
           spectral_entropy_agg(value, time) AS entropy,
           on_grid(list(value), list(time)) AS grid
    FROM source
    GROUP BY series
),
-- q-values: Benjamini-Hochberg across the screen (with_q_values), of the cycles' and of the trends' p-values
season_q AS (
    SELECT * RENAME (q_value AS season_q) FROM with_q_values(per_series, season.p_value)
),
q_values AS (
    SELECT * RENAME (q_value AS trend_q) FROM with_q_values(season_q, trend.p_value)
)
SELECT series, rows, present, first_time, last_time,
       season.period::VARCHAR AS period,
       coalesce(epoch(union_extract(season.period, 'span')) / 86400,
                union_extract(season.period, 'number')) AS period_number,
       season.strength AS strength, season.p_value AS season_p, season_q,
       trend.tau AS tau, trend.slope AS slope, trend.p_value AS trend_p, trend_q,
       len(changes) AS n_changes, changes, acf1, entropy,
       list_transform(range(least(len(grid), {k})), lambda b:
           list_avg(grid[b * len(grid) // least(len(grid), {k}) + 1
                         : (b + 1) * len(grid) // least(len(grid), {k})])) AS spark
FROM q_values
ORDER BY series""",
        "overview": """SELECT count(*) AS series,
       count(*) FILTER (season_q <= $level) AS seasonal,
       count(*) FILTER (trend_q <= $level) AS trending,
       count(*) FILTER (n_changes > 0) AS with_changes,
       sum(rows) AS rows
FROM screen_result  -- the result of the screen query""",
    }
    if flagged:
        picked = ",\n           ".join(f"({_literal(s)}, {'true' if seasonal else 'false'})" for s, seasonal in flagged)
        queries["details"] = f"""{base},
picked(series, seasonal) AS (
    VALUES {picked}
),
cycles AS (
    SELECT series, seasonal, on_grid(list(value), list(time)) AS grid
    FROM source JOIN picked USING (series)
    GROUP BY series, seasonal
),
steps AS (  -- the cycle in grid steps, for seasonal series only
    SELECT series, grid, CASE WHEN seasonal THEN seasonality(grid).period END AS steps
    FROM cycles
)
SELECT series,
       list(struct_pack(time := time, value := value) ORDER BY time) AS points,
       harmonic_smooth_agg(value, time, period := steps) AS smooth,
       segments_agg(value, time, model := {m}) AS segments,
       harmonic_profile(any_value(grid), round(steps)) AS profile,
       steps
FROM source JOIN steps USING (series)
GROUP BY series, steps
ORDER BY series"""
    if grouped:
        names = ", ".join(_literal(s) for s in grouped)
        queries["groups"] = f"""{base},
curves AS (
    SELECT series, on_grid(list(value), list(time), fill := 'linear') AS grid
    FROM source
    WHERE series IN ({names})
    GROUP BY series
),
clustered AS (
    SELECT unnest(dtw_clusters(series, grid), recursive := true)
    FROM curves
)
SELECT c.id AS series, c.cluster, c.medoid, c.silhouette,
       list_transform(grid, lambda x: (x - list_avg(grid)) / list_stddev_pop(grid)) AS z
FROM clustered c JOIN curves ON curves.series = c.id
WHERE c.cluster IS NOT NULL
ORDER BY c.cluster, c.id"""
    if load:
        phase, names_list = load
        names = ", ".join(_literal(s) for s in names_list)
        of, unit, half = ("hour(time)", "HOUR", 12) if phase == "hour" else ("isodow(time)", "DAY", 3)
        window = (
            "OVER (PARTITION BY series ORDER BY time RANGE BETWEEN INTERVAL {} PRECEDING AND INTERVAL {} FOLLOWING)"
        )
        if phase == "hour":  # a 2x24 moving average: the mean of the two 24-hour windows around the hour
            level = (
                f"(avg(value) {window.format('12 HOUR', '11 HOUR')}\n"
                f"            + avg(value) {window.format('11 HOUR', '12 HOUR')}) / 2"
            )
        else:  # a 7-day moving average
            level = f"avg(value) {window.format('3 DAY', '3 DAY')}"
        queries["load"] = f"""{base},
-- the slow level: the centred moving average over one cycle (a classical decomposition's trend),
-- where the whole window lies inside the series' record
leveled AS (
    SELECT series, {of} AS phase, value,
           {level} AS level,
           time - INTERVAL {half} {unit} >= min(time) OVER (PARTITION BY series)
               AND time + INTERVAL {half} {unit} <= max(time) OVER (PARTITION BY series) AS whole
    FROM source
    WHERE series IN ({names}) AND value IS NOT NULL
)
-- the band: the phase's mean plus the 10th and 90th percentiles of the residuals (value - level)
-- about their mean at that phase, so that a trend or a drift of the level does not widen it
SELECT series, phase,
       avg(value) AS expected,
       avg(value) + quantile_cont(value - level, 0.1) FILTER (whole) - avg(value - level) FILTER (whole) AS low,
       avg(value) + quantile_cont(value - level, 0.9) FILTER (whole) - avg(value - level) FILTER (whole) AS high,
       count(value) AS observations
FROM leveled
GROUP BY series, phase
ORDER BY series, phase"""
    return queries


def _source(con: duckdb.DuckDBPyConnection, table: str | None, query: str | None) -> tuple[str, str]:
    """The source as SQL text (a quoted table name, or a query in parentheses) and its label."""
    if (table is None) == (query is None):
        raise ReportError("give either a table or a query")
    if table is not None:
        return ".".join(quote_name(part) for part in table.split(".")), table
    from tsql.statements import split_statements

    statements = split_statements(query)
    if len(statements) != 1:
        raise ReportError(f"the query must be exactly one SQL statement, got {len(statements)}")
    return f"(\n{statements[0].text}\n)", "query"


def _columns(con: duckdb.DuckDBPyConnection, source: str, label: str) -> dict[str, str]:
    try:
        relation = con.sql(f"SELECT * FROM {source} LIMIT 0")
    except duckdb.Error as error:
        what = f"table {label!r}" if label != "query" else "the query"
        raise ReportError(f"cannot read {what}: {_first_line(error)}") from None
    return {name: str(kind) for name, kind in zip(relation.columns, relation.types)}


_NUMBER = ("TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT", "UINTEGER", "UBIGINT")


def _kind(sql_type: str) -> str:
    t = sql_type.upper()
    if t == "DATE" or t.startswith("TIMESTAMP"):
        return "temporal"
    if t in _NUMBER or t in ("FLOAT", "DOUBLE", "REAL") or t.startswith("DECIMAL"):
        return "numeric"
    return "other"


def _check(con: duckdb.DuckDBPyConnection, source: str, label: str, series: str, time: str, value: str) -> dict:
    """Refuse input the screen cannot use; returns the counts the page quotes."""
    columns = _columns(con, source, label)
    lower = {name.lower(): name for name in columns}
    for option, name in (("series", series), ("time", time), ("value", value)):
        if name not in columns and name.lower() not in lower:
            raise ReportError(f"{option}: no column {name!r} in {label} (columns: {', '.join(columns)})")
    typed = {n: columns.get(n) or columns[lower[n.lower()]] for n in (series, time, value)}
    if _kind(typed[time]) == "other":
        raise ReportError(
            f"time: column {time!r} is {typed[time]}, not a DATE, TIMESTAMP or number; cast it in a query"
        )
    if _kind(typed[value]) != "numeric":
        raise ReportError(f"value: column {value!r} is {typed[value]}, not a number; cast it in a query")
    s, t, v = quote_name(series), quote_name(time), quote_name(value)
    try:
        rows, names, null_series, null_times, values, one = con.sql(
            f"SELECT count(*), count(DISTINCT {s}), count(*) - count({s}), count(*) - count({t}), count({v}), "
            f"min({s})::VARCHAR FROM {source}"
        ).fetchall()[0]
    except duckdb.Error as error:
        raise ReportError(f"cannot read {label}: {_first_line(error)}") from None
    if rows == 0:
        raise ReportError(f"{label} has no rows; there is nothing to screen")
    if null_series:
        raise ReportError(f"{null_series:,} rows have a NULL {series}; filter them out or coalesce them in a query")
    if null_times:
        raise ReportError(f"{null_times:,} rows have a NULL {time}; filter them out in a query")
    if values == 0:
        raise ReportError(f"every {value} is NULL; there is nothing to screen")
    if names < 2:
        raise ReportError(
            f"{series} holds one series only ({one!r}); a screen compares many series: "
            "draw one with seriesql plot, or choose the column that tells the series apart"
        )
    return {"rows": rows, "series": names, "missing_values": rows - values, "time_type": typed[time]}


def _number(x: Any, digits: int = 4) -> float | None:
    if x is None:
        return None
    x = float(x)
    if not math.isfinite(x):
        return None
    return float(f"{x:.{digits}g}")


def _tick(t: Any) -> float | None:
    """A time as a number: milliseconds since 1970 (UTC) for dates and timestamps, else the number."""
    if t is None:
        return None
    if isinstance(t, dt.datetime):
        if t.tzinfo is None:
            t = t.replace(tzinfo=dt.UTC)
        return t.timestamp() * 1000.0
    if isinstance(t, dt.date):
        return dt.datetime(t.year, t.month, t.day, tzinfo=dt.UTC).timestamp() * 1000.0
    return float(t)


def _rows(con: duckdb.DuckDBPyConnection, sql: str, params: dict | None = None) -> list[dict]:
    result = con.execute(sql, params) if params else con.execute(sql)
    names = [d[0] for d in result.description]
    return [dict(zip(names, row)) for row in result.fetchall()]


def _thin(points: list) -> list:
    """Every k-th point, k chosen so that at most DETAIL_POINTS remain (the last point always kept)."""
    k = -(-len(points) // DETAIL_POINTS)
    return points if k <= 1 else points[::k] + ([points[-1]] if (len(points) - 1) % k else [])


def _interleave(*ranked: list[dict]) -> list[dict]:
    """The flagged series, taking in turn the next of each ranking (cycles, trends, changes), each once."""
    seen: set[str] = set()
    out = []
    for tier in zip_longest(*ranked):
        for r in tier:
            if r is not None and r["series"] not in seen:
                seen.add(r["series"])
                out.append(r)
    return out


def _step_phase(con: duckdb.DuckDBPyConnection, source: str, series: str, time: str, kind: str) -> str | None:
    """'hour' for hourly timestamps, 'weekday' for daily ones, else None (no load section)."""
    if kind != "temporal":
        return None
    t, s = quote_name(time), quote_name(series)
    sql = (
        f"SELECT median(step) FROM (SELECT epoch({t}::TIMESTAMP) - lag(epoch({t}::TIMESTAMP)) "
        f"OVER (PARTITION BY {s} ORDER BY {t}) AS step FROM {source}) WHERE step > 0"
    )
    (step,) = con.sql(sql).fetchall()[0]
    return {3600.0: "hour", 86400.0: "weekday"}.get(step)


def gather(
    con: duckdb.DuckDBPyConnection,
    table: str | None = None,
    query: str | None = None,
    *,
    series: str,
    time: str,
    value: str,
    level: float = 0.05,
    model: str = "mean",
    details: int = DETAILS,
) -> dict:
    """Run the screen on ``con`` (tsql registered) and return the page's data as plain values.

    Raises :class:`ReportError` for input the screen cannot use.
    """
    if not 0 < level < 1:
        raise ReportError(f"level must be between 0 and 1, got {level}")
    if model not in MODELS:
        raise ReportError(f"model must be one of {', '.join(MODELS)}, got {model!r}")
    if details < 0:
        raise ReportError(f"details must be >= 0, got {details}")
    source, label = _source(con, table, query)
    facts = _check(con, source, label, series, time, value)
    temporal = _kind(facts["time_type"]) == "temporal"
    queries = screen_queries(source, series, time, value, model)
    try:
        screen = con.sql(queries["screen"]).to_arrow_table()
        con.register("screen_result", screen)
        try:
            overview = _rows(con, queries["overview"], {"level": level})[0]
        finally:
            con.unregister("screen_result")
    except duckdb.Error as error:
        raise ReportError(f"the screen failed: {_first_line(error)}") from None
    rows = screen.to_pylist()
    table_rows = []
    for r in rows:
        table_rows.append(
            [
                r["series"],
                r["rows"],
                r["period"],
                _number(r["period_number"]),
                _number(r["strength"], 3),
                _number(r["season_q"], 3),
                _number(r["tau"], 3),
                _number(r["trend_q"], 3),
                r["n_changes"],
                _number(r["acf1"], 3),
                _number(r["entropy"], 3),
                [_number(x, 3) for x in (r["spark"] or [])],
                [_tick(t) for t in (r["changes"] or [])[:ROW_MARKS]],
            ]
        )

    flagged_rows = _interleave(
        sorted((r for r in rows if r["season_q"] is not None and r["season_q"] <= level), key=lambda r: r["season_q"]),
        sorted((r for r in rows if r["trend_q"] is not None and r["trend_q"] <= level), key=lambda r: r["trend_q"]),
        sorted((r for r in rows if r["n_changes"]), key=lambda r: (-r["n_changes"], r["series"])),
    )
    seasonal = {r["series"] for r in rows if r["season_q"] is not None and r["season_q"] <= level}
    drawn = [(r["series"], r["series"] in seasonal) for r in flagged_rows[:details]]
    longest = max(r["rows"] for r in rows)
    group_pool = [r["series"] for r in flagged_rows if r["present"] >= 8][:GROUP_ITEMS]
    grouped = group_pool if len(group_pool) >= 3 and longest <= GROUP_MAX_POINTS else None
    phase = _step_phase(con, source, series, time, "temporal" if temporal else "numeric")
    load = (phase, [r["series"] for r in rows][:LOAD_SERIES]) if phase else None
    queries = screen_queries(source, series, time, value, model, drawn, grouped, load)
    data: dict[str, Any] = {
        "source": label if table is not None else query,
        "columns": {"series": series, "time": time, "value": value},
        "temporal": temporal,
        "level": level,
        "model": model,
        "facts": facts,
        "overview": {k: int(v or 0) for k, v in overview.items()},
        "flagged": len(flagged_rows),
        "table": table_rows,
        "sql": queries,
        "details": [],
        "groups": [],
        "load": None,
    }
    try:
        if drawn:
            for r in _rows(con, queries["details"]):
                data["details"].append(
                    {
                        "series": r["series"],
                        "seasonal": r["series"] in seasonal,
                        "points": [[_tick(p["time"]), _number(p["value"], 6)] for p in _thin(r["points"])],
                        "smooth": [[_tick(p["time"]), _number(p["value"], 5)] for p in _thin(r["smooth"] or [])],
                        "segments": [
                            [_tick(s["first"]), _tick(s["last"]), _number(s["mean"], 5), _number(s["slope"], 5)]
                            for s in (r["segments"] or [])
                        ],
                        "profile": [_number(x, 5) for x in (r["profile"] or [])],
                        "steps": _number(r["steps"]),
                    }
                )
            order = {name: i for i, (name, _) in enumerate(drawn)}
            data["details"].sort(key=lambda d: order[d["series"]])
        if grouped:
            groups: dict[int, dict] = {}
            for r in _rows(con, queries["groups"]):
                g = groups.setdefault(r["cluster"], {"cluster": r["cluster"], "medoid": r["medoid"], "members": []})
                g["members"].append(
                    {
                        "series": r["series"],
                        "silhouette": _number(r["silhouette"], 3),
                        "z": [_number(x, 3) for x in r["z"]],
                    }
                )
            data["groups"] = [groups[c] for c in sorted(groups)]
        if load:
            profiles: dict[str, list] = {}
            for r in _rows(con, queries["load"]):
                profiles.setdefault(r["series"], []).append(
                    [r["phase"], _number(r["expected"]), _number(r["low"]), _number(r["high"]), r["observations"]]
                )
            data["load"] = {"phase": phase, "profiles": profiles}
    except duckdb.Error as error:
        raise ReportError(f"a section of the screen failed: {_first_line(error)}") from None
    return data


def check_out(out: str | os.PathLike, replace: bool, name: str = "--out") -> Path:
    """The output path; refuses another extension than .html, a missing folder, a folder, an existing file
    (unless ``replace``)."""
    try:
        return output_path(out, replace, (".html", ".htm"), name)
    except ValueError as error:
        raise ReportError(str(error)) from None


def report(
    con: duckdb.DuckDBPyConnection,
    table_or_query: str,
    *,
    series: str,
    time: str,
    value: str,
    path: str | os.PathLike = "report.html",
    level: float = 0.05,
    model: str = "mean",
    details: int = DETAILS,
    replace: bool = False,
) -> Path:
    """Screen every series of a table (or query) and write one self-contained HTML page.

    Parameters
    ----------
    con : duckdb.DuckDBPyConnection
        A connection with the tsql functions registered (:func:`tsql.connect`).
    table_or_query : str
        A table or view name, or one ``SELECT`` query (told apart by containing white space).
    series, time, value : str
        The columns naming each series, its times (DATE, TIMESTAMP or a number) and its values.
    path : str or path-like
        The ``.html`` file to write; it appears only once complete.
    level : float
        The false-discovery level at which a q-value counts as seasonal or trending.
    model : {'mean', 'meanvar', 'trend'}
        The change-point model (see ``change_points``).
    details : int
        Flagged series drawn in full; the rest are in the table.
    replace : bool
        Overwrite an existing ``path``.

    Returns
    -------
    pathlib.Path
        The file written.

    Notes
    -----
    Each series gets ``seasonality_agg``, ``trend_test_agg``, ``change_points_agg``,
    ``autocorrelation_agg`` and ``spectral_entropy_agg`` in one ``GROUP BY``; the p-values of the
    cycles and of the trends become Benjamini-Hochberg q-values across the screen [1]_. A series
    is flagged when either q-value is at most ``level`` or it has a change point.

    The charts are drawn by plotly.js, inlined into the page from the optional ``plotly`` package
    (``pip install 'seriesql[report]'``); without it the call raises :class:`ReportError` at once.

    References
    ----------
    .. [1] Y. Benjamini and Y. Hochberg, "Controlling the false discovery rate: a practical and
       powerful approach to multiple testing", J. R. Stat. Soc. B 57 (1995), 289-300.

    See Also
    --------
    gather : the same screen as plain data, without the page.
    screen_queries : every SQL statement of the screen.

    Examples
    --------
    >>> import tempfile, tsql
    >>> con = tsql.connect()
    >>> _ = con.execute(
    ...     "CREATE TABLE sales AS SELECT 'item ' || (i % 4) AS item, DATE '2020-01-01' + INTERVAL (i // 4) MONTH "
    ...     "AS month, 100 + 20 * sin(i // 4 * pi() / 6) * (i % 4) + i % 7 AS units FROM range(192) _(i)")
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     page = tsql.report(con, "sales", series="item", time="month", value="units", path=f"{folder}/s.html")
    ...     print(page.name, page.stat().st_size > 20_000)
    s.html True
    """
    try:
        target = check_out(path, replace, "path")
        return _write(con, table_or_query, series, time, value, target, level, model, details)
    except ReportError as error:
        raise ReportError(f"tsql.report: {error}") from None


def _write(
    con: duckdb.DuckDBPyConnection,
    table_or_query: str,
    series: str,
    time: str,
    value: str,
    target: Path,
    level: float,
    model: str,
    details: int,
) -> Path:
    """:func:`report` to a checked ``target``, without its name on the errors (the command puts its own)."""
    from tsql.report_page import plotly_script, render

    try:
        script = plotly_script()
    except ImportError:
        raise ReportError(MISSING_PLOTLY) from None
    is_query = any(c.isspace() for c in table_or_query.strip())
    data = gather(
        con,
        None if is_query else table_or_query,
        table_or_query if is_query else None,
        series=series,
        time=time,
        value=value,
        level=level,
        model=model,
        details=details,
    )
    page = render(data, script)
    partial = partial_path(target)
    try:
        partial.write_text(page, encoding="utf-8")
        os.replace(partial, target)
    except BaseException:
        partial.unlink(missing_ok=True)
        raise
    return target


def main(
    database: str,
    table: str | None,
    query: str | None,
    series: str,
    time: str,
    value: str,
    out: str = "report.html",
    level: float = 0.05,
    model: str = "mean",
    details: int = DETAILS,
    replace: bool = False,
) -> int:
    """The ``seriesql report`` command: returns the exit code and prints one line about what it wrote."""
    import sys

    from tsql.binding import connect

    started = clock.perf_counter()
    try:
        target = check_out(out, replace)
        if database != ":memory:" and not Path(database).expanduser().exists():
            raise ReportError(f"no database at {database}")
        try:
            con = connect(
                str(Path(database).expanduser()) if database != ":memory:" else database,
                read_only=database != ":memory:",
            )
        except duckdb.Error as error:
            raise ReportError(f"cannot open {database}: {_first_line(error)}") from None
        with con:
            con.execute("SET enable_progress_bar = false")
            source = table if table is not None else query
            if table is not None and any(c.isspace() for c in table):
                source = f"SELECT * FROM {quote_name(table)}"
            written = _write(
                con,
                source,
                series,
                time,
                value,
                target,
                level,
                model,
                details,
            )
    except ReportError as error:
        print(f"seriesql report: {error}", file=sys.stderr)
        return 2
    size = written.stat().st_size
    print(f"wrote {written} ({size / 1e6:.1f} MB, in {clock.perf_counter() - started:.1f} s)")
    return 0
