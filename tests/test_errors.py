"""The everyday mistakes, for every public function: each is an error that names the function and the fix,
and no error shows tsql's internal names or the host's Python wrapper (docs/behaviour.md, "Errors")."""

from __future__ import annotations

import duckdb
import pytest

import tsql
from tsql.registry import FUNCTIONS, PUBLIC, TABLE_FUNCTIONS, TABLE_MACROS, Function

INTERNALS = ("__tsql_", "Python exception", "Traceback", 'File "')


@pytest.fixture(scope="module")
def con():
    con = tsql.connect()
    con.execute(
        "CREATE TABLE obs AS SELECT i AS t, DATE '2024-01-01' + i::INTEGER AS d, sin(i / 2.0) + i / 40 AS v, "
        "'w' || i AS word, i % 3 AS id FROM range(1, 41) r(i)"
    )
    con.execute(
        "CREATE TABLE lists AS SELECT list(v ORDER BY t) AS x, list(v * 2 + 1 ORDER BY t) AS y, "
        "list(t ORDER BY t) AS times, list(word ORDER BY t) AS words, 2.5 AS scalar FROM obs"
    )
    return con


def required(fn: Function) -> list[str]:
    """The SQL text of the required (positional) plain arguments, from the entry's first test arguments."""
    given = [a.strip() for a in fn.test_args[0].split(",") if a.strip() and ":=" not in a]
    return given[: sum(p.default is None for p in fn.params)]


def series_args(fn: Function, **replace: str) -> list[str]:
    ordinary = {"times": "times", "id": "id", "series": "x"}
    names = iter(["x", "y"])
    return [replace.get(s, ordinary.get(s) or next(names)) for s in fn.series]


def mistakes(fn: Function):
    """(call, the table it runs on, words the message must hold besides the function's name)."""
    if fn.over_rows:
        yield f"{fn.name}(id, v)", "obs", ["list(x ORDER BY t)"]
        for p in fn.params:
            if p.minimum is not None:
                yield f"{fn.name}(id, [v], {p.name} := {p.minimum - 10})", "obs", [f"{p.name} must be >= "]
        return
    fixed = required(fn)
    for s in fn.series:
        if s == "times":
            yield f"{fn.name}({', '.join(series_args(fn, times='words') + fixed)})", "lists", ["time must be"]
            continue
        scalar = ", ".join(series_args(fn, **{s: "scalar"}) + fixed)
        yield f"{fn.name}({scalar})", "lists", ["list(x ORDER BY t)"] + ([f"{fn.name}_agg"] if fn.aggregate else [])
        words = ", ".join(series_args(fn, **{s: "words"}) + fixed)
        yield f"{fn.name}({words})", "lists", ["list(x::DOUBLE ORDER BY t)"]
    plain = ", ".join(series_args(fn) + fixed)
    for p in fn.params:
        if p.default is None:
            continue
        if p.minimum is not None and p.name != "step":
            yield f"{fn.name}({plain}, {p.name} := {p.minimum - 10})", "lists", [f"{p.name} must be >= "]
        if p.choices and not p.number_ok:
            yield f"{fn.name}({plain}, {p.name} := 'nonsense')", "lists", [f"{p.name} must be one of"]
        if not p.number_ok and p.sql_type.sql == "DOUBLE":
            yield f"{fn.name}({plain}, {p.name} := 'ten')", "lists", None
    if not fn.aggregate:
        return
    name, args = f"{fn.name}_agg", "".join(f", {a}" for a in fixed)
    more = "v, " * (len(fn.agg_values) - 1)  # the other series of a function of two
    order = "(value, time)" if not more else "(a_value, b_value, time)"
    yield f"{name}(d, {more}v{args})", "obs", [order]
    yield f"{name}(word, {more}t{args})", "obs", ["value::DOUBLE"]
    yield f"{name}(v, {more}uuid(){args})", "obs", ["time must be DATE, TIMESTAMP, TIMESTAMPTZ or a number, got UUID"]
    yield f"{name}(v, {more}word{args})", "obs", ["got VARCHAR"]
    yield f"{name}(v, {more}d{args}, step := 3)", "obs", ["step must be an INTERVAL"]
    yield f"{name}(v, {more}t{args}, step := INTERVAL 1 DAY)", "obs", ["step must be a number"]
    yield f"{name}(v, {more}t{args}, fill := 'nearest')", "obs", ["fill must be one of"]
    yield f"{name}(v, {more}t{args}, same_time := 'median')", "obs", ["same_time must be one of"]
    for p in fn.params:
        if p.default is not None and p.minimum is not None:
            yield f"{name}(v, {more}t{args}, {p.name} := {p.minimum - 10})", "obs", [f"{p.name} must be >= "]


