"""tsql in Spark: the same answers from Spark SQL as from DuckDB, family by family.

One local Spark session serves the whole module. The data is a slice of the sample
warehouse, handed to both engines as the same Arrow tables; DuckDB's answers come from
``tsql.connect()``. Each table is queried once per engine with every function under test
as a column, because each Spark query costs about a second whatever it computes.
Skipped when pyspark (or Java) is missing.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import math
import os
import shutil
import sys
from collections.abc import Iterator
from typing import Any

import duckdb
import pyarrow as pa
import pytest

pytest.importorskip("pyspark")
if not (shutil.which("java") or os.environ.get("JAVA_HOME")):
    pytest.skip("Spark needs Java", allow_module_level=True)

from pyspark.errors import PythonException  # noqa: E402
from pyspark.sql import SparkSession  # noqa: E402

import tsql  # noqa: E402
import tsql.spark  # noqa: E402
from tsql.forms.answers import PERIOD, PERIODS, SCREEN  # noqa: E402
from tsql.registry import BY_NAME, FUNCTIONS  # noqa: E402

TOLERANCE = 1e-12
INSTRUMENTS = ("ALDER", "ASTERN", "CLOVER", "COBBLE", "DAPPLE", "JAYWICK")
AGREEMENT: dict[str, float] = {}
"""Largest absolute difference seen per family (printed at the end with ``pytest -s``)."""

Columns = list[tuple[str, str, str, str | None]]
"""(family, alias, Spark SQL, DuckDB SQL or None when the same)."""
Answers = dict[str, tuple[list[dict], list[dict]]]
"""Per family: the Spark rows and the DuckDB rows, each with ``key`` and that family's columns."""

# --- monthly sales: one series per item (60 items, three with missing months) -------------

# The list forms on a series collected in time order, as tsql.spark's docstring shows.
SALES_LISTS = """
    WITH r AS (SELECT item, array_sort(collect_list(struct(month, units))) AS r FROM sales GROUP BY item),
         s AS (SELECT item, transform(r, x -> x.units) AS v, transform(r, x -> x.month) AS t FROM r)
    SELECT item AS key, {columns} FROM s ORDER BY key"""
DUCK_SALES_LISTS = """
    WITH s AS (SELECT item, list(units ORDER BY month) AS v, list(month ORDER BY month) AS t FROM sales GROUP BY item)
    SELECT item AS key, {columns} FROM s ORDER BY key"""
SALES_LIST_COLUMNS: Columns = [
    ("periodicity", "p", "dominant_period(v)", None),
    ("periodicity", "p2", "dominant_period(v, 3, 24)", "dominant_period(v, min_period := 3, max_period := 24)"),
    ("periodicity", "s", "seasonality(v)", None),
    ("periodicity", "s2", "seasonality(v, 2.5, 13)", "seasonality(v, min_period := 2.5, max_period := 13)"),
    ("correlation", "r1", "autocorrelation(v)", None),
    ("correlation", "r12", "autocorrelation(v, 12)", "autocorrelation(v, lag := 12)"),
    ("correlation", "a", "acf(v)", None),
    ("correlation", "a24", "acf(v, max_lag => 24)", "acf(v, max_lag := 24)"),
    ("correlation", "lb", "ljung_box(v)", None),
    ("correlation", "lb12", "ljung_box(v, 12)", "ljung_box(v, max_lag := 12)"),
    ("correlation", "trend", "trend_test(v)", None),
    ("change", "cp", "change_points(v)", None),
    ("change", "mv", "change_points(v, 'meanvar', 'mbic', 4)", "change_points(v, 'meanvar', 'mbic', min_size := 4)"),
    ("smoothing", "smooth", "harmonic_smooth(v)", None),
    ("smoothing", "smooth12", "harmonic_smooth(v, 2, 12)", "harmonic_smooth(v, harmonics := 2, period := 12)"),
    ("smoothing", "profile", "harmonic_profile(v, 12)", None),
    ("smoothing", "profile1", "harmonic_profile(v, 12, 1)", "harmonic_profile(v, 12, harmonics := 1)"),
    ("look", "line", "sparkline(v)", None),
    ("look", "short", "sparkline(v, 20)", "sparkline(v, width := 20)"),
    ("time", "g", "on_grid(v, t)", None),
    ("time", "linear", "on_grid(v, t, '1 month', 'linear')", "on_grid(v, t, '1 month', fill := 'linear')"),
    ("time", "two", "on_grid(v, t, fill => 'previous', step => '2 months')", "on_grid(v, t, '2 months', 'previous')"),
]

