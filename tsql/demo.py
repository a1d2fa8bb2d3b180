"""``seriesql demo``: five questions asked in SQL of the sample warehouse, whose answers are known.

The warehouse (:mod:`tsql.sample_db`) is built on first use. Each step prints a
plain-English question, the SQL that answers it, the result, how to read the
result, and how it compares with the facts the generator planted (the ``truth``
table). The comparison is a second query over the shown result (registered as
the view ``result``) and ``truth``, so every figure in it comes from SQL too.
"""

from __future__ import annotations

import os
import shlex
import shutil
import sys
import textwrap
import time
from dataclasses import dataclass
from pathlib import Path

import duckdb

from tsql import sample_db, warming
from tsql.render import format_arrow

__all__ = ["STEPS", "Step", "main"]


@dataclass(frozen=True)
class Step:
    """One question of the demo."""

    title: str
    question: str
    sql: str
    """The query whose result is shown."""
    reading: str
    """How to read the result."""
    check: str
    """A query over the view ``result`` (the shown result) and ``truth``; it returns one row."""
    verdict: str
    """The comparison with the planted truth: a ``str.format`` template over the check's columns."""
    rows: int = 40
    """At most this many rows of the result are shown (the footer gives the total)."""


SEASONALITY = Step(
    title="Seasonality",
    question="Which of the 3,000 items sell in a repeating cycle, and how long is the cycle?",
    sql="""\
WITH found AS (
    SELECT item,
           seasonality_agg(units, month) AS s,  -- period, strength, p_value
           sparkline(on_grid(list(units), list(month))[-24:]) AS last_24
    FROM monthly_sales
    GROUP BY item
)
SELECT coalesce(t.value || ' months', 'none') AS planted,
       CASE WHEN q_value < 0.01 THEN s.period::VARCHAR
            WHEN s.p_value < 0.01 THEN 'p < 0.01 only'
            ELSE 'no cycle' END AS found,
       count(*) AS items,
       round(median(s.strength), 2) AS strength,
       min(item) AS example,
       arg_min(last_24, item) AS example_last_24_months
FROM with_q_values(found, s.p_value)  -- adds q_value
LEFT JOIN truth t ON t.subject = 'item ' || item
                 AND t.property = 'period_months'
GROUP BY ALL
ORDER BY any_value(t.value::INTEGER) DESC NULLS LAST, items DESC, found""",
    reading=(
        "One row per combination of planted cycle and found cycle, with how many items fall in it. "
        "`found` is the strongest cycle when its q-value is below 0.01, else 'no cycle'. The p-value is the "
        "chance that noise alone would show a peak that strong in one item; over 3,000 items a 1 % test lets "
        "about 1 in 100 noise items through. with_q_values adjusts the p-values over the whole screen "
        "(Benjamini-Hochberg): flagging q < 0.01 keeps the expected share of noise items on the list of "
        "flagged items at or under 1 %. 'p < 0.01 only' marks the items that p < 0.01 alone would also have flagged; "
        "`strength` is the median share of an item's variance the cycle explains. The sparkline shows the "
        "example item's last 24 months, one character a month."
    ),
    check="""\
SELECT sum(items) FILTER (planted = '12 months') AS p12,
       coalesce(sum(items) FILTER (planted = '12 months' AND found = '1 year'), 0) AS f12,
       sum(items) FILTER (planted = '6 months') AS p6,
       coalesce(sum(items) FILTER (planted = '6 months' AND found = '6 months'), 0) AS f6,
       sum(items) FILTER (planted = '3 months') AS p3,
       coalesce(sum(items) FILTER (planted = '3 months' AND found = '3 months'), 0) AS f3,
       sum(items) FILTER (planted = 'none') AS none,
       coalesce(sum(items) FILTER (planted = 'none' AND found <> 'no cycle'), 0) AS alarms_p,
       coalesce(sum(items) FILTER (planted = 'none' AND found NOT IN ('no cycle', 'p < 0.01 only')), 0) AS alarms,
       sum(items) FILTER (found NOT IN ('no cycle', 'p < 0.01 only')) AS flagged,
       100 * coalesce(sum(items) FILTER (planted = 'none' AND found NOT IN ('no cycle', 'p < 0.01 only')), 0)
           / sum(items) FILTER (found NOT IN ('no cycle', 'p < 0.01 only')) AS noise_share
FROM result""",
    verdict=(
        "of the {p12:,} items planted with a 12-month cycle, {f12:,} answered 1 year; of the {p6:,} with a "
        "6-month cycle, {f6:,} answered 6 months; of the {p3:,} with a 3-month cycle, {f3:,} answered "
        "3 months. Of the {none:,} items planted without a cycle, {alarms_p:,} pass p < 0.01 and {alarms:,} "
        "pass q < 0.01: the list of {flagged:,} flagged items holds {alarms:,} noise items ({noise_share:.1f} "
        "%), within the 1 % share of false discoveries that q < 0.01 promises."
    ),
)