# the table macros (with_q_values) read a whole table: their mistakes are in tests/test_with_q_values.py
CASES = [(fn.name, *case) for fn in FUNCTIONS + TABLE_FUNCTIONS for case in mistakes(fn)]


def test_every_public_function_has_its_mistakes_walked():
    walked = {c[1].split("(")[0] for c in CASES}
    assert {fn.name for fn in PUBLIC if fn not in TABLE_MACROS} <= walked
    assert {f"{fn.name}_agg" for fn in FUNCTIONS if fn.aggregate} <= walked
    assert TABLE_FUNCTIONS


@pytest.mark.parametrize(("fn", "call", "table", "words"), CASES, ids=[c[1] for c in CASES])
def test_everyday_mistake_names_the_function_and_the_fix(con, fn, call, table, words):
    with pytest.raises(duckdb.Error) as error:
        con.execute(f"SELECT {call} FROM {table}").fetchall()
    message = str(error.value)
    public = call.split("(")[0]
    if words is None:  # text where a number is wanted: DuckDB's own conversion error, pointing at the argument
        words = ["Conversion Error: Could not convert string", "LINE 1:"]
    else:
        assert f"{public}: " in message, message
    for word in words:
        assert word in message, f"{word!r} not in {message!r}"
    for internal in INTERNALS:
        assert internal not in message, message


@pytest.mark.parametrize(
    ("call", "words"),
    [
        # a given step too fine for the data: found only once the group's times are seen
        ("acf_agg(v, t, step := 1e-300)", ["acf_agg: the step makes a grid of"]),
        ("harmonic_profile_agg(v, d, INTERVAL 1 HOUR)", ["harmonic_profile_agg: period must be >= 2 grid steps"]),
        ("on_grid(list(v), list(t), step := 1e-300)", ["on_grid: the step makes a grid of"]),
        # a series on the grid carries its error inside its answer (forms.answers.Series.error_rows)
        ("harmonic_smooth_agg(v, t, step := 1e-300)", ["harmonic_smooth_agg: the step makes a grid of"]),
        ("stl_decompose_agg(v, d, INTERVAL 1 HOUR)", ["stl_decompose_agg: period must be >= 2 grid steps"]),
    ],
)
def test_errors_found_in_the_data_are_clean_too(con, call, words):
    with pytest.raises(duckdb.Error) as error:
        con.execute(f"SELECT {call} FROM obs").fetchall()
    message = str(error.value)
    for word in words:
        assert word in message, message
    for internal in INTERNALS:
        assert internal not in message, message


@pytest.mark.parametrize(
    "call", ["harmonic_smooth_agg(v, t, same_time := 'error')", "acf_agg(v, t, same_time := 'error')"]
)
def test_an_error_in_one_group_of_a_large_call_stops_the_query(con, call):
    """Two rows at one time in the last of 300 groups of 500 rows: the call runs in pieces (forms.agg.PIECE_POINTS),
    the last piece finds the error, and the query stops with its message, whatever the form's answer."""
    public = call.split("(")[0]
    data = "SELECT i // 500 AS g, i % 500 - (i = 149999)::INTEGER AS t, sin(i) AS v FROM range(150000) r(i)"
    with pytest.raises(duckdb.Error) as error:
        con.execute(f"SELECT g, {call} AS r FROM ({data}) GROUP BY g").fetchall()
    message = str(error.value)
    assert f"{public}: several rows at 498 (same_time := 'error')" in message, message
    for internal in INTERNALS:
        assert internal not in message, message


def test_an_unknown_argument_name_lists_the_arguments(con):
    """DuckDB's binder answers a wrong argument name itself; its message lists the macro's arguments."""
    with pytest.raises(duckdb.BinderException) as error:
        con.execute("SELECT acf(x, maxlag := 3) FROM lists").fetchall()
    message = str(error.value)
    assert "acf(values DOUBLE[], max_lag := 10)" in message
    assert "__tsql_" not in message


def test_checks_of_constant_arguments_cost_nothing_per_row(con):
    """With constant arguments the check is folded when DuckDB plans the query: no CASE is left in the plan."""
    plan = con.execute("EXPLAIN SELECT acf(x, max_lag := 3) FROM lists").fetchall()[0][1]
    assert "__tsql_acf(" in plan and "CASE" not in plan and "__tsql_check" not in plan
