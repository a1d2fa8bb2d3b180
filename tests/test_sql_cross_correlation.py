"""cross_correlation and lead_lag through DuckDB: a self-join against the kernel alone, statsmodels, errors."""

import duckdb
import numpy as np
import pyarrow as pa
import pytest

import tsql
from tsql.kernels.correlation import cross_correlation, lead_lag
from tsql.kernels.ragged import Ragged


@pytest.fixture(scope="module")
def con():
    c = tsql.connect()
    rng = np.random.default_rng(18)
    base = np.cumsum(rng.standard_normal(60))
    curves = []
    for item in range(40):
        shift = item % 5  # item i follows the base curve by i % 5 months
        curve = np.roll(base, shift) + 0.3 * rng.standard_normal(60)
        if item % 13 == 0:
            curve[7] = np.nan  # a missing month
        curves.append([None if np.isnan(v) else float(v) for v in curve])
    c.register("arrow_series", pa.table({"item": list(range(40)), "curve": pa.array(curves, pa.list_(pa.float64()))}))
    c.execute("CREATE TEMP TABLE series AS SELECT * FROM arrow_series")
    yield c
    c.close()


def batch(x):
    return Ragged.from_list([[np.nan if v is None else v for v in x]])


def test_self_join_equals_the_kernel_on_each_pair_alone(con):
    rows = con.execute(
        """SELECT a.curve, b.curve, cross_correlation(a.curve, b.curve),
                  cross_correlation(a.curve, b.curve, max_lag := 2),
                  lead_lag(a.curve, b.curve, max_lag := 6)
           FROM series a JOIN series b ON a.item <> b.item"""
    ).fetchall()
    assert len(rows) == 40 * 39
    for a, b, r10, r2, found in rows:
        x, y = batch(a), batch(b)
        expected = cross_correlation(x, y).row(0)
        assert [np.nan if v is None else v for v in r10] == pytest.approx(expected.tolist(), nan_ok=True, rel=0, abs=0)
        assert r2 == cross_correlation(x, y, max_lag=2).row(0).tolist()
        alone = lead_lag(x, y, max_lag=6)
        assert found == {"lag": int(alone["lag"][0]), "correlation": float(alone["correlation"][0])}


def test_lead_lag_finds_the_planted_shifts(con):
    rows = con.execute(
        "SELECT b.item % 5 - a.item % 5, (lead_lag(a.curve, b.curve, max_lag := 6)).lag "
        "FROM series a JOIN series b ON a.item <> b.item"
    ).fetchall()
    assert sum(planted == found for planted, found in rows) / len(rows) > 0.95


def test_cross_correlation_equals_statsmodels_ccf(con):
    # reference: statsmodels.tsa.stattools.ccf(x, y, adjusted=False)[h] = corr(x[t + h], y[t]), lags >= 0 only,
    # so our lag -h (a[t] with b[t - h]) is ccf(a, b)[h] and our lag +h is ccf(b, a)[h]
    stattools = pytest.importorskip("statsmodels.tsa.stattools")
    a, b = con.execute("SELECT curve FROM series WHERE item IN (1, 3) ORDER BY item").fetchall()
    a, b = np.array(a[0]), np.array(b[0])
    (got,) = con.execute(
        "SELECT cross_correlation($a, $b, max_lag := 5)", {"a": a.tolist(), "b": b.tolist()}
    ).fetchone()
    backward = stattools.ccf(a, b, adjusted=False, fft=False)[:6]
    forward = stattools.ccf(b, a, adjusted=False, fft=False)[:6]
    np.testing.assert_allclose(got, np.r_[backward[::-1], forward[1:]], rtol=0, atol=1e-12)


def test_rows_without_an_answer_are_null(con):
    got = con.execute(
        """SELECT cross_correlation([1, 2, 3], [1, 2]), lead_lag([1, 2, 3], [1, 2]), cross_correlation(NULL, [1, 2]),
                  cross_correlation([5, 5, 5], [1, 2, 3]), lead_lag([1, 2, 4], [3, 1, 2], max_lag := 0)"""
    ).fetchone()
    assert got[:4] == (None, None, None, None)
    assert got[4]["lag"] == 0  # max_lag 0: the plain correlation
    assert got[4]["correlation"] == pytest.approx(np.corrcoef([1, 2, 4], [3, 1, 2])[0, 1], rel=1e-12)


@pytest.mark.parametrize(
    "call", ["cross_correlation([1, 2, 3], [3, 2, 1], max_lag := -1)", "lead_lag([1, 2], [2, 1], max_lag := 1.5)"]
)
def test_bad_max_lag_names_the_function(con, call):
    with pytest.raises(duckdb.Error, match=call.split("(")[0] + r".*max_lag"):
        con.execute(f"SELECT {call}").fetchall()


# --------------------------------------------------------------------------- #
# the *_agg forms: two values per time, through the time grid
# --------------------------------------------------------------------------- #