LOOK_ALIKES = Step(
    title="Items that move alike",
    question="For each of the 3,000 items, which other item has the most similar monthly curve, whatever its volume?",
    sql="""\
WITH curves AS (  -- each item's units on its monthly grid, gaps filled
    SELECT item, on_grid(list(units), list(month), fill := 'linear') AS u
    FROM monthly_sales GROUP BY item
),
nearest AS (  -- every item's 2 nearest others: exact DTW of the curves,
    SELECT unnest(dtw_nearest(item, u, k := 2, band := 2,
                              normalize := true),  -- z-scored first
                  recursive := true)
    FROM curves
)
SELECT id AS item,
       arg_min(neighbor, rank) AS nearest,
       round(min(distance), 2) AS dtw,
       round(max(distance), 2) AS next_best,
       coalesce(replace(any_value(t.value), 'item ', ''), '-')
           AS planted_twin
FROM nearest
LEFT JOIN truth t ON t.subject = 'item ' || id
                 AND t.property = 'looks_like'
GROUP BY id
ORDER BY id""",
    reading=(
        "`dtw_nearest` is an aggregate over the items (one row each) that gives every item its k nearest "
        "other items, exactly as ranking all 4.5 million pairs by `dtw_distance` would, while lower bounds "
        "(LB_Kim, LB_Keogh) rule most pairs out cheaply. `dtw` is the dynamic-time-warping distance between "
        "the two z-scored curves (`normalize`: 0 would be the same shape at any volume; the band of 2 lets "
        "one curve run up to two months ahead of the other), `next_best` the runner-up's. A true look-alike "
        "stands out: its distance is far below the next best."
    ),
    check="""\
SELECT count(*) AS items,
       count(*) FILTER (planted_twin <> '-') AS twins,
       count(*) FILTER (nearest = planted_twin) AS found,
       max(dtw) FILTER (nearest = planted_twin) AS twin_farthest,
       count(*) FILTER (planted_twin = '-') AS loners,
       min(dtw) FILTER (planted_twin = '-') AS loner_closest,
       count(*) FILTER (dtw < next_best / 2) AS standing_out,
       count(*) FILTER (dtw < next_best / 2 AND nearest = planted_twin) AS standing_out_twins
FROM result""",
    verdict=(
        "of the {items:,} items, {twins} were planted with a twin (the same curve at 10 to 40 times the "
        "volume) and {found} found it as their nearest, at a distance of {twin_farthest:.2f} or less; the "
        "{loners:,} items without a twin have no neighbour closer than {loner_closest:.2f}. {standing_out} "
        "nearest neighbours stand out at under half the next-best distance, {standing_out_twins} of them "
        "planted twins."
    ),
    rows=12,
)

