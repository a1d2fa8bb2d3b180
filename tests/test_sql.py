"""Every function through DuckDB: registration, macros, GROUP BY, NULLs and errors."""

import hashlib
import importlib
import re
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa
import pytest
from registry_calls import settings

import tsql
from tsql.binding import sql_statements
from tsql.forms.answers import PERIOD, PROFILE, SAME, SCREEN
from tsql.forms.list_form import list_udf as make_udf
from tsql.reference import markdown_table
from tsql.registry import FUNCTIONS, PUBLIC, TABLE_FUNCTIONS, TABLE_MACROS

SINGLE = [f for f in FUNCTIONS if len(f.series) == 1]

ROOT = Path(__file__).resolve().parents[1]


# One call per function with its most unusual test setting (the registry's), and the kernel call it must equal.
SETTINGS = {fn.name: settings(fn, fn.test_args[-1]) for fn in FUNCTIONS}
#: Functions whose *_agg form answers in times (tests/test_sql_change.py, tests/test_sql_time.py).
TIME_ANSWERS = {f.name for f in FUNCTIONS if f.answer not in (SAME, PERIOD, PROFILE, SCREEN)}


def param_columns(fn, kwargs, n):
    return [pa.array([kwargs[p.name]] * n, type=p.sql_type.arrow) for p in fn.params]


@pytest.fixture(scope="module")
def con():
    c = tsql.connect()
    yield c
    c.close()


@pytest.fixture(scope="module")
def ragged_table(con):
    """3,000 groups of ragged lengths (0 to 150 rows), with NULL and NaN values."""
    rng = np.random.default_rng(2024)
    lengths = rng.integers(1, 150, 3000)
    g = np.repeat(np.arange(3000), lengths)
    t = np.concatenate([rng.permutation(n) for n in lengths])  # rows arrive out of time order
    cycle = np.sin(2 * np.pi * t / rng.uniform(4, 20, 3000)[g])
    v = cycle + 0.5 * rng.standard_normal(len(g)) + 0.01 * t * (g % 3 == 0)
    v[rng.random(len(v)) < 0.01] = np.nan
    mask = rng.random(len(v)) < 0.01
    table = pa.table({"g": g, "t": t, "v": pa.array(v, mask=mask)})
    con.register("ragged_arrow", table)
    con.execute("CREATE TEMP TABLE ragged AS SELECT * FROM ragged_arrow")
    con.unregister("ragged_arrow")
    series = {}
    for gi in range(3000):
        sel = g == gi
        order = np.argsort(t[sel])
        vals = np.where(mask[sel], np.nan, v[sel])[order]
        series[gi] = vals
    return series


def as_comparable(value):
    if isinstance(value, dict):
        return tuple(as_comparable(v) for v in value.values())
    if isinstance(value, list):
        return tuple(as_comparable(v) for v in value)
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return None
    return value


def kernel_alone(fn, x, kwargs):
    """The answer of the kernel called on one series by itself, in SQL terms."""
    udf = make_udf(fn)
    column = pa.array([x], type=pa.list_(pa.float64()), from_pandas=True)
    return udf(column, *param_columns(fn, kwargs, 1)).to_pylist()[0]


@pytest.mark.parametrize("fn", SINGLE, ids=lambda f: f.name)
def test_group_by_equals_each_series_alone(con, ragged_table, fn):
    sql_args, kwargs = SETTINGS[fn.name]
    extra = f", {sql_args}" if sql_args else ""
    rows = con.execute(f"SELECT g, {fn.name}(list(v ORDER BY t){extra}) FROM ragged GROUP BY g ORDER BY g").fetchall()
    assert len(rows) == 3000
    answered = 0
    for g, got in rows:
        expected = kernel_alone(fn, ragged_table[g], kwargs)
        assert as_comparable(got) == as_comparable(expected), (fn.name, g)
        answered += got is not None
    assert answered > 2000  # most groups are long enough to get an answer