SALES_AGGREGATES = "SELECT item AS key, {columns} FROM sales GROUP BY item ORDER BY key"
# In Spark an *_agg period counts grid steps: DuckDB's list form on the gridded series gives the same number.
V, T = "list(units ORDER BY month)", "list(month ORDER BY month)"
NUMERIC_MONTH = "year(month) * 12 + month(month)"
SALES_AGGREGATE_COLUMNS: Columns = [
    ("periodicity", "p", "dominant_period_agg(units, month)", f"dominant_period(on_grid({V}, {T}))"),
    ("periodicity", "s", "seasonality_agg(units, month, 2, 24)", f"seasonality(on_grid({V}, {T}), max_period := 24)"),
    (
        "periodicity",
        "s3",
        "seasonality_agg(units, month, '3 months', NULL, '1 month', 'linear')",
        f"seasonality(on_grid({V}, {T}, '1 month', 'linear'), min_period := 3)",
    ),
    # DuckDB's own answer for numeric times is that number of steps times the step (here 1).
    (
        "periodicity",
        "numeric",
        f"seasonality_agg(units, {NUMERIC_MONTH}).period",
        f"union_extract(seasonality_agg(units, {NUMERIC_MONTH}).period, 'number')",
    ),
    ("correlation", "r12", "autocorrelation_agg(units, month, 12)", "autocorrelation_agg(units, month, lag := 12)"),
    ("correlation", "a", "acf_agg(units, month)", None),
    (
        "correlation",
        "lb",
        "ljung_box_agg(units, month, 6, fill => 'zero', step => '1 month')",
        "ljung_box_agg(units, month, max_lag := 6, step := '1 month', fill := 'zero')",
    ),
    ("correlation", "trend", "trend_test_agg(units, month)", None),
    ("change", "cp", "change_points_agg(units, month, 'mean', 40)", "change_points_agg(units, month, penalty := 40)"),
    ("change", "seg", "segments_agg(units, month)", None),
    (
        "change",
        "seasonal",
        "change_points_agg(units, month, 'mean', 'bic', 2, '1 year', 1)",
        "change_points_agg(units, month, seasonal := INTERVAL '1 year', max_changes := 1)",
    ),
    (
        "change",
        "path",
        "change_points_path_agg(units, month, 'mean', 2)",
        "change_points_path_agg(units, month, max_changes := 2)",
    ),
    ("smoothing", "smooth", "harmonic_smooth_agg(units, month, 2, 12)", "harmonic_smooth_agg(units, month, 2, 12)"),
    ("smoothing", "profile", "harmonic_profile_agg(units, month, '1 year')", None),
]


def _registry_columns() -> tuple[Columns, Columns]:
    """Every function of the registry with its most unusual test setting, list and *_agg form, on the sales."""
    lists: Columns = []
    aggregates: Columns = []
    for fn in FUNCTIONS:
        if fn.special:
            continue
        args = f", {fn.test_args[-1]}" if fn.test_args[-1] else ""
        spark_args = args.replace(":=", "=>")
        series = ", ".join(["v"] * len(fn.series))
        lists.append(("registry", fn.name, f"{fn.name}({series}{spark_args})", f"{fn.name}({series}{args})"))
        if fn.aggregate:
            # Spark answers periods in grid steps (screen's merged rows: none in the sales, as in the list form)
            in_steps = fn.answer in (PERIOD, PERIODS, SCREEN)
            units = ", ".join(["units", "sqrt(units)"][: len(fn.series)])  # two series: units and a bent copy
            duck = f"{fn.name}(on_grid({V}, {T}){args})" if in_steps else f"{fn.name}_agg({units}, month{args})"
            aggregates.append(("registry", fn.name, f"{fn.name}_agg({units}, month{spark_args})", duck))
    return lists, aggregates


