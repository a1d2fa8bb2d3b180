"""The bad-input matrix: every public function against every awkward input, as docs/behaviour.md says.

The expectations are read from the tables in ``docs/behaviour.md``; this file only knows how to
build each input class, how to call each function and how to check the answer. Cells where the
code does not yet do what the page says are marked ``xfail(strict=True)`` with the reason, so the
suite stays green and each gap stays visible until it is fixed (then the mark must go).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import math
import subprocess
import sys
import warnings
from decimal import Decimal
from fractions import Fraction
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa
import pytest
from registry_calls import settings
from scipy import stats

import tsql
from tsql.cli import main
from tsql.kernels.changepoint import MAX_PROGRAMME, change_points
from tsql.kernels.correlation import autocorrelation
from tsql.kernels.periodicity import seasonality
from tsql.kernels.ragged import Ragged
from tsql.kernels.sparkline import BLOCKS
from tsql.kernels.stl import stl_decompose
from tsql.kernels.trend import trend_test
from tsql.kernels.unitroot import adf_test
from tsql.reference import regenerate
from tsql.registry import FUNCTIONS

# the kernels' stray RuntimeWarnings are a finding of their own (test_no_warning_escapes); keep them out of the summary
pytestmark = pytest.mark.filterwarnings("ignore::RuntimeWarning")

ROOT = Path(__file__).resolve().parents[1]
BEHAVIOUR = ROOT / "docs" / "behaviour.md"


# --------------------------------------------------------------------------- #
# the tables of docs/behaviour.md
# --------------------------------------------------------------------------- #


def read_table(name: str) -> list[dict[str, str]]:
    """The rows of the markdown table after ``<!-- table: name -->``, as dicts by column header."""
    text = BEHAVIOUR.read_text(encoding="utf-8")
    marker = f"<!-- table: {name} -->"
    assert text.count(marker) == 1, marker
    lines = text.split(marker, 1)[1].strip().splitlines()
    rows = []
    for line in lines:
        if not line.startswith("|"):
            break
        rows.append([c.strip().strip("`").strip() for c in line.strip().strip("|").split("|")])
    header, separator, body = rows[0], rows[1], rows[2:]
    assert set("".join(separator)) <= {"-", ":"}, name
    assert all(len(r) == len(header) for r in body), name
    return [dict(zip(header, r)) for r in body]


INPUTS = read_table("inputs")
CLASSES = [c for c in INPUTS[0] if c != "function"]
OUTCOMES = {"null", "value", "partial", "empty", "echo", "error", "-"}
PUBLIC = [f.name for f in FUNCTIONS] + [f"{f.name}_agg" for f in FUNCTIONS if f.aggregate]


def test_the_per_function_tables_are_generated_from_the_registry():
    text = BEHAVIOUR.read_text(encoding="utf-8")
    assert regenerate(text) == text, "run: python -m tsql.reference README.md docs/behaviour.md"


def test_the_table_covers_every_public_function_and_uses_known_outcomes():
    assert sorted(row["function"] for row in INPUTS) == sorted(PUBLIC)
    for row in INPUTS:
        assert {row[c] for c in CLASSES} <= OUTCOMES, row["function"]
    expected = set()
    for f in FUNCTIONS:
        expected |= {(f.name, p.name) for p in f.params}
        if f.aggregate:
            expected |= {(f"{f.name}_agg", p.name) for p in f.agg_params}
    listed = {(r["function"], r["argument"]) for r in read_table("null-arguments")}
    assert listed == expected


# --------------------------------------------------------------------------- #
# the inputs
# --------------------------------------------------------------------------- #

N = 40
_rng = np.random.default_rng(20240611)
_t = np.arange(N)
# a cycle of 8 with noise and a level shift: every function has something to find
BASE_A = np.round(np.sin(2 * np.pi * _t / 8) + 0.3 * _rng.standard_normal(N) + 3.0 * (_t >= 25), 2)
BASE_B = np.round(np.cos(2 * np.pi * _t / 8) + 0.3 * _rng.standard_normal(N) + 2.0 * (_t >= 15), 2)
TIMES = list(range(1, N + 1))
HOLE = 5  # the element made NaN, infinite or timeless
SCALE = {"huge": 1e300, "tiny": 1e-300}
CASTS = {
    "integer": pa.int32(),
    "bigint": pa.int64(),
    "decimal": pa.decimal128(18, 2),
    "float": pa.float32(),
}

# how each function is called: the list forms on columns a, b, times with the registry's first test
# arguments; the *_agg forms on rows (v, t)
_COLUMNS = {"values": "a", "a": "a", "b": "b", "times": "times"}
LIST_CALLS = {
    f.name: f"{f.name}({', '.join([_COLUMNS[s] for s in f.series] + ([f.test_args[0]] if f.test_args[0] else []))})"
    for f in FUNCTIONS
}
AGG_CALLS = {
    f"{name}_agg": call.replace(
        name + "(a, b" if call.startswith(name + "(a, b") else name + "(a", name + "_agg(v, t", 1
    )
    for name, call in LIST_CALLS.items()
    if f"{name}_agg" in PUBLIC
}
# the *_agg forms of two series take a second value column w (b's series at the same times)
AGG_CALLS.update(
    {
        n: c.replace("_agg(v, t", "_agg(v, w, t", 1)
        for n, c in AGG_CALLS.items()
        if n[:-4] in {f.name for f in FUNCTIONS if len(f.series) == 2}
    }
)
PAIRS = {"dtw_distance", "dtw_path", "lb_keogh"}
# parts of an answer in the series' own units: they scale with the series (the rest must not move)
LINEAR = {"dtw_distance", "lb_keogh", "harmonic_smooth", "harmonic_profile", "on_grid"}
LINEAR_FIELDS = {"mean", "slope", "value"}
LINEAR_FIELDS_OF = {
    "stl_decompose": {"trend", "seasonal", "remainder"},
    "screen": {"trend_slope"},
}  # stl_strength's trend is a ratio


def list_case(cls: str) -> tuple[list, list, list]:
    """(a, b, times) for one list-form input class: b and times stay ordinary unless the class is about them."""
    a, b, times = BASE_A.tolist(), BASE_B.tolist(), list(TIMES)
    if cls == "null_list":
        return None, b, None
    if cls == "empty":
        return [], b, []
    if cls == "one":
        return [3.5], b, [1]
    if cls == "all_null":
        return [None] * 5, b, [1, 2, 3, 4, 5]
    if cls in ("nan", "pos_inf", "neg_inf"):
        a[HOLE] = {"nan": math.nan, "pos_inf": math.inf, "neg_inf": -math.inf}[cls]
    elif cls == "constant":
        a = [7.0] * N
    elif cls in SCALE:
        a, b = [x * SCALE[cls] for x in a], [x * SCALE[cls] for x in b]
    elif cls in CASTS:
        a, b = [round(x * 100) for x in a], [round(x * 100) for x in b]
        if cls == "decimal":
            a, b = [Decimal(x) / 100 for x in a], [Decimal(x) / 100 for x in b]
    elif cls == "mismatched":
        b = b[:25]
        times = times[:25]
    elif cls == "null_time":
        times[HOLE] = None
    elif cls == "inf_time":
        times = [float(x) for x in times]
        times[HOLE] = math.inf
    return a, b, times


def ordinary(series: np.ndarray, cls: str) -> list:
    """The ordinary series in the value type of ``cls``."""
    if cls not in CASTS:
        return series.tolist()
    whole = [round(x * 100) for x in series.tolist()]
    return [Decimal(x) / 100 for x in whole] if cls == "decimal" else whole


def list_table(a, b, times, cls: str) -> pa.Table:
    """Row k = 0 is the case, row 1 an ordinary row that must be answered beside it."""
    value_type = CASTS.get(cls, pa.float64())
    time_type = pa.float64() if cls == "inf_time" else pa.int64()
    return pa.table(
        {
            "k": [0, 1],
            "a": pa.array([a, ordinary(BASE_A, cls)], pa.list_(value_type)),
            "b": pa.array([b, ordinary(BASE_B, cls)], pa.list_(value_type)),
            "times": pa.array([times, TIMES], pa.list_(time_type)),
        }
    )


def agg_table(values: list, times: list, cls: str = "ordinary", second: list | None = None) -> pa.Table:
    """Rows (g, t, v, w): group 0 holds ``values`` at ``times``, group 1 the ordinary series; w is the second
    series of the two-series forms (default: the ordinary b at the same rows)."""
    value_type = CASTS.get(cls, pa.float64())
    time_type = pa.float64() if cls == "inf_time" else pa.int64()
    if second is None:
        second = [None] if values == [None] else ordinary(BASE_B, cls)[: len(values)]
    return pa.table(
        {
            "g": [0] * len(values) + [1] * N,
            "t": pa.array(list(times) + TIMES, time_type),
            "v": pa.array(list(values) + ordinary(BASE_A, cls), value_type),
            "w": pa.array(list(second) + ordinary(BASE_B, cls), value_type),
        }
    )


def agg_rows(cls: str) -> pa.Table | None:
    """The rows of one ``*_agg`` input class; None for the class without rows at all."""
    if cls == "empty":
        return None
    if cls == "null_list":
        return agg_table([None], [None])
    a, _, times = list_case(cls)
    return agg_table(a, times, cls)


# --------------------------------------------------------------------------- #
# running a cell and reading its answer
# --------------------------------------------------------------------------- #


@pytest.fixture(scope="module")
def con():
    c = tsql.connect()
    yield c
    c.close()


def comparable(value):
    if isinstance(value, dict):
        return tuple((k, comparable(v)) for k, v in value.items())
    if isinstance(value, list | tuple):
        return tuple(comparable(v) for v in value)
    if isinstance(value, float) and math.isnan(value):
        return None
    return value


def outcome(value) -> str:
    """null | empty | value | partial | nonfinite, for one answer."""
    if value is None:
        return "null"
    if value == "" or value == []:
        return "empty"
    numbers, missing = [], False

    def walk(x):
        nonlocal missing
        if x is None:
            missing = True
        elif isinstance(x, dict):
            for v in x.values():
                walk(v)
        elif isinstance(x, list | tuple):
            for v in x:
                walk(v)
        elif isinstance(x, float):
            numbers.append(x)
        elif not isinstance(x, int | str | dt.date | dt.datetime | Decimal):
            raise AssertionError(f"unexpected answer part {x!r}")

    walk(value)
    if not all(math.isfinite(x) for x in numbers):
        return "nonfinite"
    return "partial" if missing else "value"


def assert_clean_error(error: BaseException, function: str) -> str:
    message = str(error)
    assert "Traceback" not in message and 'File "' not in message, message
    assert f"{function}: " in message, f"the error does not name {function}: {message}"
    return message


def run_list(con, fn: str, a, b, times, cls: str, swap: bool = False):
    """The answer of the case row (raises duckdb.Error), after checking the ordinary row was answered."""
    table = list_table(a, b, times, cls)
    if swap:
        table = table.rename_columns(["k", "b", "a", "times"])
    con.register("cell", table)
    try:
        rows = con.execute(f"SELECT k, {LIST_CALLS[fn]} FROM cell ORDER BY k").fetchall()
    finally:
        con.unregister("cell")
    assert rows[1][1] is not None, "the ordinary row beside the case was not answered"
    return rows[0][1]


def run_agg(con, fn: str, cls: str, table: pa.Table | None = None):
    table = agg_rows(cls) if table is None else table
    call = AGG_CALLS[fn]
    if table is None:  # no rows: a plain aggregate over an empty relation
        empty = {"g": pa.array([], pa.int64()), "t": pa.array([], pa.int64()), "v": [], "w": []}
        con.register("cell", pa.table(empty))
        try:
            return con.execute(f"SELECT {call} FROM cell").fetchall()[0][0]
        finally:
            con.unregister("cell")
    con.register("cell", table)
    try:
        rows = con.execute(f"SELECT g, {call} FROM cell GROUP BY g ORDER BY g").fetchall()
    finally:
        con.unregister("cell")
    assert [g for g, _ in rows] == [0, 1] and rows[1][1] is not None, "the ordinary group was not answered"
    return rows[0][1]


def rescaled(value, factor: float, fn: str, key: str | None = None):
    """An ordinary answer as it must come back for the series times ``factor``."""
    if isinstance(value, dict):
        return {k: rescaled(v, factor, fn, k) for k, v in value.items()}
    if isinstance(value, list):
        return [rescaled(v, factor, fn, key) for v in value]
    name = fn.removesuffix("_agg")
    linear = key in LINEAR_FIELDS or key in LINEAR_FIELDS_OF.get(name, ()) or (key is None and name in LINEAR)
    if isinstance(value, float) and linear:
        return value * factor
    return value


def assert_close(got, expected, rel: float = 1e-7) -> None:
    """Equal structure; floats equal to ``rel`` of their own size or of the answer's largest number."""
    scale = [0.0]

    def largest(x):
        if isinstance(x, dict):
            [largest(v) for v in x.values()]
        elif isinstance(x, list):
            [largest(v) for v in x]
        elif isinstance(x, float) and math.isfinite(x):
            scale[0] = max(scale[0], abs(x))

    largest(expected)

    def same(g, e, where):
        if isinstance(e, dict):
            assert isinstance(g, dict) and list(g) == list(e), where
            for k in e:
                same(g[k], e[k], f"{where}.{k}")
        elif isinstance(e, list):
            assert isinstance(g, list) and len(g) == len(e), where
            for i, (x, y) in enumerate(zip(g, e)):
                same(x, y, f"{where}[{i}]")
        elif isinstance(e, float):
            assert isinstance(g, float) and abs(g - e) <= rel * max(abs(e), scale[0]), (where, g, e)
        else:
            assert g == e, (where, g, e)

    same(got, expected, "answer")