@pytest.mark.parametrize("fn", SINGLE, ids=lambda f: f.name)
def test_aggregate_form_equals_list_form(con, fn):
    if not fn.aggregate or fn.name in TIME_ANSWERS:
        pytest.skip("no aggregate form, or one that answers in times (tests/test_sql_change.py)")
    sql_args, _ = SETTINGS[fn.name]
    extra = f", {sql_args}" if sql_args else ""
    first = ", anchor := 'first'" if fn.answer == PROFILE else ""  # a profile's phase 0: the first row's, as listed
    query = f"""
        WITH data AS (SELECT i % 7 AS g, i AS t, sin(i * 0.7) + (i % 5) AS v FROM range(700) r(i))
        SELECT g, {fn.name}_agg(v, t{extra}{first}) AS a, {fn.name}(list(v ORDER BY t){extra}) AS b
        FROM data GROUP BY g ORDER BY g"""
    rows = con.execute(query).fetchall()
    assert len(rows) == 7
    for _, a, b in rows:
        if fn.answer in (PERIOD, SCREEN):  # the rows of a group are 7 apart: the period in time units
            if isinstance(b, dict):
                b = dict(b, period=b["period"] * 7)
            else:
                b = b * 7
        assert a is not None and as_comparable(a) == as_comparable(b)


@pytest.mark.parametrize("fn", [f for f in SINGLE if f.aggregate], ids=lambda f: f.name)
def test_aggregate_form_computes_each_group_once(con, fn, monkeypatch):
    """Each ``*_agg`` macro reads its UDF's one result twice (the answer and the error): DuckDB must still
    compute every group once. (A plain CASE over ``r.error`` and ``r.answer`` had it call the UDF twice.)"""
    module_name, name = fn.kernel_path.split(":")
    module = importlib.import_module(f"tsql.kernels.{module_name}")
    kernel = getattr(module, name)
    rows = []

    def counted(values, *args, **kwargs):
        rows.append(values.n_rows)
        return kernel(values, *args, **kwargs)

    monkeypatch.setattr(module, name, counted)
    sql_args, _ = settings(fn, fn.test_args[0])  # the usual setting: every group computed
    extra = f", {sql_args}" if sql_args else ""
    query = f"""
        WITH data AS (SELECT i % 300 AS g, i AS t, sin(i * 0.7) + (i * 7919 % 1013) / 1013 AS v FROM range(12000) r(i))
        SELECT count(a) FROM (SELECT g, {fn.name}_agg(v, t{extra}) AS a FROM data GROUP BY g)"""
    assert con.execute(query).fetchone()[0] == 300
    assert sum(rows) == 300


@pytest.mark.parametrize("fn", FUNCTIONS, ids=lambda f: f.name)
def test_registry_example_runs(con, fn):
    (value,) = con.execute(fn.example).fetchone()
    assert value is not None


@pytest.mark.parametrize("fn", SINGLE, ids=lambda f: f.name)
@pytest.mark.parametrize(
    "values", ["NULL", "[]::DOUBLE[]", "[1.0]", "[NULL, NULL, NULL]::DOUBLE[]", "[2, 2, 2, 2, 2, 2]"]
)
def test_rows_without_support_are_null_and_the_query_goes_on(con, fn, values):
    sql_args, _ = SETTINGS[fn.name]
    extra = f", {sql_args}" if sql_args else ""
    rows = con.execute(
        f"SELECT {fn.name}(x{extra}) FROM (VALUES ({values}), ([1, 5, 2, 8, 3, 9, 4, 7, 1, 6, 2, 8])) v(x)"
    ).fetchall()
    if fn.family == "change" and values in ("[1.0]", "[2, 2, 2, 2, 2, 2]"):
        # too short to split, or constant: a real answer, "no change"
        assert len(rows[0][0]) == (0 if fn.name == "change_points" else 1)
    elif fn.family == "smoothing" and values == "[2, 2, 2, 2, 2, 2]":
        # a constant series is smooth already: its curve and its cycle are that constant
        assert rows[0][0] and all(v == pytest.approx(2.0, rel=1e-12) for v in rows[0][0])
    elif fn.name == "screen" and values in ("[1.0]", "[2, 2, 2, 2, 2, 2]"):
        # the profile of what there is: its size and no change, but no statistic
        profile = rows[0][0]
        assert (profile["points"], profile["missing"], profile["changes"]) == (1 if values == "[1.0]" else 6, 0, 0)
        assert profile["p_value"] is profile["trend_tau"] is profile["adf_p_value"] is None
    elif fn.name == "sparkline" and values != "NULL":
        # every list has a picture (stretched to width 12): '' when empty, spaces for NULLs,
        # the middle block when constant
        assert rows[0][0] == {"[]::DOUBLE[]": "", "[1.0]": "▄" * 12, "[2, 2, 2, 2, 2, 2]": "▄" * 12}.get(
            values, " " * 12
        )
    else:
        assert rows[0] == (None,)
    assert rows[1][0] is not None