TRENDS = Step(
    title="Trending or wandering",
    question="Which of the 36 instruments follow a trend line, and which only wander?",
    sql="""\
WITH daily AS (
    SELECT instrument, day, ln(price) AS log_price,
           ln(price) - lag(ln(price)) OVER (
               PARTITION BY instrument ORDER BY day) AS r  -- daily return
    FROM daily_prices
),
found AS (
    SELECT instrument,
           trend_test_agg(log_price, day) AS mk,  -- tau, p_value, slope
           autocorrelation(list(r ORDER BY day)) AS r1,  -- next trading day
           sparkline(list(log_price ORDER BY day), width := 10) AS log_price
    FROM daily GROUP BY instrument
)
SELECT instrument, log_price, round(mk.tau, 2) AS tau,
       CASE WHEN mk.p_value < 1e-300 THEN '<1e-300'
            ELSE format('{:.0e}', mk.p_value) END AS p_value,
       round(r1, 2) AS return_acf,
       CASE WHEN r1 < -0.25 THEN 'line+noise' ELSE 'wanders' END AS looks,
       t.value AS planted
FROM found
LEFT JOIN truth t ON t.subject = 'instrument ' || instrument
                 AND t.property = 'behaviour'
ORDER BY instrument""",
    reading=(
        "`tau` and `p_value` are the Mann-Kendall test on the log price: does it keep rising (tau near 1) or "
        "falling (near -1)? That test assumes independent days, which a random walk does not have: a walk "
        "drifts by chance and gets a tiny p-value too. The autocorrelation of the daily returns tells the "
        "two apart: near -0.5 when the price is a line plus noise (each day's noise is undone the next), "
        "near 0 when it wanders. Read the columns together. (mk.slope, Sen's slope per day, says how fast.)"
    ),
    check="""\
SELECT count(*) FILTER (planted IN ('trend', 'trend_reversal')) AS lines,
       count(*) FILTER (planted IN ('trend', 'trend_reversal')
                        AND looks = 'line+noise') AS lines_found,
       count(*) FILTER (planted IN ('random_walk', 'volatility_shift')) AS walks,
       count(*) FILTER (planted IN ('random_walk', 'volatility_shift')
                        AND looks = 'wanders') AS walks_found,
       count(*) FILTER (planted IN ('random_walk', 'volatility_shift')
                        AND coalesce(TRY_CAST(p_value AS DOUBLE), 0) < 0.01) AS walks_mk,
       count(*) FILTER (planted = 'trend') AS trends,
       count(*) FILTER (planted = 'trend' AND sign(tau) = sign(d.value::DOUBLE)) AS trends_direction
FROM result
LEFT JOIN truth d ON d.subject = 'instrument ' || instrument
                 AND d.property = 'drift_per_year'""",
    verdict=(
        "of the {lines} instruments planted as a trend line (straight, or bending once), {lines_found} look "
        "like line+noise; of the {walks} planted random walks, {walks_found} wander, although Mann-Kendall "
        "calls {walks_mk} of them trending at p < 0.01. {trends_direction} of the {trends} straight trends "
        "have the planted direction (the sign of tau)."
    ),
    rows=12,
)

REGIMES = Step(
    title="Regime changes",
    question="When did an instrument's daily moves become wilder, or its trend turn?",
    sql="""\
WITH daily AS (
    SELECT instrument, day, ln(price) AS log_price,
           ln(price) - lag(ln(price)) OVER (
               PARTITION BY instrument ORDER BY day) AS r
    FROM daily_prices
),
found AS (
    SELECT instrument,
           sparkline(list(abs(r) ORDER BY day), width := 10) AS moves,
           change_points_agg(r, day, model := 'meanvar') AS spread,
           CASE WHEN autocorrelation(list(r ORDER BY day)) < -0.25
                THEN change_points_agg(log_price, day, model := 'trend')
           END AS bend  -- only for a line plus noise (question 3)
    FROM daily GROUP BY instrument
)
SELECT f.instrument, moves, spread, bend,
       b.value AS planted, c.value::DATE AS day
FROM found f
LEFT JOIN truth b ON b.subject = 'instrument ' || f.instrument
                 AND b.property = 'behaviour'
LEFT JOIN truth c ON c.subject = 'instrument ' || f.instrument
                 AND c.property = 'regime_change'
WHERE len(spread) > 0 OR len(bend) > 0 OR c.value IS NOT NULL
ORDER BY day IS NULL, planted, f.instrument""",
    reading=(
        "`spread` lists the days on which the daily returns changed level or spread (PELT change points, "
        "model 'meanvar'): a volatility shift shows there, and in `moves`, the size of the daily moves over "
        "the four years. A turning trend hardly changes the returns, so `bend` looks for breaks in the "
        "log-price line itself (model 'trend'), and only on the instruments that question 3 found to be a "
        "line plus noise: on a random walk every wiggle would be a bend (NULL: not asked). `planted` and "
        "`day` are the truth. Instruments without a change found or planted are left out."
    ),
    check="""\
WITH matched AS (
    SELECT *, coalesce(len(bend), 0) + len(spread) AS points,
           CASE planted
               WHEN 'volatility_shift' THEN list_min(list_transform(spread, lambda d: abs(d - day)))
               WHEN 'trend_reversal' THEN list_min(list_transform(bend, lambda d: abs(d - day)))
           END AS off
    FROM result
),
scored AS (
    SELECT *, (off <= CASE planted WHEN 'volatility_shift' THEN 10 ELSE 15 END)::INTEGER AS hit
    FROM matched
)
SELECT count(*) FILTER (planted = 'volatility_shift') AS shifts,
       count(*) FILTER (planted = 'volatility_shift' AND hit = 1) AS shifts_found,
       max(off) FILTER (planted = 'volatility_shift' AND hit = 1) AS shifts_off,
       count(*) FILTER (planted = 'trend_reversal') AS bends,
       count(*) FILTER (planted = 'trend_reversal' AND hit = 1) AS bends_found,
       max(off) FILTER (planted = 'trend_reversal' AND hit = 1) AS bends_off,
       sum(points - coalesce(hit, 0)) AS others,
       coalesce(string_agg(instrument, ', ' ORDER BY instrument)
                FILTER (points > coalesce(hit, 0)), 'none') AS other_names
FROM scored""",
    verdict=(
        "of the {shifts} planted volatility shifts, {shifts_found} were found, at most {shifts_off} days from "
        "the planted day; of the {bends} planted trend reversals, {bends_found} were found as bends, at most "
        "{bends_off} days off. Change points where nothing was planted: {others} ({other_names}). With "
        "penalty := 'bic' PELT errs towards reporting a change; a false alarm is cheap to look at."
    ),
)