# --------------------------------------------------------------------------- #
# the gaps between the page and the code today (each one is a bug report)
# --------------------------------------------------------------------------- #

_AGG_EMPTY = (
    "an aggregate over no rows fails the query: '<name>_agg: time must be DATE, TIMESTAMP, TIMESTAMPTZ "
    "or a number, got ' (typeof over no rows is NULL) instead of answering NULL"
)
_INF_TIME = (
    "an infinite time fails the whole query with 'negative dimensions are not allowed' (numpy's words) "
    "instead of a NULL row"
)
KNOWN = {}


def cells():
    for row in INPUTS:
        fn = row["function"]
        for cls in CLASSES:
            expected = row[cls]
            if expected == "-" or cls == "long":
                continue
            marks = [pytest.mark.xfail(strict=True, reason=KNOWN[(fn, cls)])] if (fn, cls) in KNOWN else []
            yield pytest.param(fn, cls, expected, id=f"{fn}-{cls}", marks=marks)


@pytest.mark.parametrize(("fn", "cls", "expected"), list(cells()))
def test_matrix_cell(con, fn, cls, expected):
    is_agg = fn.endswith("_agg")

    def answer(case_cls=cls, table=None, swap=False, override=None):
        if is_agg:
            return run_agg(con, fn, case_cls, table)
        a, b, times = override or list_case(case_cls)
        return run_list(con, fn, a, b, times, case_cls, swap)

    try:
        got = answer()
    except duckdb.Error as error:
        message = assert_clean_error(error, fn)
        assert expected == "error", f"expected {expected}, got the error {message}"
        return
    assert expected != "error", f"expected an error, got {got!r}"
    if expected == "echo":
        a, _, _ = list_case(cls)
        assert got == a
    else:
        assert outcome(got) == expected, got
    if fn in PAIRS:  # the bad input in the other position
        assert outcome(answer(swap=True)) == expected

    # what the answer must also equal
    if cls == "nan":
        a, b, times = list_case("nan")
        a[HOLE] = None
        if is_agg:
            reference = answer(table=agg_table(a, times))
        else:
            reference = answer("nan", override=(a, b, times))
        assert comparable(got) == comparable(reference)
    elif cls in SCALE:
        a, b, times = BASE_A.tolist(), BASE_B.tolist(), list(TIMES)
        if is_agg:
            plain = answer(table=agg_table(a, times))
        else:
            plain = answer("ordinary", override=(a, b, times))
        assert_close(got, rescaled(plain, SCALE[cls], fn), rel=1e-6)
    elif cls in CASTS:
        if is_agg:
            a, _, times = list_case(cls)
            b = [float(x) for x in ordinary(BASE_B, cls)]
            reference = answer(table=agg_table([float(x) for x in a], times, second=b))
        else:
            a, b, times = list_case(cls)
            reference = answer("ordinary", override=([float(x) for x in a], [float(x) for x in b], times))
        assert comparable(got) == comparable(reference)
    elif cls == "null_time":
        if is_agg:
            a, _, times = list_case("null_time")
            b = BASE_B.tolist()
            cut = (a[:HOLE] + a[HOLE + 1 :], times[:HOLE] + times[HOLE + 1 :])
            reference = answer(table=agg_table(*cut, second=b[:HOLE] + b[HOLE + 1 :]))
        else:
            a, b, times = list_case("null_time")
            reference = answer("ordinary", override=(a[:HOLE] + a[HOLE + 1 :], b, times[:HOLE] + times[HOLE + 1 :]))
        assert comparable(got) == comparable(reference)
    elif cls == "mismatched" and fn == "dtw_distance":
        assert got == pytest.approx(answer(swap=True), rel=1e-12)