SALES_LIST_COLUMNS += _registry_columns()[0]
SALES_AGGREGATE_COLUMNS += _registry_columns()[1]

# --- daily prices: six instruments, weekdays only (the weekends are gaps on a daily grid) --

PRICE_LISTS = """
    WITH s AS (SELECT instrument, transform(array_sort(collect_list(struct(day, price))), x -> x.price) AS v
               FROM prices GROUP BY instrument)
    SELECT instrument AS key, {columns} FROM s ORDER BY key"""
DUCK_PRICE_LISTS = """
    WITH s AS (SELECT instrument, list(price ORDER BY day) AS v FROM prices GROUP BY instrument)
    SELECT instrument AS key, {columns} FROM s ORDER BY key"""
PRICE_LIST_COLUMNS: Columns = [
    ("change", "cp", "change_points(v)", None),
    ("change", "trend", "change_points(v, 'trend', 'bic', 5)", "change_points(v, model := 'trend', min_size := 5)"),
    ("change", "fixed", "change_points(v, 'mean', 50)", "change_points(v, penalty := 50)"),
    ("change", "seg", "segments(v, 'meanvar', 'mbic', 10)", "segments(v, 'meanvar', 'mbic', min_size := 10)"),
    ("correlation", "tt", "trend_test(v)", None),
]
PRICE_AGGREGATES = "SELECT instrument AS key, {columns} FROM prices GROUP BY instrument ORDER BY key"
PRICE_AGGREGATE_COLUMNS: Columns = [
    ("change", "cp", "change_points_agg(price, day)", None),
    (
        "change",
        "trend",
        "change_points_agg(price, day, 'trend', 'bic', 5)",
        "change_points_agg(price, day, 'trend', 'bic', 5)",
    ),
    ("change", "seg", "segments_agg(price, day, 'trend', 'bic', 5)", "segments_agg(price, day, 'trend', 'bic', 5)"),
]

# --- hourly contacts: five queues; an hour without contacts has no row ---------------------

CONTACT_LISTS = """
    WITH r AS (SELECT queue, array_sort(collect_list(struct(hour, contacts))) AS r FROM contacts GROUP BY queue),
         s AS (SELECT queue, transform(r, x -> x.contacts) AS v, transform(r, x -> x.hour) AS t FROM r)
    SELECT queue AS key, {columns} FROM s ORDER BY key"""
DUCK_CONTACT_LISTS = """
    WITH s AS (SELECT queue, list(contacts ORDER BY hour) AS v, list(hour ORDER BY hour) AS t
               FROM contacts GROUP BY queue)
    SELECT queue AS key, {columns} FROM s ORDER BY key"""
