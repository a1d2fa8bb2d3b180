"""screen / screen_agg: every field equals its own function's answer on the same series, through SQL."""

import numpy as np
import pyarrow as pa
import pytest

import tsql
from tsql.kernels.ragged import Ragged
from tsql.kernels.screen import FIELDS, screen

# each field of screen_agg, and the same answer from its own function in the same query
PARTS = {
    "period": "seasonality_agg(v, t).period",
    "strength": "seasonality_agg(v, t).strength",
    "p_value": "seasonality_agg(v, t).p_value",
    "trend_tau": "trend_test_agg(v, t).tau",
    "trend_p_value": "trend_test_agg(v, t).p_value",
    "trend_slope": "trend_test_agg(v, t).slope",
    "autocorrelation": "autocorrelation_agg(v, t)",
    "ljung_box_p_value": "ljung_box_agg(v, t).p_value",
    "adf_p_value": "adf_test_agg(v, t).p_value",
    "spectral_entropy": "spectral_entropy_agg(v, t)",
    "changes": "len(change_points_agg(v, t))",
}


def assert_fields_equal_their_functions(con, source: str) -> int:
    """screen_agg(v, t) against every part called alone in the same GROUP BY; returns the number of groups."""
    parts = ", ".join(f"{call} AS {name}" for name, call in PARTS.items())
    counts = (
        "count(*) AS n_rows, count(DISTINCT t) AS n_times, count(DISTINCT t) FILTER (v IS NOT NULL) AS n_valued, "
        "min(t) AS first, max(t) AS last"
    )
    rows = con.execute(f"SELECT g, screen_agg(v, t) AS s, {parts}, {counts} FROM {source} GROUP BY g").fetchall()
    names = ["g", "s", *PARTS, "n_rows", "n_times", "n_valued", "first", "last"]
    for row in rows:
        got = dict(zip(names, row))
        s = got["s"]
        for name in PARTS:  # bit for bit: the same kernels on the same grid
            assert s[name] == got[name], (got["g"], name, s[name], got[name])
        assert s["merged"] == got["n_rows"] - got["n_times"]  # one row per time at most on these grids
        assert s["points"] - s["missing"] == got["n_valued"]
    return len(rows)


@pytest.fixture(scope="module")
def warehouse(sample_warehouse):
    return sample_warehouse


def test_screen_agg_on_the_sample_warehouse_equals_each_function(warehouse):
    con = tsql.connect(str(warehouse), read_only=True)
    con.execute("CREATE TEMP VIEW sales AS SELECT item AS g, units AS v, month AS t FROM monthly_sales")
    assert assert_fields_equal_their_functions(con, "sales") == 3000
    # the months of the grid: every month from the first to the last, whether or not it has a row
    checked = con.execute(
        "SELECT count(*) FILTER (s.points = date_diff('month', first, last) + 1), count(*) FROM ("
        "SELECT screen_agg(units, month) AS s, min(month) AS first, max(month) AS last FROM monthly_sales "
        "GROUP BY item)"
    ).fetchall()
    assert checked[0][0] == checked[0][1] == 3000
    assert (
        con.execute(
            "SELECT count(*) FROM (SELECT screen_agg(units, month) AS s FROM monthly_sales GROUP BY item) "
            "WHERE s.missing > 0"
        ).fetchall()[0][0]
        > 0
    )  # the warehouse has missing months, and the grid brings them back
    con.close()


def test_screen_agg_with_repeated_times_gaps_and_nulls_equals_each_function():
    rng = np.random.default_rng(17)
    g, v, t = [], [], []
    for item in range(60):
        n = int(rng.integers(30, 400))
        times = np.arange(n, dtype=float)
        values = np.sin(2 * np.pi * times / rng.choice([7, 12, 24])) * (item % 3) + rng.standard_normal(n)
        values += (times > n // 2) * 3.0 * (item % 4 == 0) + 0.01 * times * (item % 5 == 0)
        if item % 2:  # a walk
            values = np.cumsum(rng.standard_normal(n))
        keep = rng.uniform(size=n) > 0.05  # missing rows: gaps on the grid
        keep[[0, -1]] = True
        times, values = times[keep], values[keep]
        nulls = rng.uniform(size=len(values)) < 0.03
        repeats = rng.choice(len(times), size=int(rng.integers(0, 4)), replace=False)  # a second row, same time
        g += [item] * (len(times) + len(repeats))
        t += times.tolist() + times[repeats].tolist()
        v += [None if z else x for x, z in zip(values.tolist(), nulls, strict=True)] + values[repeats].tolist()
    con = tsql.connect()
    con.register("rows", pa.table({"g": g, "v": v, "t": t}))
    assert assert_fields_equal_their_functions(con, "rows") == 60
    merged = con.execute("SELECT sum(s.merged) FROM (SELECT screen_agg(v, t) AS s FROM rows GROUP BY g)").fetchall()
    assert merged[0][0] > 0


def test_list_form_equals_each_function():
    rng = np.random.default_rng(3)
    series = [np.sin(np.arange(n) / 3.0) + rng.standard_normal(n) for n in (12, 50, 50, 200, 1000)]
    series[2][[3, 9, 20]] = np.nan
    con = tsql.connect()
    con.register("lists", pa.table({"a": pa.array([s.tolist() for s in series], from_pandas=True)}))
    parts = {name: call.replace("_agg(v, t", "(a") for name, call in PARTS.items()}
    rows = con.execute(f"SELECT screen(a), {', '.join(parts.values())}, len(a) FROM lists").fetchall()
    for s, *alone, n in rows:
        assert [s[name] for name in PARTS] == alone
        assert s["points"] == n and s["merged"] == 0
    kernel = screen(Ragged.from_list(series))
    assert kernel["missing"].tolist() == [0, 0, 3, 0, 0]
    assert list(kernel) == list(FIELDS)


def test_rows_without_an_answer():
    con = tsql.connect()
    got = con.execute(
        "SELECT screen(NULL::DOUBLE[]), screen([]::DOUBLE[]), screen([NULL, NULL]::DOUBLE[]), screen([7.0, 7, 7, 7, 7])"
    ).fetchall()[0]
    assert got[:3] == (None, None, None)
    constant = got[3]
    assert constant["points"] == 5 and constant["changes"] == 0 and constant["period"] is None
    empty = con.execute("SELECT screen_agg(x, x) FROM range(0) r(x)").fetchall()
    assert empty == [(None,)]


def test_against_statsmodels_on_sunspots(sunspots):
    # reference: statsmodels' acf, acorr_ljungbox (10 lags) and adfuller (AIC lag) on the yearly sunspot numbers
    from statsmodels.stats.diagnostic import acorr_ljungbox
    from statsmodels.tsa.stattools import acf, adfuller

    got = screen(Ragged.from_list([sunspots]))
    assert got["autocorrelation"][0] == pytest.approx(acf(sunspots, nlags=1)[1], rel=1e-12)
    assert got["ljung_box_p_value"][0] == pytest.approx(
        acorr_ljungbox(sunspots, lags=[10])["lb_pvalue"].iloc[0], rel=1e-9, abs=1e-300
    )
    assert got["adf_p_value"][0] == pytest.approx(adfuller(sunspots, autolag="AIC", result_object=False)[1], rel=1e-6)
    assert 10 <= got["period"][0] <= 12  # the solar cycle of about 11 years