# --------------------------------------------------------------------------- #
# no warning text reaches the user's terminal
# --------------------------------------------------------------------------- #

_WARNS = (
    "numpy RuntimeWarnings from the kernels reach the user's stderr with the kernel's file path and source line: {}"
)
WARNING_KNOWN: dict[str, str] = {}


@pytest.mark.parametrize(
    "fn",
    [
        pytest.param(f, marks=[pytest.mark.xfail(strict=True, reason=_WARNS.format(WARNING_KNOWN[f]))])
        if f in WARNING_KNOWN
        else f
        for f in PUBLIC
    ],
)
def test_no_warning_escapes(con, fn):
    row = next(r for r in INPUTS if r["function"] == fn)
    warned = []
    for cls in CLASSES:
        if row[cls] == "-" or cls == "long":
            continue
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                if fn.endswith("_agg"):
                    run_agg(con, fn, cls)
                else:
                    run_list(con, fn, *list_case(cls), cls)
            except duckdb.Error:
                pass
        warned += [f"{cls}: {w.category.__name__}: {w.message}" for w in caught]
    assert not warned


# --------------------------------------------------------------------------- #
# NULL arguments
# --------------------------------------------------------------------------- #

BY_NAME = {f.name: f for f in FUNCTIONS}
REQUIRED = {"period": "8", "band": "2"}  # values for arguments that have no default