CONTACT_LIST_COLUMNS: Columns = [
    ("smoothing", "daily", "harmonic_smooth(v, 2, 24)", "harmonic_smooth(v, harmonics := 2, period := 24)"),
    ("smoothing", "profile", "harmonic_profile(v, 24)", None),
    ("smoothing", "weekly", "harmonic_profile(v, 168, 4)", "harmonic_profile(v, 168, harmonics := 4)"),
    ("time", "g", "on_grid(v, t, INTERVAL '1' HOUR, 'zero')", "on_grid(v, t, INTERVAL 1 HOUR, 'zero')"),
    ("time", "six", "on_grid(v, t, '6 hours')", None),
]
# Spark's TIMESTAMP_NTZ is DuckDB's TIMESTAMP (view contacts_ntz); these run with time_type='timestamp_ntz'.
CONTACT_AGGREGATES = "SELECT queue AS key, {columns} FROM {table} GROUP BY queue ORDER BY key"
CONTACT_AGGREGATE_COLUMNS: Columns = [
    (
        "smoothing",
        "daily",
        "harmonic_profile_agg(contacts, hour, '1 day', 3, NULL, 'zero')",
        "harmonic_profile_agg(contacts, hour, '1 day', fill := 'zero')",
    ),
    (
        "smoothing",
        "weekly",
        "harmonic_profile_agg(contacts, hour, INTERVAL '7' DAY, 4, NULL, 'zero')",
        "harmonic_profile_agg(contacts, hour, INTERVAL 7 DAY, harmonics := 4, fill := 'zero')",
    ),
    ("smoothing", "gaps", "harmonic_profile_agg(contacts, hour, 24)", None),
    (
        "smoothing",
        "first",
        "harmonic_profile_agg(contacts, hour, '1 day', 3, NULL, 'zero', 'sum', 'first')",
        "harmonic_profile_agg(contacts, hour, '1 day', fill := 'zero', same_time := 'sum', anchor := 'first')",
    ),
    (
        "smoothing",
        "smooth",
        "harmonic_smooth_agg(contacts, hour, 3, '1 day', NULL, 'zero')",
        "harmonic_smooth_agg(contacts, hour, period := '1 day', fill := 'zero')",
    ),
    (
        "periodicity",
        "p",
        "dominant_period_agg(contacts, hour, 2, NULL, NULL, 'zero')",
        "dominant_period(on_grid(list(contacts ORDER BY hour), list(hour ORDER BY hour), fill := 'zero'))",
    ),
]

# --- literals: numeric times and rows that get NULL ----------------------------------------

LITERAL_COLUMNS: Columns = [
    ("time", "num", "on_grid(array(1.0, 2.0, 4.0), array(0.0, 0.5, 1.5))", "on_grid([1.0, 2.0, 4.0], [0.0, 0.5, 1.5])"),
    ("time", "step", "on_grid(array(1, 3), array(2, 8), 2, 'linear')", "on_grid([1, 3], [2, 8], 2, 'linear')"),
    (
        "time",
        "sum",
        "on_grid(array(1, 2, 4), array(0, 0, 1), NULL, 'null', 'sum')",
        "on_grid([1, 2, 4], [0, 0, 1], same_time := 'sum')",
    ),
    (
        "time",
        "last",
        "on_grid(array(2, 1, 4), array(0, 0, 1), same_time => 'last')",
        "on_grid([2, 1, 4], [0, 0, 1], same_time := 'last')",
    ),
    ("periodicity", "null", "seasonality(CAST(NULL AS ARRAY<DOUBLE>))", "seasonality(NULL::DOUBLE[])"),
    ("correlation", "flat", "acf(array(1.0, 1.0, 1.0))", "acf([1.0, 1.0, 1.0])"),
    ("similarity", "hole", "dtw_distance(array(1.0, NULL), array(1.0))", "dtw_distance([1.0, NULL], [1.0])"),
    ("look", "empty", "sparkline(array())", "sparkline([]::DOUBLE[])"),
    ("change", "none", "change_points(CAST(NULL AS ARRAY<DOUBLE>))", "change_points(NULL::DOUBLE[])"),
]


@pytest.fixture(scope="module")
def spark() -> Iterator[SparkSession]:
    with pytest.MonkeyPatch.context() as env:
        env.setenv("PYSPARK_PYTHON", sys.executable)
        env.setenv("SPARK_LOCAL_IP", "127.0.0.1")
        session = (
            SparkSession.builder.master("local[2]")
            .appName("tsql-tests")
            .config("spark.driver.bindAddress", "127.0.0.1")
            .config("spark.ui.enabled", "false")
            .config("spark.sql.shuffle.partitions", "1")
            .config("spark.sql.adaptive.enabled", "false")  # fewer jobs per small query
            .config("spark.sql.session.timeZone", "UTC")
            .getOrCreate()
        )
        session.sparkContext.setLogLevel("FATAL")  # the error tests' worker failures are expected
        tsql.spark.register(session)
        yield session
        session.stop()
    if AGREEMENT:
        print("\nlargest |Spark - DuckDB| per family:", {k: f"{v:.1e}" for k, v in sorted(AGREEMENT.items())})