@pytest.fixture(scope="module")
def monthly(con):
    """Rows (item, month, a, b) in shuffled order: months without a row (gaps on the grid), NULL values on
    either side; b follows a by item % 4 months."""
    rng = np.random.default_rng(180)
    rows = []
    for item in range(30):
        base = rng.standard_normal(50)
        follower = np.roll(base, item % 4) + 0.2 * rng.standard_normal(50)
        for m in range(50):
            if m > 3 and rng.random() < 0.06:
                continue  # no row this month
            a = None if rng.random() < 0.03 else float(base[m])
            b = None if rng.random() < 0.03 else float(follower[m])
            rows.append((item, m, a, b))
    order = rng.permutation(len(rows))
    columns = list(zip(*[rows[i] for i in order]))
    con.register("monthly_arrow", pa.table(dict(zip(["item", "m", "a", "b"], columns))))
    con.execute(
        "CREATE TEMP TABLE monthly AS SELECT item, DATE '2020-01-01' + to_months(m) AS month, a, b FROM monthly_arrow"
    )
    return "monthly"


def test_agg_forms_equal_the_list_forms_on_the_grid(con, monthly):
    # the reference: each side put on the monthly grid by on_grid, then the list forms
    rows = con.execute(
        """SELECT item,
                  cross_correlation_agg(a, b, month, max_lag := 4) AS r,
                  lead_lag_agg(a, b, month, max_lag := 6) AS found,
                  cross_correlation(on_grid(list(a), list(month)), on_grid(list(b), list(month)), max_lag := 4),
                  lead_lag(on_grid(list(a), list(month)), on_grid(list(b), list(month)), max_lag := 6),
                  count(*) < 50
           FROM monthly GROUP BY item ORDER BY item"""
    ).fetchall()
    assert len(rows) == 30 and sum(r[5] for r in rows) > 20  # most items have months without a row
    for item, r, found, r_list, found_list, _ in rows:
        assert r is not None and r == r_list, item
        assert found == found_list, item
        assert found["lag"] == item % 4  # the planted lead, in grid steps (months)


def test_agg_form_lags_are_grid_steps_and_fill_applies_to_both(con):
    # weekly rows: a lag of 2 is 2 weeks; b's missing week filled linearly equals the list form on the filled grid
    query = """
        WITH d AS (SELECT TIMESTAMP '2024-01-01' + to_days(7 * i) AS t, sin(i * 0.4) AS a,
                          CASE WHEN i = 11 THEN NULL ELSE sin((i - 2) * 0.4) END AS b FROM range(60) r(i))
        SELECT lead_lag_agg(a, b, t, max_lag := 5, fill := 'linear'),
               lead_lag(on_grid(list(a), list(t), fill := 'linear'), on_grid(list(b), list(t), fill := 'linear'),
                        max_lag := 5)
        FROM d"""
    got, expected = con.execute(query).fetchone()
    assert got == expected and got["lag"] == 2


def test_agg_form_equals_statsmodels_ccf(con):
    # reference: statsmodels.tsa.stattools.ccf (adjusted=False), as in the list form's check above; regular
    # hourly rows in shuffled order, so the grid is the rows themselves
    stattools = pytest.importorskip("statsmodels.tsa.stattools")
    rng = np.random.default_rng(7)
    a = np.cumsum(rng.standard_normal(80))
    b = np.roll(a, 3) + rng.standard_normal(80)
    order = rng.permutation(80)
    cur = tsql.register(con.cursor())
    cur.register("hourly", pa.table({"h": order, "a": a[order], "b": b[order]}))
    ((got,),) = cur.execute(
        "SELECT cross_correlation_agg(a, b, TIMESTAMP '2024-03-01' + to_hours(h), max_lag := 5) FROM hourly"
    ).fetchall()
    cur.close()
    backward = stattools.ccf(a, b, adjusted=False, fft=False)[:6]
    forward = stattools.ccf(b, a, adjusted=False, fft=False)[:6]
    np.testing.assert_allclose(got, np.r_[backward[::-1], forward[1:]], rtol=0, atol=1e-12)


def test_agg_form_errors_name_it(con):
    with pytest.raises(duckdb.Error, match=r"cross_correlation_agg: max_lag must be >= 0"):
        con.execute("SELECT cross_correlation_agg(i, i, i, max_lag := -1) FROM range(9) r(i)").fetchall()
    with pytest.raises(duckdb.Error, match=r"lead_lag_agg: step must be a number for numeric times"):
        con.execute("SELECT lead_lag_agg(i, i, i, step := INTERVAL 1 MONTH) FROM range(9) r(i)").fetchall()
    (none,) = con.execute("SELECT lead_lag_agg(a, b, t) FROM (SELECT 1.0, 2.0, 1) d(a, b, t) WHERE t > 5").fetchone()
    assert none is None  # an aggregate over no rows