def test_numeric_list_types_are_accepted(con):
    expected = con.execute("SELECT autocorrelation([1.0, 3.0, 2.0, 5.0, 4.0])").fetchone()[0]
    for cast in ("INTEGER[]", "BIGINT[]", "DECIMAL(6,2)[]", "FLOAT[]", "SMALLINT[]"):
        got = con.execute(f"SELECT autocorrelation([1, 3, 2, 5, 4]::{cast})").fetchone()[0]
        assert got == pytest.approx(expected, rel=1e-12), cast


def test_nan_counts_as_missing(con):
    with_nan = con.execute("SELECT acf([1.0, 'NaN'::DOUBLE, 3.0, 2.0, 5.0, 4.0], max_lag := 2)").fetchone()[0]
    with_null = con.execute("SELECT acf([1.0, NULL, 3.0, 2.0, 5.0, 4.0], max_lag := 2)").fetchone()[0]
    assert with_nan == with_null


@pytest.mark.parametrize(
    "call, message",
    [
        ("autocorrelation([1, 2, 3], lag := -1)", "autocorrelation: lag must be >= 1, got -1"),
        ("autocorrelation([1, 2, 3], lag := 0)", "autocorrelation: lag must be >= 1, got 0"),
        ("autocorrelation([1, 2, 3], lag := 1.5)", "autocorrelation: lag must be a whole number, got 1.5"),
        ("acf([1, 2, 3], max_lag := 0)", "acf: max_lag must be >= 1, got 0"),
        ("ljung_box([1, 2, 3], max_lag := -2)", "ljung_box: max_lag must be >= 1, got -2"),
        ("dominant_period([1, 2, 3], min_period := 1)", "dominant_period: min_period must be >= 2, got 1"),
        (
            "seasonality([1, 2, 3], min_period := 6, max_period := 4)",
            "seasonality: max_period must be >= min_period, got min_period = 6 and max_period = 4",
        ),
        ("dominant_period([1, 2, 3], max_period := 'inf'::DOUBLE)", "dominant_period: max_period must be a finite"),
    ],
)
def test_nonsense_arguments_are_errors_naming_function_argument_and_value(con, call, message):
    with pytest.raises(duckdb.Error, match=re.escape(message)):
        con.execute(f"SELECT {call}").fetchall()


def test_null_argument_gives_null_row(con):
    assert con.execute("SELECT autocorrelation([1, 2, 3, 2, 1], lag := NULL)").fetchone() == (None,)


def test_parameter_may_vary_by_row(con):
    rows = con.execute(
        """SELECT lag, autocorrelation([1, 4, 2, 5, 3, 6, 4, 7], lag := lag),
                  autocorrelation([1, 4, 2, 5, 3, 6, 4, 7], lag := 1),
                  autocorrelation([1, 4, 2, 5, 3, 6, 4, 7], lag := 2)
           FROM range(1, 3) r(lag) ORDER BY lag"""
    ).fetchall()
    assert rows[0][1] == rows[0][2] and rows[1][1] == rows[1][3]
    assert rows[0][1] != rows[1][1]


def test_register_twice_is_harmless():
    con = duckdb.connect()
    tsql.register(con)
    tsql.register(con)
    assert con.execute("SELECT autocorrelation([1, 2, 3, 1, 2, 3])").fetchone()[0] is not None


def test_read_only_database_is_not_touched(tmp_path):
    path = tmp_path / "warehouse.duckdb"
    with duckdb.connect(str(path)) as setup:
        setup.execute(
            "CREATE TABLE sales AS SELECT i % 4 AS item, i AS month, (i % 12) * 1.5 AS units FROM range(240) r(i)"
        )
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    con = tsql.connect(str(path), read_only=True)
    rows = con.execute(
        "SELECT item, dominant_period_agg(units, month) FROM sales GROUP BY item ORDER BY item"
    ).fetchall()
    con.close()
    # month i of item k is i = 4m + k: the 12-cycle is 3 grid steps of 4, answered in the time column's units
    assert [round(p, 6) for _, p in rows] == [12.0] * 4
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["warehouse.duckdb"]