LOAD = Step(
    title="Expected load by hour",
    question="How many help-desk contacts should each queue expect in each hour of the day?",
    sql="""\
WITH by_clock AS (  -- one day of the fitted pattern, element 1: midnight to 1 am
    SELECT queue,
           harmonic_profile_agg(contacts, hour, INTERVAL 1 DAY,
                                fill := 'zero') AS load  -- no row: 0 contacts
    FROM hourly_contacts GROUP BY queue
)
SELECT queue, sparkline(load) AS midnight_to_midnight,
       list_position(load, list_max(load)) - 1 AS peak_hour,
       round(list_max(load)) AS at_peak, round(list_sum(load)) AS per_day,
       t.value::INTEGER AS planted
FROM by_clock
LEFT JOIN truth t ON t.subject = 'queue ' || queue
                 AND t.property = 'peak_hour'
ORDER BY queue""",
    reading=(
        "Each profile is a smooth fit (a level plus 3 daily harmonics) to eight weeks of hourly counts: the "
        "average day, weekends included, one sparkline character an hour from midnight. `peak_hour` 11 means "
        "11:00 to 12:00; `at_peak` and `per_day` are the expected contacts in that hour and in the whole day; "
        "`planted` is the planted peak hour. For a weekday staffing curve, add WHERE isodow(hour) <= 5."
    ),
    check="""\
SELECT count(*) AS queues,
       count(*) FILTER (peak_hour = planted) AS exact,
       count(*) FILTER (abs(peak_hour - planted) <= 1) AS within_one,
       string_agg(queue || ' ' || per_day::INTEGER || ' vs '
                  || round(w.value::DOUBLE * (5 + 2 * f.value::DOUBLE) / 7)::INTEGER,
                  ', ' ORDER BY queue) AS days
FROM result
JOIN truth w ON w.subject = 'queue ' || queue AND w.property = 'weekday_contacts'
JOIN truth f ON f.subject = 'queue ' || queue AND f.property = 'weekend_factor'""",
    verdict=(
        "the peak hour is the planted one for {exact} of the {queues} queues, and within an hour of it for "
        "{within_one}. Expected contacts a day against the planted average day (the weekday level, with "
        "weekends scaled down): {days}."
    ),
)

STEPS: tuple[Step, ...] = (SEASONALITY, LOOK_ALIKES, TRENDS, REGIMES, LOAD)

CAUTION = (
    "Caution: every answer above is a statistical indication computed from the data (a p-value, a cycle, a "
    "distance, a date), and here it could be checked only because the truth was planted. It is not "
    "trading, staffing or safety advice: look at the series, and know the business behind them, before "
    "acting on a result."
)

# The compiled kernels the steps call, and only those: change_points (one compiled search serves
# every model), trend_test, sparkline, seasonality's trigonometric sums and dtw_nearest's search. On a
# first run worker processes compile them (tsql.warming) while the warehouse is built; this query then
# loads what they cached.
_WARM_UP = """\
SELECT change_points([0.0, 0, 0, 5, 5, 5], model := 'meanvar'),
       trend_test([0.0, 2, 1, 3, 5, 4]),
       sparkline([0.0, 2, 1]),
       seasonality([0.0, 1, 0, -1, 0, 1, 0, -1]).period,
       (SELECT count(*) FROM (SELECT unnest(dtw_nearest(id, s, k := 1, band := 2, normalize := true))
                              FROM (VALUES (1, [0.0, 1, 2]), (2, [0.0, 2, 1]), (3, [1.0, 1, 2])) AS c(id, s)))"""