@pytest.fixture(scope="module")
def duck(spark: SparkSession, tmp_path_factory: pytest.TempPathFactory, sample_warehouse) -> duckdb.DuckDBPyConnection:
    """DuckDB with tsql, holding the same tables as the Spark session's views."""
    source = duckdb.connect(str(sample_warehouse), read_only=True)
    quoted = ", ".join(f"'{i}'" for i in INSTRUMENTS)
    tables = {
        "sales": source.sql("SELECT * FROM monthly_sales WHERE item <= 'SKU-0060'").to_arrow_table(),
        "prices": source.sql(f"SELECT * FROM daily_prices WHERE instrument IN ({quoted})").to_arrow_table(),
        "contacts": source.sql("SELECT * FROM hourly_contacts").to_arrow_table(),
    }
    source.close()
    con = tsql.connect()
    for name, table in tables.items():
        con.register(name, table)
        spark.createDataFrame(table).createOrReplaceTempView(name)
    # createDataFrame made DuckDB's TIMESTAMP an instant (TIMESTAMP), the same ticks in a UTC session.
    ntz = "SELECT queue, CAST(hour AS TIMESTAMP_NTZ) AS hour, contacts FROM contacts"
    spark.sql(ntz).createOrReplaceTempView("contacts_ntz")
    return con


@contextlib.contextmanager
def time_type(spark: SparkSession, kind: str) -> Iterator[None]:
    tsql.spark.register(spark, time_type=kind)
    try:
        yield
    finally:
        tsql.spark.register(spark)


def paired(
    spark: SparkSession, duck: duckdb.DuckDBPyConnection, columns: Columns, spark_sql: str, duck_sql: str
) -> Answers:
    """Run one query per engine with every column, and split the answers by family."""
    spark_rows = spark.sql(spark_sql.format(columns=", ".join(f"{s} AS {a}" for _, a, s, _ in columns))).toArrow()
    relation = duck.sql(duck_sql.format(columns=", ".join(f"{d or s} AS {a}" for _, a, s, d in columns)))
    duck_rows = [dict(zip(relation.columns, row)) for row in relation.fetchall()]
    answers: Answers = {}
    for family in dict.fromkeys(f for f, *_ in columns):
        names = ["key"] + [a for f, a, *_ in columns if f == family]
        answers[family] = (spark_rows.select(names).to_pylist(), [{n: r[n] for n in names} for r in duck_rows])
    return answers


@pytest.fixture(scope="module")
def sales(spark: SparkSession, duck: duckdb.DuckDBPyConnection) -> tuple[Answers, Answers]:
    lists = paired(spark, duck, SALES_LIST_COLUMNS, SALES_LISTS, DUCK_SALES_LISTS)
    return lists, paired(spark, duck, SALES_AGGREGATE_COLUMNS, SALES_AGGREGATES, SALES_AGGREGATES)


@pytest.fixture(scope="module")
def prices(spark: SparkSession, duck: duckdb.DuckDBPyConnection) -> tuple[Answers, Answers]:
    lists = paired(spark, duck, PRICE_LIST_COLUMNS, PRICE_LISTS, DUCK_PRICE_LISTS)
    return lists, paired(spark, duck, PRICE_AGGREGATE_COLUMNS, PRICE_AGGREGATES, PRICE_AGGREGATES)