def test_registration_on_a_writable_database_creates_nothing_persistent(tmp_path):
    path = tmp_path / "own.duckdb"
    con = tsql.connect(str(path))
    con.close()
    with duckdb.connect(str(path)) as plain:
        assert plain.execute("SELECT count(*) FROM duckdb_functions() WHERE function_name = 'acf'").fetchone() == (0,)
        assert plain.execute("SELECT count(*) FROM duckdb_tables()").fetchone() == (0,)


def test_threads_do_not_change_answers(ragged_table):
    answers = []
    for threads in (1, 2):
        c = tsql.connect(config={"threads": threads})
        c.register(
            "v",
            pa.table(
                {
                    "g": [g for g, x in ragged_table.items() for _ in x],
                    "t": [i for x in ragged_table.values() for i in range(len(x))],
                    "v": pa.array([y for x in ragged_table.values() for y in x], from_pandas=True),
                }
            ),
        )
        answers.append(
            c.execute("SELECT g, acf(list(v ORDER BY t), max_lag := 3) FROM v GROUP BY g ORDER BY g").fetchall()
        )
        c.close()
    assert answers[0] == answers[1]


def test_batch_boundaries_do_not_change_answers(ragged_table):
    series = [ragged_table[g] for g in range(600)]
    column = pa.array(series, type=pa.list_(pa.float64()), from_pandas=True)
    for fn in SINGLE:
        _, kwargs = SETTINGS[fn.name]
        udf = make_udf(fn)

        def params(n, fn=fn, kwargs=kwargs):
            return param_columns(fn, kwargs, n)

        whole = udf(column, *params(len(series))).to_pylist()
        pieces = []
        for lo, hi in [(0, 1), (1, 257), (257, 600)]:
            chunk = pa.chunked_array([column.slice(lo, hi - lo)])
            pieces += udf(chunk, *params(hi - lo)).to_pylist()
        assert as_comparable(whole) == as_comparable(pieces), fn.name


def test_macros_and_registry_are_in_step(con):
    text = re.sub(r"\s+", " ", "\n".join(sql_statements()))  # a long signature may wrap
    defined = {m for m in re.findall(r"CREATE OR REPLACE TEMP MACRO (\w+)\(", text) if not m.startswith("__tsql_")}
    expected = {f.name for f in PUBLIC} | {f"{f.name}_agg" for f in FUNCTIONS if f.aggregate}
    assert defined == expected
    for fn in TABLE_MACROS:
        assert f"MACRO {fn.signature} AS TABLE" in text, fn.signature
    for fn in FUNCTIONS + TABLE_FUNCTIONS:  # the signature is the untyped overload's (the typed one adds types)
        assert f", ({fn.signature.split('(', 1)[1]} AS error(" in text, fn.signature
        if fn.aggregate:
            assert f", ({fn.agg_signature.split('(', 1)[1]} AS error(" in text, fn.agg_signature
    listed = {
        r[0]
        for r in con.execute(
            "SELECT function_name FROM duckdb_functions() WHERE function_type IN ('macro', 'table_macro') "
            "AND database_name = 'temp'"
        ).fetchall()
    }
    assert expected <= listed


def test_readme_function_table_is_generated_from_the_registry():
    assert markdown_table() in (ROOT / "README.md").read_text()


def test_register_on_a_cursor():
    con = tsql.connect()
    cursor = con.cursor()
    with pytest.raises(duckdb.CatalogException):
        cursor.execute("SELECT acf([1, 2, 3, 1, 2, 3])")
    tsql.register(cursor)
    assert cursor.execute("SELECT acf([1, 2, 3, 1, 2, 3], max_lag := 2)").fetchone()[0] is not None


@pytest.mark.parametrize("target", ["connection", "cursor"])
def test_registering_again_leaves_no_unfinished_result(target):
    # DuckDB keeps a result open until a fetch returns no rows; an unfinished one blocks the next call
    con = tsql.connect()
    again = con if target == "connection" else con.cursor()
    tsql.register(again)
    tsql.register(again)
    again.register("t", pa.table({"x": [1.0, 2.0, 1.0, 2.0]}))
    assert again.execute("SELECT autocorrelation(list(x)) FROM t").fetchall()[0][0] == pytest.approx(-0.75)