#: the same kernels as jobs for worker processes (CPU seconds of compiling measured on a quiet 2-core machine)
WARM_UP_JOBS = (
    warming.Job(
        "SELECT change_points([0.0, 0, 0, 5, 5, 5], model := 'meanvar')",
        ("tsql.kernels.changepoint:_segment_rows",),
        28.0,
    ),
    warming.Job(
        """SELECT count(*) FROM (SELECT unnest(dtw_nearest(id, s, k := 1, band := 2, normalize := true))
                                 FROM (VALUES (1, [0.0, 1, 2]), (2, [0.0, 2, 1]), (3, [1.0, 1, 2])) AS c(id, s))""",
        ("tsql.kernels.nearest:_prepare_rows", "tsql.kernels.nearest:_setup", "tsql.kernels.nearest:_items"),
        11.0,
    ),
    warming.Job("SELECT trend_test([0.0, 2, 1, 3, 5, 4])", ("tsql.kernels.trend:_rows",), 15.0),
    warming.Job(
        "SELECT sparkline([0.0, 2, 1]), seasonality([0.0, 1, 0, -1, 0, 1, 0, -1]).period",
        (
            "tsql.kernels.sparkline:_row_levels",
            "tsql.kernels.periodicity:_unit_powers",
            "tsql.kernels.periodicity:_block_sums",
            "tsql.kernels.periodicity:_line_removed",
            "tsql.kernels.periodicity:_periodogram",
        ),
        2.5,
    ),
)

_TABLES = """\
SELECT 'monthly_sales' AS "table", count(*) AS "rows",
       format('{:,} items, {} to {}', count(DISTINCT item),
              strftime(min(month), '%b %Y'), strftime(max(month), '%b %Y')) AS holds
FROM monthly_sales
UNION ALL
SELECT 'hourly_contacts', count(*),
       format('{} help-desk queues, {} weeks of hours', count(DISTINCT queue),
              (date_diff('hour', min(hour), max(hour)) + 23) // 168)
FROM hourly_contacts
UNION ALL
SELECT 'daily_prices', count(*),
       format('{} instruments, weekdays {} to {}', count(DISTINCT instrument),
              year(min(day)), year(max(day)))
FROM daily_prices
UNION ALL
SELECT 'truth', count(*), 'what the generator planted, one fact a row'
FROM truth"""


class DemoError(Exception):
    """The demo cannot run (its warehouse path is taken or cannot be written); the message is for the user."""


def main(db: str | os.PathLike | None = None, width: int | None = None) -> int:
    """Run the demo on the sample warehouse at ``db`` (default: :func:`tsql.sample_db.default_path`).

    Prints to standard output and returns the exit code: 2 when ``db`` is taken by another file
    or cannot be written, 1 if one of the demo's queries fails.
    ``width`` is the text width (default: the terminal's).
    """
    compiling = warming.start(WARM_UP_JOBS)  # meanwhile the warehouse is built (or found)
    try:
        return _run(db, width, compiling)
    finally:
        compiling.stop()  # when stopped early; they are done otherwise


def _run(db: str | os.PathLike | None, width: int | None, compiling: warming.Warming) -> int:
    try:
        path, built = _warehouse(db)
    except DemoError as error:
        print(f"seriesql demo: {error}", file=sys.stderr)
        return 2
    width = max(width or shutil.get_terminal_size().columns, 40)
    from tsql.binding import connect

    try:
        with connect(str(path), read_only=True) as con:
            con.execute("SET enable_progress_bar = false")
            _introduce(con, path, built, width)
            started = time.perf_counter()
            print("Compiling kernels (slow only the first time) ...", end=" ", flush=True)
            compiling.wait()
            con.execute(_WARM_UP).fetchall()
            print(f"done in {time.perf_counter() - started:.1f} s.")
            print()
            for number, step in enumerate(STEPS, 1):
                run_step(con, step, number, width)
    except duckdb.Error as error:  # the file is locked by another program, or a bug in a step
        reason = str(error).strip().splitlines()[0] if str(error).strip() else type(error).__name__
        print(f"\nseriesql demo: stopped on {path}: {reason}", file=sys.stderr)
        return 1
    _conclude(path, width)
    return 0