def call_with(fn: str, target: str | None) -> str:
    """A call of ``fn`` setting ``target`` to NULL (None: leaving it out), required arguments given."""
    base = BY_NAME[fn.removesuffix("_agg")]
    params = base.agg_params if fn.endswith("_agg") else base.params
    args = (
        ["v", "w", "t"][-len(base.series) - 1 :]
        if fn.endswith("_agg")
        else list({"values": "a", "a": "a", "b": "b", "times": "times"}[s] for s in base.series)
    )
    for p in params:
        if p.default is None:
            args.append("NULL" if p.name == target else REQUIRED[p.name])
        elif p.name == target:
            args.append(f"{p.name} := NULL")
    return f"{fn}({', '.join(args)})"


@pytest.mark.parametrize(
    ("fn", "argument", "expected"),
    [(r["function"], r["argument"], r["NULL gives"]) for r in read_table("null-arguments")],
    ids=lambda x: str(x),
)
def test_null_argument(con, fn, argument, expected):
    def run(call):
        if fn.endswith("_agg"):
            con.register("cell", agg_table(BASE_A.tolist(), TIMES))
            query = f"SELECT g, {call} FROM cell GROUP BY g ORDER BY g"
        else:
            con.register("cell", list_table(BASE_A.tolist(), BASE_B.tolist(), TIMES, "ordinary"))
            query = f"SELECT k, {call} FROM cell ORDER BY k"
        try:
            return [r[1] for r in con.execute(query).fetchall()]
        finally:
            con.unregister("cell")

    got = run(call_with(fn, argument))
    if expected == "null":
        assert got == [None, None]
    else:
        assert expected == "default"
        unset = run(call_with(fn, None))
        assert unset[0] is not None and comparable(got) == comparable(unset)


# --------------------------------------------------------------------------- #
# arguments that make no sense
# --------------------------------------------------------------------------- #

ARGUMENT_KNOWN = {}


def argument_cases():
    for row in read_table("arguments"):
        call = row["call"]
        marks = [pytest.mark.xfail(strict=True, reason=ARGUMENT_KNOWN[call])] if call in ARGUMENT_KNOWN else []
        yield pytest.param(row["function"], call, row["message"], id=call, marks=marks)


@pytest.fixture(scope="module")
def argument_data(con):
    con.register(
        "lists_arrow",
        pa.table(
            {
                "x": pa.array([BASE_A.tolist()], pa.list_(pa.float64())),
                "y": pa.array([BASE_B.tolist()], pa.list_(pa.float64())),
                "times": pa.array([TIMES], pa.list_(pa.int64())),
            }
        ),
    )
    con.execute("CREATE OR REPLACE TEMP TABLE lists AS SELECT * FROM lists_arrow")
    con.register("obs_arrow", pa.table({"v": BASE_A, "t": pa.array(TIMES, pa.int64())}))
    con.execute("CREATE OR REPLACE TEMP TABLE obs AS SELECT v, t, DATE '2024-01-01' + t::INTEGER AS d FROM obs_arrow")


@pytest.mark.parametrize(("fn", "call", "message"), list(argument_cases()))
def test_argument(con, argument_data, fn, call, message):
    assert call.startswith(f"{fn}(")
    source = "obs" if fn.endswith("_agg") else "lists"
    if message in ("value", "null"):
        (got,) = con.execute(f"SELECT {call} FROM {source}").fetchall()[0]
        assert outcome(got) == message
        return
    pieces = message.split(" … ")
    assert pieces[0].startswith(f"{fn}: ")
    with pytest.raises(duckdb.Error) as error:
        con.execute(f"SELECT {call} FROM {source}").fetchall()
    text = assert_clean_error(error.value, fn)
    at = 0
    for piece in pieces:
        found = text.find(piece, at)
        assert found >= 0, f"{piece!r} not in {text!r}"
        at = found + len(piece)


# --------------------------------------------------------------------------- #
# long series: 3,000,000 points once per function (trend_test: 200,000), checked against the truth
# --------------------------------------------------------------------------- #

LONG = 3_000_000
LONG_TREND = 200_002  # n = 2 mod 4: an odd number of pairs, so Sen's slope is one pairwise slope
SEGMENT = 250  # the level series changes level every SEGMENT points