@pytest.fixture(scope="module")
def contacts(spark: SparkSession, duck: duckdb.DuckDBPyConnection) -> tuple[Answers, Answers]:
    lists = paired(spark, duck, CONTACT_LIST_COLUMNS, CONTACT_LISTS, DUCK_CONTACT_LISTS)
    with time_type(spark, "timestamp_ntz"):
        spark_sql = CONTACT_AGGREGATES.replace("{table}", "contacts_ntz")
        aggregates = paired(spark, duck, CONTACT_AGGREGATE_COLUMNS, spark_sql, spark_sql.replace("_ntz", ""))
    return lists, aggregates


@pytest.fixture(scope="module")
def literals(spark: SparkSession, duck: duckdb.DuckDBPyConnection) -> Answers:
    return paired(spark, duck, LITERAL_COLUMNS, "SELECT 1 AS key, {columns}", "SELECT 1 AS key, {columns}")


def gap(a: Any, b: Any) -> float:
    """Largest absolute difference between two answers; inf where they differ in shape, kind or text."""
    if a is None or b is None:
        return 0.0 if a is None and b is None else math.inf
    if isinstance(a, dict) and isinstance(b, dict):
        return max((gap(a[k], b[k]) for k in a), default=0.0) if a.keys() == b.keys() else math.inf
    if isinstance(a, list | tuple) and isinstance(b, list | tuple):
        return max((gap(x, y) for x, y in zip(a, b)), default=0.0) if len(a) == len(b) else math.inf
    if isinstance(a, float | int) and isinstance(b, float | int) and not isinstance(a, bool):
        if math.isnan(a) and math.isnan(b):
            return 0.0
        return abs(a - b)
    if isinstance(a, dt.date) and isinstance(b, dt.date):
        return 0.0 if _moment(a) == _moment(b) else math.inf
    return 0.0 if a == b else math.inf


def _moment(x: dt.date) -> dt.datetime:
    if not isinstance(x, dt.datetime):
        return dt.datetime(x.year, x.month, x.day)
    return x.astimezone(dt.UTC).replace(tzinfo=None) if x.tzinfo else x


def agree(family: str, *answers: Answers) -> None:
    """Spark and DuckDB give the same rows, to TOLERANCE, in every column of ``family``."""
    worst = 0.0
    for spark_rows, duck_rows in (a[family] for a in answers if family in a):
        assert len(spark_rows) == len(duck_rows) > 0
        for s, d in zip(spark_rows, duck_rows):
            assert s["key"] == d["key"]
            for column in s:
                difference = gap(s[column], d[column])
                assert difference <= TOLERANCE, f"{family}: {column} of {s['key']}: {s[column]} vs {d[column]}"
                worst = max(worst, difference)
    AGREEMENT[family] = worst


def test_every_function_with_its_test_settings(sales: tuple) -> None:
    agree("registry", *sales)


def test_every_function_is_registered(spark: SparkSession) -> None:
    names = [fn.name for fn in FUNCTIONS] + [f"{fn.name}_agg" for fn in FUNCTIONS if fn.aggregate]
    assert all(spark.catalog.functionExists(name) for name in names)
    forms = tsql.spark.positional_forms()
    assert len(forms) == len(names)
    assert "lb_keogh(a, b, band)" in forms
    grid = "step = NULL, fill = 'null', same_time = 'mean'"
    assert f"seasonality_agg(value, time, min_period = 2, max_period = NULL, {grid})" in forms


def test_periodicity(duck: duckdb.DuckDBPyConnection, sales: tuple, contacts: tuple, literals: Answers) -> None:
    agree("periodicity", *sales, *contacts, literals)
    periods = [r["p"] for r in sales[1]["periodicity"][0]]
    assert sum(p is not None and 11.5 < p < 12.5 for p in periods) >= 10  # yearly cycles, in monthly steps
    # DuckDB's own *_agg answer is that period as an INTERVAL of whole months.
    span = "union_extract(dominant_period_agg(units, month), 'span')"
    months = duck.sql(
        f"SELECT datepart('year', {span}) * 12 + datepart('month', {span}) FROM sales GROUP BY item ORDER BY item"
    ).fetchall()
    assert [m for (m,) in months] == [None if p is None else round(p) for p in periods]