def _warehouse(db: str | os.PathLike | None) -> tuple[Path, float | None]:
    """The warehouse's path and, when it had to be built now, how long that took."""
    path = (sample_db.default_path() if db is None else Path(db).expanduser()).absolute()
    before = _identity(path)
    started = time.perf_counter()
    try:
        sample_db.ensure(path)
    except sample_db.NotASampleWarehouse:
        raise DemoError(
            f"{path} exists and is not a tsql sample warehouse; it was left untouched (choose another --db path)"
        ) from None
    except OSError as error:
        raise DemoError(f"cannot build the sample warehouse at {path}: {error.strerror or error}") from None
    elapsed = time.perf_counter() - started
    return path, (elapsed if _identity(path) != before else None)


def _identity(path: Path) -> tuple[int, int] | None:
    try:
        stat = path.stat()
    except OSError:
        return None
    return stat.st_ino, stat.st_mtime_ns


def _introduce(con: duckdb.DuckDBPyConnection, path: Path, built: float | None, width: int) -> None:
    (scenario,) = con.execute("SELECT value FROM about WHERE key = 'scenario'").fetchall()[0]
    how = f"built just now in {built:.1f} s" if built is not None else "already there, reused"
    print(
        _wrap(
            "seriesql demo: five questions asked in SQL of an invented warehouse whose true answers are known.", width
        )
    )
    print()
    print(f"Warehouse: {path}")
    print(_wrap(f"({how}; delete it whenever you like, the next demo builds it again)", width, indent=11, first=11))
    print(_wrap(f"Scenario:  {scenario}.", width, indent=11))
    print()
    print(format_arrow(con.sql(_TABLES).to_arrow_table(), width))
    print()
    print(
        _wrap(
            "Each question below prints the SQL that answers it (every tsql function is an ordinary SQL "
            "function or aggregate), its result, how to read it, and how it compares with the truth table.",
            width,
        )
    )
    print()


def run_step(con: duckdb.DuckDBPyConnection, step: Step, number: int, width: int) -> None:
    """Print one step: question, SQL, result, how to read it, and the comparison with the planted truth."""
    rule = f"── {number} of {len(STEPS)} · {step.title} "
    print(rule + "─" * max(min(width, _MAX_TEXT) - len(rule) - 1, 3))
    print(_wrap(f"Question: {step.question}", width, indent=10))
    print()
    print(textwrap.indent(step.sql, "    "))
    print()
    started = time.perf_counter()
    result = con.sql(step.sql).to_arrow_table()
    elapsed = time.perf_counter() - started
    print(f"Result, in {elapsed:.1f} s:")
    print(format_arrow(result, width, step.rows))
    print()
    print(_wrap(f"How to read it: {step.reading}", width))
    print()
    con.register("result", result)
    try:
        checked = con.sql(step.check)
        values = dict(zip(checked.columns, checked.fetchall()[0]))
    finally:
        con.unregister("result")
    print(_wrap(f"Against the planted truth: {step.verdict.format(**values)}", width))
    print()


def _conclude(path: Path, width: int) -> None:
    print("─" * max(min(width, _MAX_TEXT) - 1, 3))
    print(_wrap(CAUTION, width))
    print()
    print("To explore further:")
    where = shlex.quote(str(path))
    for what, command in (
        ("The same warehouse, your own queries (try :tables):", [f"seriesql shell {where} --read-only"]),
        (
            "Every function, then one described with an example:",
            ["seriesql functions", "seriesql functions seasonality"],
        ),
        (
            "Two weeks of one queue with its smooth daily curve, as a picture (needs pip install 'seriesql[plot]'):",
            [
                f"seriesql plot --db {where} \\",
                "    --smooth --period '1 day' --out orders.png \\",
                '    --sql "SELECT hour, contacts FROM hourly_contacts',
                "           WHERE queue = 'orders' AND hour < DATE '2024-09-16'\"",
            ],
        ),
        (
            "The screen of every item as one page to open in a browser (cycles, trends, changes, look-alikes; "
            "needs pip install 'seriesql[report]'):",
            [
                f"seriesql report {where} \\",
                "    --table monthly_sales --series item --time month --value units \\",
                "    --out sample_report.html",
            ],
        ),
    ):
        print(_wrap(what, width, indent=2, first=2))
        for line in command:
            print(f"    {line}")


_MAX_TEXT = 110
"""Prose is wrapped at the terminal width, but no wider than this."""


def _wrap(text: str, width: int, indent: int = 0, first: int = 0) -> str:
    return textwrap.fill(
        text,
        width=max(min(width, _MAX_TEXT) - 1, 30),
        initial_indent=" " * first,
        subsequent_indent=" " * indent,
        break_on_hyphens=False,
        break_long_words=False,
    )