@pytest.fixture(scope="module")
def long_data(con):
    rng = np.random.default_rng(3_000_000)
    t = np.arange(LONG)
    p = np.sin(2 * np.pi * t / 24) + 0.5 * rng.standard_normal(LONG)  # a cycle of 24 in noise
    q = np.sin(2 * np.pi * (t + 3) / 24) + 0.5 * rng.standard_normal(LONG)
    c = 5.0 * ((t // SEGMENT) % 2) + rng.standard_normal(LONG)  # a level change every SEGMENT points
    tr = np.arange(LONG_TREND)
    r = (tr // 4000 + rng.integers(0, 30, LONG_TREND)).astype(np.float64)  # whole numbers, a slow trend
    kept = t[t % 1000 != 500]  # on_grid: every 1000th point has no row
    doubles, whole = pa.list_(pa.float64()), pa.list_(pa.int64())
    con.register(
        "long_lists",
        pa.table(
            {
                "p": pa.array([p], doubles),
                "q": pa.array([q], doubles),
                "c": pa.array([c], doubles),
                "r": pa.array([r], doubles),
                "s": pa.array([t.astype(np.float64)], doubles),
                "pgap": pa.array([p[kept]], doubles),
                "tgap": pa.array([kept], whole),
            }
        ),
    )
    con.register("long_rows_p", pa.table({"t": t + 1, "v": p}))  # row order: tests/test_concurrency.py
    con.register("long_rows_pq", pa.table({"t": t + 1, "v": p, "w": q}))  # the two-series *_agg forms
    con.register("long_rows_c", pa.table({"t": t + 1, "v": c}))
    con.register("long_rows_r", pa.table({"t": tr + 1, "v": r}))
    return {"p": p, "q": q, "c": c, "r": r, "t": t}


LONG_CALLS = {
    "dominant_period": ("dominant_period(p)", "long_lists"),
    "seasonality": ("seasonality(p)", "long_lists"),
    "autocorrelation": ("autocorrelation(p, lag := 24)", "long_lists"),
    "acf": ("acf(p, max_lag := 3)", "long_lists"),
    "ljung_box": ("ljung_box(p, max_lag := 3)", "long_lists"),
    "trend_test": ("trend_test(r)", "long_lists"),
    "change_points": ("change_points(c)", "long_lists"),
    "segments": ("segments(c)", "long_lists"),
    "change_points_path": ("change_points_path(c, max_changes := 3)", "long_lists"),
    "harmonic_smooth": ("harmonic_smooth(p, harmonics := 1, period := 24)", "long_lists"),
    "harmonic_profile": ("harmonic_profile(p, 24, harmonics := 1)", "long_lists"),
    "sparkline": ("sparkline(s, width := 80)", "long_lists"),
    "dtw_distance": ("dtw_distance(p, q, band := 0)", "long_lists"),
    "dtw_path": ("dtw_path(p, q, band := 1)", "long_lists"),
    "lb_keogh": ("lb_keogh(p, q, 4)", "long_lists"),
    "on_grid": ("on_grid(pgap, tgap)", "long_lists"),
    "dominant_period_agg": ("dominant_period_agg(v, t).number", "long_rows_p"),
    "seasonality_agg": ("seasonality_agg(v, t)", "long_rows_p"),
    "autocorrelation_agg": ("autocorrelation_agg(v, t, lag := 24)", "long_rows_p"),
    "acf_agg": ("acf_agg(v, t, max_lag := 3)", "long_rows_p"),
    "ljung_box_agg": ("ljung_box_agg(v, t, max_lag := 3)", "long_rows_p"),
    "trend_test_agg": ("trend_test_agg(v, t)", "long_rows_r"),
    "change_points_agg": ("change_points_agg(v, t)", "long_rows_c"),
    "segments_agg": ("segments_agg(v, t)", "long_rows_c"),
    "harmonic_smooth_agg": (
        "list_transform(harmonic_smooth_agg(v, t, harmonics := 1, period := 24), lambda r: r.value)",
        "long_rows_p",
    ),
    "harmonic_profile_agg": ("harmonic_profile_agg(v, t, 24, harmonics := 1)", "long_rows_p"),
}
# STL, the unit-root tests and periods: 200,000 points (as trend_test), a few seconds each
LONG_SCREEN = 200_000
_SHORT_P, _SHORT_ROWS = f"p[1:{LONG_SCREEN}]", f"long_rows_p WHERE t <= {LONG_SCREEN}"
LONG_CALLS |= {
    "stl_decompose": (f"stl_decompose({_SHORT_P}, 24).seasonal[1:48]", "long_lists"),
    "stl_decompose_agg": ("list_transform(stl_decompose_agg(v, t, 24)[1:48], lambda r: r.seasonal)", _SHORT_ROWS),
    "stl_strength": (f"stl_strength({_SHORT_P})", "long_lists"),
    "stl_strength_agg": ("stl_strength_agg(v, t)", _SHORT_ROWS),
    "periods": (f"periods({_SHORT_P})", "long_lists"),
    "periods_agg": ("periods_agg(v, t)", _SHORT_ROWS),
    "adf_test": (f"adf_test({_SHORT_P}, max_lag := 2)", "long_lists"),
    "adf_test_agg": ("adf_test_agg(v, t, max_lag := 2)", _SHORT_ROWS),
    "kpss_test": (f"kpss_test({_SHORT_P})", "long_lists"),
    "kpss_test_agg": ("kpss_test_agg(v, t)", _SHORT_ROWS),
}
# screen: 20,000 points (its ADF tries 45 lags, as adfuller's default would), the fields against the kernels alone
LONG_PROFILE = 20_000
LONG_CALLS |= {
    "screen": (f"screen(p[1:{LONG_PROFILE}])", "long_lists"),
    "screen_agg": ("screen_agg(v, t)", f"long_rows_p WHERE t <= {LONG_PROFILE}"),
}
BIG_ANSWERS = {"harmonic_smooth", "harmonic_smooth_agg", "dtw_path", "on_grid"}


def direct_acf(x: np.ndarray, lags: int) -> np.ndarray:
    """The standard (biased) sample ACF written out (Box & Jenkins)."""
    xc = x - x.mean()
    return np.array([xc[:-k] @ xc[k:] for k in range(1, lags + 1)]) / (xc @ xc)


def strict_inversions(z: np.ndarray) -> int:
    """Pairs i < j with z[j] < z[i], by a bottom-up merge count (exact integers)."""
    a = np.unique(z, return_inverse=True)[1].astype(np.int64)
    n, span = len(a), len(a) + 1
    position = np.arange(n)
    total, width = 0, 1
    while width < n:
        block = position // (2 * width)
        right = (position // width) % 2 == 1
        left_keys = block[~right] * span + a[~right]  # sorted: each left half was sorted at the level before
        right_keys = block[right] * span + a[right]
        at_most = np.searchsorted(left_keys, right_keys, side="right")
        block_start = np.searchsorted(left_keys, block[right] * span, side="left")
        left_size = np.bincount(block[~right], minlength=block[-1] + 1)[block[right]]
        total += int((left_size - (at_most - block_start)).sum())
        a = np.sort(block * span + a) - block * span
        width *= 2
    return total


def assert_exact_sen_slope(y: np.ndarray, slope: float) -> None:
    """``slope`` is exactly the median pairwise slope of whole-number ``y`` at times 0, 1, ...

    The median of an odd number of slopes is one of them, a fraction p/q with q < n; it is
    recovered from the double and checked by counting, in integers, the slopes below and at it.
    """
    n = len(y)
    pairs = n * (n - 1) // 2
    assert pairs % 2 == 1
    median = Fraction(slope).limit_denominator(n)
    assert median.numerator / median.denominator == slope
    z = median.denominator * y.astype(np.int64) - median.numerator * np.arange(n, dtype=np.int64)
    below = strict_inversions(z)  # slope(i, j) < p/q  <=>  z[j] < z[i]
    _, counts = np.unique(z, return_counts=True)
    at = int((counts * (counts - 1) // 2).sum())  # slope(i, j) == p/q
    k = (pairs + 1) // 2
    assert below < k <= below + at


def long_call(fn: str) -> tuple[str, str]:
    """The call of the long class: from LONG_CALLS, else with the registry's first test arguments."""
    if fn in LONG_CALLS:
        return LONG_CALLS[fn]
    entry = BY_NAME[fn.removesuffix("_agg")]
    args = f", {entry.test_args[0]}" if entry.test_args[0] else ""
    if fn.endswith("_agg") and len(entry.series) == 2:
        return f"{entry.name}_agg(v, w, t{args})", "long_rows_pq"
    if fn.endswith("_agg"):
        return f"{entry.name}_agg(v, t{args})", "long_rows_p"
    return f"{entry.name}({', '.join('pq'[: len(entry.series)])}{args})", "long_lists"


def long_answer(con, fn: str):
    call, source = long_call(fn)
    query = f"SELECT {call} FROM {source}"
    if fn in BIG_ANSWERS:
        column = con.sql(query).to_arrow_table().column(0).combine_chunks()
        assert column.null_count == 0
        return column.flatten()
    return con.execute(query).fetchall()[0][0]


def long_outcome(value) -> str:
    if isinstance(value, pa.Array):
        leaves = [value.field(i) for i in range(value.type.num_fields)] if pa.types.is_struct(value.type) else [value]
        if any(leaf.null_count for leaf in leaves):
            return "partial"
        numbers = [leaf.to_numpy() for leaf in leaves]
        return "value" if all(np.isfinite(x).all() for x in numbers) else "nonfinite"
    return outcome(value)


def check_long(con, fn: str, got, data: dict) -> None:
    p, q, r = data["p"], data["q"], data["r"]
    name = fn.removesuffix("_agg")
    planted = list(range(SEGMENT + 1, LONG + 1, SEGMENT))  # 1-based first element of each new level
    if name == "dominant_period":
        assert got == pytest.approx(24, abs=0.01)
    elif name == "screen":
        x = Ragged.from_list([p[:LONG_PROFILE]])
        alone = {
            "period": seasonality(x)["period"],
            "trend_tau": trend_test(x)["tau"],
            "autocorrelation": autocorrelation(x),
            "adf_p_value": adf_test(x)["p_value"],
            "changes": change_points(x).lengths,
        }
        assert got["points"] == LONG_PROFILE and got["missing"] == got["merged"] == 0
        assert {n: got[n] for n in alone} == {n: float(v[0]) for n, v in alone.items()}
        assert got["period"] == pytest.approx(24, abs=0.01)
    elif name == "seasonality":
        assert got["period"] == pytest.approx(24, abs=0.01)
        assert got["p_value"] < 1e-10
        assert got["strength"] == pytest.approx(0.5 / (0.5 + 0.25), abs=0.01)  # cycle variance over total
    elif name == "autocorrelation":
        assert got == pytest.approx(direct_acf(p, 24)[-1], rel=1e-9)
    elif name == "acf":
        np.testing.assert_allclose(got, direct_acf(p, 3), rtol=1e-9)
    elif name == "ljung_box":
        rk = direct_acf(p, 3)
        q_stat = LONG * (LONG + 2) * np.sum(rk**2 / (LONG - np.arange(1, 4)))  # Ljung & Box (1978)
        assert got["q"] == pytest.approx(q_stat, rel=1e-9)
        assert got["p_value"] == pytest.approx(stats.chi2.sf(q_stat, 3), abs=1e-12)
    elif name == "trend_test":
        assert_exact_sen_slope(r, got["slope"])
        # reference: scipy.stats.kendalltau (tau-b)
        assert got["tau"] == pytest.approx(stats.kendalltau(np.arange(len(r)), r).statistic, rel=1e-9)
        assert 0 <= got["p_value"] <= 1
    elif name == "change_points":
        assert len(got) == len(planted)
        assert max(abs(a - b) for a, b in zip(got, planted)) <= 3
    elif name == "change_points_path":
        # the path's programme is quadratic in the length: a row of more than MAX_PROGRAMME present values
        # has none (documented), one of MAX_PROGRAMME has one, and the first 1,000 values give the planted shifts
        assert got is None
        around = [f"change_points_path(list_slice(c, 1, {n}), max_changes := 3)" for n in (MAX_PROGRAMME, 1000)]
        at_limit, head = con.execute(f"SELECT {', '.join(around)} FROM long_lists").fetchall()[0]
        assert at_limit is not None and [r["changes"] for r in at_limit][-1] == 3
        assert head[-1]["changes"] == 3 and max(abs(a - b) for a, b in zip(head[-1]["positions"], planted)) <= 3
        over = con.execute(f"SELECT change_points_path(list_slice(c, 1, {MAX_PROGRAMME + 1})) FROM long_lists")
        assert over.fetchall()[0][0] is None
    elif name == "segments":
        assert len(got) == len(planted) + 1
        assert got[0]["first"] == 1 and got[-1]["last"] == LONG
        assert all(s["last"] + 1 == n["first"] for s, n in zip(got, got[1:]))
        assert all(abs(s["mean"] - 5.0 * (k % 2)) < 0.3 for k, s in enumerate(got))
    elif name == "harmonic_smooth":
        x = np.arange(LONG) / LONG
        w = 2 * np.pi * np.arange(LONG) / 24
        design = np.column_stack([np.ones(LONG), x, np.cos(w), np.sin(w)])
        fitted = design @ np.linalg.lstsq(design, p, rcond=None)[0]  # reference: numpy least squares
        assert np.abs(got.to_numpy() - fitted).max() < 1e-9
    elif name == "harmonic_profile":
        # the planted cycle; the *_agg form's times are 1, 2, ... and its phase 0 is at time 0, a step earlier
        expected = p.mean() + np.sin(2 * np.pi * (np.arange(24) - fn.endswith("_agg")) / 24)
        np.testing.assert_allclose(got, expected, atol=0.01)
    elif name == "sparkline":
        # bin k of the ramp 0..n-1 has mean (k + 0.5) n / 80 - 0.5: level floor(8 k / 79), the top one capped
        assert got == "".join(BLOCKS[min(8 * k // 79, 7)] for k in range(80))
    elif name == "dtw_distance":
        euclid = float(np.sqrt(((p - q) ** 2).sum()))
        assert got == pytest.approx(euclid, rel=1e-9)  # band 0 on equal lengths: the diagonal path only
        banded, bound = con.execute(
            "SELECT dtw_distance(p, q, band := 4), lb_keogh(p, q, 4) FROM long_lists"
        ).fetchall()[0]
        assert bound <= banded <= euclid
    elif name == "lb_keogh":
        euclid = float(np.sqrt(((p - q) ** 2).sum()))
        assert 0 < got <= euclid
        (tight,) = con.execute("SELECT lb_keogh(p, q, 0) FROM long_lists").fetchall()[0]
        assert tight == pytest.approx(euclid, rel=1e-9)  # band 0: the envelope is q itself
    elif name == "dtw_path":
        i, j = got.field("i").to_numpy(), got.field("j").to_numpy()
        assert (i[0], j[0], i[-1], j[-1]) == (1, 1, LONG, LONG)
        di, dj = np.diff(i), np.diff(j)
        assert set(zip(di.tolist(), dj.tolist())) <= {(1, 0), (0, 1), (1, 1)}
        assert np.abs(i - j).max() <= 1
        (distance,) = con.execute("SELECT dtw_distance(p, q, band := 1) FROM long_lists").fetchall()[0]
        assert math.sqrt(((p[i - 1] - q[j - 1]) ** 2).sum()) == pytest.approx(distance, rel=1e-9)
    elif name == "on_grid":
        values = got.to_numpy(zero_copy_only=False)
        assert len(values) == LONG
        missing = np.isnan(values)
        assert np.array_equal(np.flatnonzero(missing), np.arange(500, LONG, 1000))
        assert np.array_equal(values[~missing], p[~missing])
    elif name == "stl_decompose":
        expected = stl_decompose(Ragged.from_list([p[:LONG_SCREEN]]), period=24)["seasonal"].values[:48]
        np.testing.assert_allclose(got, expected, rtol=1e-12, atol=0)  # the kernel alone on the same values
    elif name == "stl_strength":
        assert got["period"] == 24  # the planted cycle; no trend was planted
        assert got["seasonal"] > 0.6 and got["trend"] < 0.2
    elif name == "periods":
        assert len(got) == 3
        assert got[0]["period"] == pytest.approx(24, abs=0.01)
        assert got[0]["p_value"] < 1e-10
        assert got[0]["strength"] == pytest.approx(0.5 / (0.5 + 0.25), abs=0.01)  # cycle variance over total
    elif name == "adf_test":
        assert got["p_value"] < 1e-6 and got["used_lag"] in (0, 1, 2)  # a cycle in noise does not wander
    elif name == "kpss_test":
        # below the 10 % critical value 0.347 (Kwiatkowski et al. 1992, Table 1): p at its upper bound
        assert got["statistic"] < 0.347 and got["p_value"] == 0.1
    elif name in ("cross_correlation", "lead_lag"):
        # reference: Box & Jenkins (1976) ch. 11 written out with numpy, r(h) pairs p[t] with q[t + h]
        dp, dq = p - p.mean(), q - q.mean()
        scale = math.sqrt((dp**2).sum() * (dq**2).sum())
        lags = np.arange(-3, 4)
        direct = np.array([(dp[max(0, -h) : LONG - max(0, h)] * dq[max(0, h) : LONG - max(0, -h)]).sum() for h in lags])
        direct /= scale
        if name == "cross_correlation":
            np.testing.assert_allclose(got, direct, rtol=1e-9, atol=1e-12)
        else:
            best = int(np.argmax(np.abs(direct)))
            assert got["lag"] == lags[best] and got["correlation"] == pytest.approx(direct[best], rel=1e-9)
    else:  # no check of its own: the kernel called directly on the series, as in its kernel tests
        entry = BY_NAME[name]
        kwargs = settings(entry, entry.test_args[0])[1]
        expected = entry.kernel(*(Ragged.from_list([x]) for x in (p, q)[: len(entry.series)]), **kwargs)
        assert isinstance(expected, np.ndarray), f"no long check for {fn}"
        assert got == pytest.approx(float(expected[0]), rel=1e-12)


@pytest.mark.parametrize("fn", [r["function"] for r in INPUTS if r["long"] != "-"])
def test_long_series(con, long_data, fn):
    expected = next(r for r in INPUTS if r["function"] == fn)["long"]
    got = long_answer(con, fn)
    assert long_outcome(got) == expected
    check_long(con, fn, got, long_data)


def test_sen_slope_equals_scipy_on_a_few_thousand_points(con):
    rng = np.random.default_rng(3000)
    x = np.cumsum(rng.standard_normal(3000)) + 0.01 * np.arange(3000)
    x[rng.random(3000) < 0.05] = np.nan  # missing points keep their place in time
    got = con.execute("SELECT trend_test($x::DOUBLE[])", {"x": [None if np.isnan(v) else v for v in x]}).fetchall()
    t = np.flatnonzero(~np.isnan(x)).astype(np.float64)
    # reference: scipy.stats.theilslopes (Sen 1968) and scipy.stats.kendalltau (tau-b)
    assert got[0][0]["slope"] == pytest.approx(stats.theilslopes(x[~np.isnan(x)], t).slope, rel=1e-12)
    assert got[0][0]["tau"] == pytest.approx(stats.kendalltau(t, x[~np.isnan(x)]).statistic, rel=1e-12)


_ONE_CHANGE = """
import numpy as np, pyarrow as pa, tsql
n = 1_000_000
rng = np.random.default_rng(1)
x = rng.standard_normal(n) + 1.0 * (np.arange(n) >= n // 2)
con = tsql.connect()
con.execute("SET enable_progress_bar = false")  # a slow machine would print one into stdout
con.register("big", pa.table({"a": pa.array([x], pa.list_(pa.float64()))}))
print(con.execute("SELECT change_points(a) FROM big").fetchall()[0][0])
"""


def test_a_long_series_with_one_change_finishes():
    # a hang guard, not a speed test: the search for 'mean' prunes functionally (FPOP), so one long
    # segment no longer keeps every candidate start and this answers well within the timeout; plain
    # PELT ran for minutes here; the bound is loose because a loaded 2-core machine can be several times slower
    try:
        done = subprocess.run([sys.executable, "-c", _ONE_CHANGE], capture_output=True, text=True, timeout=60)
    except subprocess.TimeoutExpired:
        pytest.fail("change_points on 1,000,000 points with one change did not finish within 60 s")
    assert done.returncode == 0, done.stderr
    (found,) = eval(done.stdout)  # a one-element list of positions
    assert abs(found - 500_001) <= 50


@pytest.mark.parametrize(
    "scale",
    [
        1e-150,
        1e150,
        1e-300,
        1e300,
    ],
)
def test_normalized_dtw_does_not_see_the_scale(con, scale):
    a, b = BASE_A.tolist(), BASE_B.tolist()
    query = "SELECT dtw_distance($a::DOUBLE[], $b::DOUBLE[], normalize := true)"
    (plain,) = con.execute(query, {"a": a, "b": b}).fetchall()[0]
    (scaled,) = con.execute(query, {"a": [x * scale for x in a], "b": [x * scale for x in b]}).fetchall()[0]
    assert plain > 0 and scaled == pytest.approx(plain, rel=1e-9)


# --------------------------------------------------------------------------- #
# nothing of the user's touched; tests/test_sql.py covers a read-only file queried with one *_agg form and
# a new file left without tsql objects, tests/test_run.py --out overwriting and --param values as values
# --------------------------------------------------------------------------- #


def make_warehouse(path: Path) -> str:
    """A user's database file with a table, a view and a macro of their own; its bytes' digest."""
    with duckdb.connect(str(path)) as setup:
        setup.execute(
            "CREATE TABLE sales AS SELECT i % 5 AS item, i // 5 AS month, (i % 12) * 1.5 + i % 7 AS units "
            "FROM range(600) r(i)"
        )
        setup.execute("CREATE VIEW big_sales AS SELECT * FROM sales WHERE units > 10")
        setup.execute("CREATE MACRO doubled(x) AS 2 * x")
    return hashlib.sha256(path.read_bytes()).hexdigest()


def catalog(con) -> list:
    return [
        con.execute(q).fetchall()
        for q in (
            "SELECT database_name, schema_name, function_name FROM duckdb_functions() "
            "WHERE database_name NOT IN ('system', 'temp') ORDER BY ALL",
            "SELECT database_name, table_name FROM duckdb_tables() ORDER BY ALL",
            "SELECT database_name, view_name FROM duckdb_views() WHERE NOT internal ORDER BY ALL",
        )
    ]


USER_QUERIES = [
    "SELECT item, dominant_period_agg(units, month), seasonality_agg(units, month),"
    " acf_agg(units, month, max_lag := 3), change_points_agg(units, month), segments_agg(units, month),"
    " harmonic_smooth_agg(units, month), harmonic_profile_agg(units, month, 12), trend_test_agg(units, month),"
    " ljung_box_agg(units, month, max_lag := 3), autocorrelation_agg(units, month) FROM sales GROUP BY item",
    "WITH s AS (SELECT item, list(units ORDER BY month) c FROM sales GROUP BY item)"
    " SELECT a.item, b.item, dtw_distance(a.c, b.c), dtw_path(a.c, b.c, band := 2), lb_keogh(a.c, b.c, 2),"
    " sparkline(a.c), on_grid(a.c, range(len(a.c))) FROM s a, s b",
]


@pytest.mark.parametrize("read_only", [False, True])
def test_registering_on_a_users_file_changes_neither_its_bytes_nor_its_catalog(tmp_path, read_only):
    path = tmp_path / "warehouse.duckdb"
    digest = make_warehouse(path)
    with duckdb.connect(str(path), read_only=True) as plain:
        listed = catalog(plain)
    con = duckdb.connect(str(path), read_only=read_only)
    tsql.register(con)
    cursor = tsql.register(con.cursor())
    for query in USER_QUERIES:
        assert con.execute(query).fetchall() and cursor.execute(query).fetchall()
    for fn in FUNCTIONS:
        assert con.execute(fn.example).fetchall()[0][0] is not None
    assert con.execute("SELECT doubled(21)").fetchall() == [(42,)]  # the user's own macro still answers
    cursor.close()
    con.close()
    assert hashlib.sha256(path.read_bytes()).hexdigest() == digest
    assert [p.name for p in tmp_path.iterdir()] == ["warehouse.duckdb"]  # no write-ahead log left behind
    with duckdb.connect(str(path), read_only=True) as plain:
        assert catalog(plain) == listed


@pytest.fixture
def workdir(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    return tmp_path


def test_tsql_run_reads_a_database_without_changing_it_even_when_a_statement_fails(workdir, capsys):
    path = workdir / "warehouse.duckdb"
    digest = make_warehouse(path)
    (workdir / "report.sql").write_text(
        "SELECT item, seasonality_agg(units, month).period AS period FROM sales GROUP BY item ORDER BY item;\n"
    )
    (workdir / "broken.sql").write_text("SELECT acf(list(units), max_lag := 0) FROM sales;\n")
    assert main(["run", "report.sql", "--db", str(path)]) == 0
    assert main(["run", "broken.sql", "--db", str(path)]) == 1
    err = capsys.readouterr().err
    assert "acf: max_lag must be >= 1, got 0" in err and "Traceback" not in err
    assert hashlib.sha256(path.read_bytes()).hexdigest() == digest
    assert sorted(p.name for p in workdir.iterdir()) == ["broken.sql", "report.sql", "warehouse.duckdb"]


def test_tsql_run_leaves_a_file_that_is_not_a_database_alone(workdir, capsys):
    notes = workdir / "notes.db"
    notes.write_text("item,units\nbun,5\n")
    (workdir / "a.sql").write_text("CREATE TABLE t AS SELECT 1 AS x;\n")
    assert main(["run", "a.sql", "--db", str(notes)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("seriesql run: ") and err.count("\n") == 1 and "not a valid DuckDB database" in err
    assert notes.read_text() == "item,units\nbun,5\n"


def test_a_param_name_cannot_carry_sql(workdir, capsys):
    (workdir / "a.sql").write_text("CREATE TABLE t AS SELECT 1 AS x;\n")
    assert main(["run", "a.sql", "--db", "shop.duckdb", "--param", "x; DROP TABLE t; --=1"]) == 2
    assert "--param wants NAME=VALUE with NAME a plain identifier" in capsys.readouterr().err
    assert not (workdir / "shop.duckdb").exists()  # stopped before anything ran


def test_a_param_inside_a_function_argument_stays_a_value(workdir, capsys):
    path = workdir / "warehouse.duckdb"
    digest = make_warehouse(path)
    (workdir / "a.sql").write_text("SELECT acf(list(units ORDER BY month), max_lag := $lags) AS r FROM sales;\n")
    hostile = "1) AS r FROM sales; DROP TABLE sales; SELECT (1"
    assert main(["run", "a.sql", "--db", str(path), "--param", f"lags={hostile}"]) == 1
    assert "Could not convert string" in capsys.readouterr().err
    assert main(["run", "a.sql", "--db", str(path), "--param", "lags=2"]) == 0
    assert hashlib.sha256(path.read_bytes()).hexdigest() == digest