def test_correlation_and_trend(sales: tuple, prices: tuple, literals: Answers) -> None:
    agree("correlation", *sales, *prices, literals)


def test_similarity(spark: SparkSession, duck: duckdb.DuckDBPyConnection, literals: Answers) -> None:
    pairs = """
        WITH s AS (SELECT item, {series} FROM sales WHERE item <= 'SKU-0012' GROUP BY item)
        SELECT a.item || ' ' || b.item AS key, {{columns}} FROM s AS a JOIN s AS b ON a.item < b.item ORDER BY key"""
    spark_series = "transform(array_sort(collect_list(struct(month, units))), x -> x.units) AS v"
    columns: Columns = [
        ("similarity", "d", "dtw_distance(a.v, b.v)", None),
        ("similarity", "dn", "dtw_distance(a.v, b.v, 3, true)", "dtw_distance(a.v, b.v, band := 3, normalize := true)"),
        ("similarity", "dc", "dtw_distance(a.v, b.v, NULL, false, 600)", "dtw_distance(a.v, b.v, cutoff := 600)"),
        ("similarity", "path", "dtw_path(a.v, b.v, 2)", "dtw_path(a.v, b.v, band := 2)"),
        ("similarity", "lb", "lb_keogh(a.v, b.v, 3)", None),
    ]
    spark_sql = pairs.format(series=spark_series)
    answers = paired(spark, duck, columns, spark_sql, pairs.format(series=f"{V} AS v"))
    rows = answers["similarity"][0]
    assert len(rows) == 66 and any(r["dc"] is None for r in rows) and any(r["dc"] is not None for r in rows)
    agree("similarity", answers, literals)


def test_change(sales: tuple, prices: tuple, literals: Answers) -> None:
    agree("change", *sales, *prices, literals)
    aggregates = prices[1]["change"][0]
    # the calibrated defaults find no turn on some instruments: check the times that are there
    times = [t for r in aggregates for t in r["trend"]] + [r["seg"][0]["first"] for r in aggregates]
    assert times and all(isinstance(t, dt.date) for t in times)
    paths = sales[1]["change"][0]
    assert all(isinstance(t, dt.date) for r in paths for record in r["path"] for t in record["positions"])
    assert any(record["positions"] for r in paths for record in r["path"])


def test_smoothing(sales: tuple, contacts: tuple) -> None:
    agree("smoothing", *sales, *contacts)
    first = contacts[1]["smoothing"][0][0]["smooth"][0]["time"]
    assert first.tzinfo is None and first.minute == 0  # TIMESTAMP_NTZ on the hourly grid


def test_look(sales: tuple, literals: Answers) -> None:
    agree("look", *sales, literals)


def test_on_grid(sales: tuple, contacts: tuple, literals: Answers) -> None:
    agree("time", *sales, *contacts, literals)
    assert any(None in r["g"] for r in sales[0]["time"][0])  # the missing months come back as gaps


def test_errors_reach_spark_sql(spark: SparkSession, duck: duckdb.DuckDBPyConnection) -> None:
    with pytest.raises(PythonException, match="autocorrelation: lag must be >= 1, got -1"):
        spark.sql("SELECT autocorrelation(array(1, 2, 3, 4), -1)").collect()
    mismatch = r"change_points_agg: the time column is TIMESTAMP, .* register with time_type='timestamp'"
    with pytest.raises(PythonException, match=mismatch):
        spark.sql("SELECT change_points_agg(contacts, hour) FROM contacts GROUP BY queue").collect()


# --- the UDFs called directly, as Spark's workers call them (no Spark job needed) ----------

DAYS = pa.array([dt.date(2024, 1, 1) + dt.timedelta(days=d) for d in range(12)])
STEPS = pa.array([5, 6, 5, 6, 5, 6, 12, 13, 12, 13, 12, 13])


