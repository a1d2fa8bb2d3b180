"""Same answers everywhere: row order, batch boundaries, thread counts, Python threads on cursors, interrupt.

``tests/test_sql.py`` checks GROUP BY against each series alone for the list forms, one function under
1 and 2 threads, and batch splits of the list-form UDFs. This file covers the rest: every list form,
every ``*_agg`` form and the pair functions in one run, compared bit for bit across row orders of the
table and thread counts; several Python threads, each on its own cursor of one connection, running the
same heavy query at once; cursors and ``register``; and interrupting a long DTW self-join.
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
import threading
import time

import duckdb
import numpy as np
import pyarrow as pa
import pytest

import tsql
from tsql.registry import FUNCTIONS

pytestmark = pytest.mark.filterwarnings("ignore::RuntimeWarning")

LIST_FORMS = [
    "dominant_period(x, min_period := 3)",
    "seasonality(x)",
    "autocorrelation(x, lag := 2)",
    "acf(x, max_lag := 5)",
    "ljung_box(x, lags := 4)",
    "trend_test(x)",
    "change_points(x, model := 'meanvar', penalty := 8, min_size := 3)",
    "segments(x, penalty := 'mbic')",
    "harmonic_smooth(x, harmonics := 2, period := 7)",
    "harmonic_profile(x, 6, harmonics := 2)",
    "sparkline(x, width := 12)",
    "on_grid(x, ts)",
]
AGG_FORMS = [
    "dominant_period_agg(v, t)",
    "seasonality_agg(v, t, min_period := 3)",
    "autocorrelation_agg(v, t, lag := 2)",
    "acf_agg(v, t, max_lag := 5)",
    "ljung_box_agg(v, t, lags := 4)",
    "trend_test_agg(v, t)",
    "change_points_agg(v, t)",
    "segments_agg(v, t, model := 'trend', min_size := 3)",
    "harmonic_smooth_agg(v, t, harmonics := 2)",
    "harmonic_profile_agg(v, t, 6, harmonics := 2)",
]
PAIR_FORMS = [
    "dtw_distance(a.x, b.x)",
    "dtw_distance(a.x, b.x, band := 3, normalize := true)",
    "dtw_distance(a.x, b.x, cutoff := 8)",
    "dtw_path(a.x, b.x, band := 2)",
    "lb_keogh(a.x, b.x, 3)",
]
GROUPS = 2600  # more than one vector (2,048 rows) of groups: batch boundaries fall differently


def test_every_function_is_in_the_runs():
    called = {c.split("(")[0] for c in LIST_FORMS + AGG_FORMS + PAIR_FORMS}
    assert called == {f.name for f in FUNCTIONS} | {f"{f.name}_agg" for f in FUNCTIONS if f.aggregate}


@pytest.fixture(scope="module")
def rows() -> pa.Table:
    """2,600 invented series of 1-70 points: cycles, trends, shifts, gaps (missing times), NULLs, NaNs,
    constants; in time order."""
    rng = np.random.default_rng(77)
    lengths = rng.integers(1, 70, GROUPS)
    g = np.repeat(np.arange(GROUPS), lengths)
    position = np.concatenate([np.arange(n) for n in lengths])
    t = position + np.cumsum(rng.random(len(g)) < 0.05)  # some times skipped: gaps on the grid
    cycle = np.sin(2 * np.pi * position / rng.uniform(3, 25, GROUPS)[g])
    v = (
        cycle
        + 0.4 * rng.standard_normal(len(g))
        + 0.02 * position * (g % 4 == 0)
        + 3.0 * (position > 30) * (g % 5 == 1)
    )
    v[g % 97 == 3] = 2.5  # constant series
    v[rng.random(len(v)) < 0.01] = np.nan
    null = rng.random(len(v)) < 0.02
    return pa.table({"g": g, "t": t, "v": pa.array(v, mask=null)})


def list_query(table: str) -> str:
    forms = ", ".join(LIST_FORMS)
    return f"""WITH s AS (SELECT g, list(v ORDER BY t) AS x, list(t ORDER BY t) AS ts FROM {table} GROUP BY g)
               SELECT g, {forms} FROM s ORDER BY g"""


def agg_query(table: str) -> str:
    return f"SELECT g, {', '.join(AGG_FORMS)} FROM {table} GROUP BY g ORDER BY g"


def pair_query(table: str) -> str:
    return f"""WITH s AS (SELECT g, list(v ORDER BY t) AS x FROM {table} WHERE g % 25 = 0 GROUP BY g)
               SELECT a.g, b.g, {", ".join(PAIR_FORMS)} FROM s a JOIN s b ON a.g < b.g ORDER BY a.g, b.g"""


def answers(con, table: str) -> list:
    return [con.execute(q(table)).fetchall() for q in (list_query, agg_query, pair_query)]


@pytest.fixture(scope="module")
def reference(rows):
    """Every answer with one thread, rows in time order."""
    con = tsql.connect(config={"threads": 1})
    con.register("data", rows)
    got = answers(con, "data")
    con.close()
    return got


@pytest.mark.parametrize("order", ["shuffled", "two pieces"])
def test_row_order_and_threads_do_not_change_any_answer(rows, reference, order):
    rng = np.random.default_rng(5)
    if order == "shuffled":
        table = rows.take(pa.array(rng.permutation(rows.num_rows)))
    else:  # two separately scanned halves, odd rows first: other vectors, other batch boundaries
        table = pa.concat_tables(
            [rows.take(pa.array(np.arange(1, rows.num_rows, 2))), rows.take(pa.array(np.arange(0, rows.num_rows, 2)))]
        )
    con = tsql.connect(config={"threads": 2})
    con.register("data", table)
    got = answers(con, "data")
    con.close()
    for mine, theirs, what in zip(got, reference, ("list forms", "aggregate forms", "pairs")):
        assert len(mine) == len(theirs) > 0, what
        for a, b in zip(mine, theirs):
            assert a == b, (what, a[0])
    assert sum(r[1] is not None for r in got[0]) > GROUPS // 2  # most series have an answer


def test_a_group_alone_answers_as_in_the_full_run(rows, reference):
    # each group by itself is alone in its vector: its answers cannot depend on batch neighbours
    con = tsql.connect()
    con.register("data", rows)
    picked = [0, 3, 97 * 3 + 3, 400, 777, 2100, GROUPS - 1]
    by_group = [{r[0]: r for r in part} for part in reference[:2]]
    for g in picked:
        con.execute(f"CREATE OR REPLACE TEMP VIEW one AS SELECT * FROM data WHERE g = {g}")
        alone = [con.execute(list_query("one")).fetchall(), con.execute(agg_query("one")).fetchall()]
        assert alone[0] == [by_group[0][g]] and alone[1] == [by_group[1][g]], g
    con.close()


# --------------------------------------------------------------------------- #
# several Python threads, one connection, a cursor each
# --------------------------------------------------------------------------- #


def test_threads_on_their_own_cursors_agree(rows, reference):
    con = tsql.connect(config={"threads": 2})
    con.register("data_arrow", rows)
    con.execute("CREATE TABLE data AS SELECT * FROM data_arrow")  # a registered view is per cursor; a table is not
    workers = 3
    start = threading.Barrier(workers)
    results: dict[int, list] = {}
    failures: list[BaseException] = []

    def work(k: int) -> None:
        try:
            cursor = tsql.register(con.cursor())
            start.wait()
            results[k] = answers(cursor, "data")
            cursor.close()
        except BaseException as error:  # reported below, in the test's own thread
            failures.append(error)

    threads = [threading.Thread(target=work, args=(k,)) for k in range(workers)]
    for th in threads:
        th.start()
    for th in threads:
        th.join(timeout=300)
    assert not any(th.is_alive() for th in threads)
    assert not failures, failures
    assert all(results[k] == reference for k in range(workers))
    # and the connection itself is still fine
    assert con.execute("SELECT count(*) FROM data").fetchall()[0][0] == rows.num_rows
    con.close()


# --------------------------------------------------------------------------- #
# cursors and register()
# --------------------------------------------------------------------------- #


def test_register_on_a_cursor_gives_every_function_and_is_idempotent():
    con = tsql.connect()
    cursor = con.cursor()
    tsql.register(cursor)
    first = [cursor.execute(f.example).fetchall() for f in FUNCTIONS]
    assert all(r[0][0] is not None for r in first)
    tsql.register(cursor)  # again: harmless, same answers
    assert [cursor.execute(f.example).fetchall() for f in FUNCTIONS] == first
    assert [con.execute(f.example).fetchall() for f in FUNCTIONS] == first  # the connection is untouched
    other = con.cursor()  # each cursor needs its own register
    with pytest.raises(duckdb.CatalogException):
        other.execute(FUNCTIONS[0].example)
    con.close()


def test_cursors_registered_from_several_threads_at_once():
    con = tsql.connect()
    workers = 4
    start = threading.Barrier(workers)
    got, failures = {}, []

    def work(k):
        try:
            cursor = con.cursor()
            start.wait()
            tsql.register(cursor)
            got[k] = cursor.execute("SELECT acf([1, 3, 2, 5, 4, 6, 5, 8], max_lag := 3)").fetchall()
        except BaseException as error:
            failures.append(error)

    threads = [threading.Thread(target=work, args=(k,)) for k in range(workers)]
    for th in threads:
        th.start()
    for th in threads:
        th.join(timeout=60)
    assert not failures, failures
    assert len({str(v) for v in got.values()}) == 1 and len(got) == workers
    con.close()


@pytest.mark.xfail(
    strict=True,
    reason="on a cursor without register() the user gets DuckDB's 'Scalar Function with name acf does not "
    'exist! Did you mean "acos"?\', with no word about tsql.register(cursor)',
)
def test_the_error_on_an_unregistered_cursor_says_what_to_do():
    con = tsql.connect()
    cursor = con.cursor()
    with pytest.raises(duckdb.CatalogException) as error:
        cursor.execute("SELECT acf([1, 2, 3, 1, 2, 3])").fetchall()
    con.close()
    assert "register" in str(error.value)


# --------------------------------------------------------------------------- #
# interrupt
# --------------------------------------------------------------------------- #


def run_and_interrupt(con, query: str, after: float, wait: float) -> tuple[str, float]:
    """Start ``query`` in a thread, interrupt the connection after ``after`` s; what happened and when."""
    outcome: dict[str, str] = {}

    def work():
        try:
            con.execute(query).fetchall()
            outcome["result"] = "finished"
        except duckdb.InterruptException:
            outcome["result"] = "interrupted"
        except duckdb.Error as error:
            outcome["result"] = f"error: {error}"

    th = threading.Thread(target=work)
    th.start()
    time.sleep(after)
    asked = time.monotonic()
    con.interrupt()
    th.join(timeout=wait)
    return outcome.get("result", "still running"), time.monotonic() - asked


def test_a_long_dtw_self_join_can_be_interrupted_and_the_connection_goes_on():
    # 300 series of 500 points: 44,850 pairs, tens of seconds of work
    con = tsql.connect()
    rng = np.random.default_rng(11)
    walks = np.cumsum(rng.standard_normal((300, 500)), axis=1)
    con.register("curves", pa.table({"k": np.arange(300), "c": pa.array(list(walks), pa.list_(pa.float64()))}))
    con.execute("SELECT dtw_distance([1.0, 2.0], [1.0, 3.0])").fetchall()  # compiled (or cache loaded) first
    what, latency = run_and_interrupt(
        con, "SELECT sum(dtw_distance(a.c, b.c)) FROM curves a JOIN curves b ON a.k < b.k", after=1.0, wait=30
    )
    assert what == "interrupted"
    assert latency < 5  # the "within a few seconds"
    # the same connection answers again, and correctly
    (d,) = con.execute("SELECT dtw_distance(a.c, b.c) FROM curves a, curves b WHERE a.k = 0 AND b.k = 1").fetchall()[0]
    a, b = walks[0], walks[1]
    assert d <= np.sqrt(((a - b) ** 2).sum()) and d > 0
    con.close()


_LONG_PAIR = textwrap.dedent(
    """
    import threading, time, os, numpy as np, pyarrow as pa, tsql
    con = tsql.connect()
    rng = np.random.default_rng(3)
    x, y = np.cumsum(rng.standard_normal((2, 100_000)), axis=1)
    doubles = pa.list_(pa.float64())
    con.register("pair", pa.table({"a": pa.array([x], doubles), "b": pa.array([y], doubles)}))
    con.execute("SELECT dtw_distance([1.0, 2.0], [1.0, 3.0])").fetchall()
    result = {}
    def work():
        try:
            con.execute("SELECT dtw_distance(a, b) FROM pair").fetchall()
            result["r"] = "finished"
        except Exception as error:
            result["r"] = type(error).__name__
    th = threading.Thread(target=work)
    th.start()
    time.sleep(1.0)
    con.interrupt()
    th.join(timeout=5)
    print(result.get("r", "still running"), flush=True)
    os._exit(0)
    """
)


@pytest.mark.xfail(
    strict=True,
    reason="the interrupt is seen only between UDF calls: one pair of 100,000-point series (10^10 cells, "
    "one call of the compiled kernel) runs on for many seconds after interrupt(); a vector of 2,048 pairs of "
    "3,000-point series likewise took 15 s to stop",
)
def test_a_single_long_pair_can_be_interrupted():
    done = subprocess.run([sys.executable, "-c", _LONG_PAIR], capture_output=True, text=True, timeout=120)
    assert done.stdout.strip() == "InterruptException", (done.stdout, done.stderr[-2000:])