def list_form(name: str, *columns: pa.Array, **named: pa.Array) -> pa.Array:
    return tsql.spark._list_udf(BY_NAME[name])(*columns, **named)


def agg_form(name: str, *columns: pa.Array, time_type: str = "date", **named: pa.Array) -> pa.Scalar:
    return tsql.spark._agg_udf(BY_NAME[name.removesuffix("_agg")], time_type)(*columns, **named)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        (lambda: list_form("change_points", pa.array([[1, 2]]), pa.array(["median"])), "change_points: model must be"),
        (lambda: list_form("seasonality", *[pa.array([[1.0]])] * 4), "seasonality: takes at most 3 arguments"),
        (lambda: list_form("acf", pa.array([[1.0]]), lags=pa.array([3])), "acf: no argument is named lags, acf\\("),
        (
            lambda: list_form("acf", pa.array([[1.0]]), pa.array([3]), max_lag=pa.array([3])),
            "acf: max_lag is given twice",
        ),
        (
            lambda: list_form("lb_keogh", pa.array([[1.0]]), pa.array([[1.0]])),
            r"lb_keogh: band is required, lb_keogh\(",
        ),
        (lambda: list_form("acf", pa.array([1.5])), "acf: values must be an array of numbers, got double"),
        (lambda: list_form("acf", pa.array([[1.0]]), pa.array(["x"])), "acf: max_lag must be a number, got 'x'"),
        (lambda: agg_form("acf_agg", STEPS, DAYS, STEPS), "acf_agg: max_lag must be the same on every row of a group"),
        (lambda: agg_form("trend_test_agg", STEPS, pa.array(["a"] * 12)), "trend_test_agg: time must be DATE"),
        (lambda: agg_form("acf_agg", STEPS, DAYS, pa.array(["1 day"] * 12, pa.string())), "acf_agg: max_lag must be"),
        (
            lambda: agg_form("change_points_agg", STEPS, DAYS, time_type="double"),
            r"the time column is DATE, .* register with time_type='date'",
        ),
    ],
)
def test_bad_arguments_name_the_function(call: Any, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        call()


def test_arguments_left_off_take_their_defaults() -> None:
    series = pa.array([[3, 8, 4, 1, 3, 9, 4, 1, 2, 8, 5, 1], None])
    assert list_form("seasonality", series) == list_form("seasonality", series, pa.array([2, 2]), pa.nulls(2))
    full = agg_form(
        "change_points_agg", STEPS, DAYS, *(pa.array([x] * 12) for x in ("mean", "bic", 2, "auto", None, None, "null"))
    )
    assert agg_form("change_points_agg", STEPS, DAYS) == full
    assert agg_form("change_points_agg", STEPS, DAYS, min_size=pa.array([2] * 12), fill=pa.array(["null"] * 12)) == full
    assert full.as_py() == [dt.date(2024, 1, 7)]


def test_times_come_back_in_the_registered_type() -> None:
    instants = pa.array([dt.datetime(2024, 1, 1, h, tzinfo=dt.UTC) for h in range(12)], pa.timestamp("us", tz="UTC"))
    starts = agg_form("change_points_agg", STEPS, instants, time_type="timestamp")
    assert starts.type == pa.list_(pa.timestamp("us", tz="UTC"))
    assert starts.as_py() == [dt.datetime(2024, 1, 1, 6, tzinfo=dt.UTC)]
    midnights = agg_form("change_points_agg", STEPS, DAYS, time_type="timestamp_ntz")
    assert midnights.as_py() == [dt.datetime(2024, 1, 7)]
    numbers = agg_form("segments_agg", STEPS, pa.array(range(0, 24, 2)), time_type="double")
    assert [(s["first"], s["last"]) for s in numbers.as_py()] == [(0.0, 10.0), (12.0, 22.0)]


def test_register_rejects_an_unknown_time_type(spark: SparkSession) -> None:
    with pytest.raises(ValueError, match="tsql.spark.register: time_type must be one of 'date'"):
        tsql.spark.register(spark, time_type="week")
