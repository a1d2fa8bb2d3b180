"""DTW functions through DuckDB: self-joins, the similar-items example, NULLs and errors."""

from importlib import resources

import duckdb
import numpy as np
import pyarrow as pa
import pytest

import tsql
from tsql.kernels import clusters, dtw
from tsql.kernels.ragged import Ragged


@pytest.fixture(scope="module")
def con():
    c = tsql.connect()
    rng = np.random.default_rng(99)
    rows = []
    for item in range(150):
        n = int(rng.integers(20, 40))
        curve = np.cumsum(rng.standard_normal(n))
        if item % 25 == 0:
            curve[3] = np.nan  # a NULL element: that item's pairs are NULL
        rows += [(item, m, None if np.isnan(v) else float(v)) for m, v in enumerate(curve)]
    table = pa.table({"item": [r[0] for r in rows], "month": [r[1] for r in rows], "units": [r[2] for r in rows]})
    c.register("arrow_sales", table)
    c.execute("CREATE TEMP TABLE sales AS SELECT * FROM arrow_sales")
    c.execute("CREATE TEMP TABLE series AS SELECT item, list(units ORDER BY month) AS curve FROM sales GROUP BY item")
    yield c
    c.close()


def alone(kernel, a, b, **kwargs):
    x = Ragged.from_list([[np.nan if v is None else v for v in a]])
    y = Ragged.from_list([[np.nan if v is None else v for v in b]])
    value = kernel(x, y, **kwargs)[0]
    return None if np.isnan(value) else float(value)


def test_self_join_equals_pairwise_kernel_calls(con):
    rows = con.execute(
        """SELECT a.curve, b.curve, dtw_distance(a.curve, b.curve), dtw_distance(a.curve, b.curve, band := 3),
                  dtw_distance(a.curve, b.curve, normalize := true), lb_keogh(a.curve, b.curve, 3)
           FROM series a JOIN series b ON a.item < b.item"""
    ).fetchall()
    assert len(rows) == 150 * 149 // 2
    nulls = 0
    for a, b, d, d3, dz, lb in rows[::7]:
        assert d == alone(dtw.dtw_distance, a, b)
        assert d3 == alone(dtw.dtw_distance, a, b, band=3)
        assert dz == alone(dtw.dtw_distance, a, b, normalize=True)
        assert lb == alone(dtw.lb_keogh, a, b, band=3)
        nulls += d is None
        if d is not None and len(a) == len(b):
            assert lb <= d3
    assert 0 < nulls < len(rows[::7]) / 4


def test_path_cost_is_the_squared_distance(con):
    rows = con.execute(
        """SELECT a.curve, b.curve, dtw_path(a.curve, b.curve, band := 4), dtw_distance(a.curve, b.curve, band := 4)
           FROM series a JOIN series b ON a.item < b.item WHERE a.item % 10 = 1 AND b.item % 10 = 2"""
    ).fetchall()
    assert rows
    for a, b, path, distance in rows:
        assert path[0] == {"i": 1, "j": 1} and path[-1] == {"i": len(a), "j": len(b)}
        cost = sum((a[p["i"] - 1] - b[p["j"] - 1]) ** 2 for p in path)
        assert cost == pytest.approx(distance**2, rel=1e-12)


def test_cutoff_filter_keeps_exactly_the_near_pairs(con):
    near = con.execute(
        """SELECT a.item, b.item FROM series a JOIN series b ON a.item < b.item
           WHERE dtw_distance(a.curve, b.curve, cutoff := 6) IS NOT NULL ORDER BY ALL"""
    ).fetchall()
    direct = con.execute(
        """SELECT a.item, b.item FROM series a JOIN series b ON a.item < b.item
           WHERE dtw_distance(a.curve, b.curve) <= 6 ORDER BY ALL"""
    ).fetchall()
    assert near == direct and len(near) > 0


def test_similar_items_example_equals_ranking_every_pair(con):
    # a month without a value has no row: the example's on_grid fills it linearly
    con.execute(
        """CREATE OR REPLACE TEMP VIEW monthly_sales AS
           SELECT 'SKU-' || item AS item, DATE '2019-01-01' + INTERVAL (month) MONTH AS month, units
           FROM sales WHERE units IS NOT NULL"""
    )
    example = (resources.files("tsql.sql") / "examples" / "most_similar_items.sql").read_text()
    got = con.execute(example).fetchall()
    brute = con.execute(
        """WITH s AS (SELECT item, on_grid(list(units ORDER BY month), list(month ORDER BY month),
                                           step := INTERVAL '1 month', fill := 'linear') c
                      FROM monthly_sales GROUP BY item),
                d AS (SELECT a.item, b.item other, dtw_distance(a.c, b.c, band := 2, normalize := true) distance
                      FROM s a JOIN s b ON a.item <> b.item)
           SELECT item, other, distance, rank FROM (
               SELECT *, row_number() OVER (PARTITION BY item ORDER BY distance, other) rank FROM d)
           WHERE rank <= 5 ORDER BY item, rank"""
    ).fetchall()
    assert len(got) == 5 * 150
    assert got == brute  # the same neighbours, distances bit for bit and ranks


def test_look_alike_groups_example_summarises_the_kernel_answer(con):
    con.execute(
        """CREATE OR REPLACE TEMP VIEW monthly_sales AS
           SELECT 'SKU-' || item AS item, DATE '2019-01-01' + INTERVAL (month) MONTH AS month, units
           FROM sales WHERE units IS NOT NULL"""
    )
    example = (resources.files("tsql.sql") / "examples" / "look_alike_groups.sql").read_text()
    got = con.execute(example).fetchall()
    ids, curves = zip(
        *con.execute(
            """SELECT item, on_grid(list(units ORDER BY month), list(month ORDER BY month),
                                    step := INTERVAL '1 month', fill := 'linear')
               FROM monthly_sales GROUP BY item ORDER BY item"""
        ).fetchall()
    )
    found = clusters.dtw_clusters(np.array(ids), Ragged.from_list(curves), band=2)  # the kernel alone
    assert [r[0] for r in got] == list(range(1, found["cluster"].max() + 1))
    for cluster, medoid, items, mean_silhouette, members in got:
        inside = found["cluster"] == cluster
        assert medoid == ids[found["medoid"][inside][0]] and items == inside.sum()
        assert mean_silhouette == round(float(found["silhouette"][inside].mean()), 3)
        silhouette = dict(zip(ids, found["silhouette"].tolist()))
        top = sorted(found["silhouette"][inside].tolist(), reverse=True)[:5]
        assert [silhouette[m] for m in members] == top and all(
            found["cluster"][ids.index(m)] == cluster for m in members
        )
    assert sum(r[2] for r in got) == 150


@pytest.mark.parametrize(
    "call",
    [
        "dtw_distance(NULL, [1, 2])",
        "dtw_distance([]::DOUBLE[], [1, 2])",
        "dtw_distance([1, NULL, 3], [1, 2, 3])",
        "dtw_distance([1, 'NaN'::DOUBLE, 3], [1, 2, 3])",
        "lb_keogh([1, 2], NULL, 1)",
        "dtw_path([1, 2], []::DOUBLE[])",
        "dtw_distance([1, 2], [1, 2], band := NULL::DOUBLE, cutoff := NULL)",
    ],
)
def test_rows_without_support_are_null(con, call):
    value = con.execute(f"SELECT {call}").fetchone()[0]
    if "band := NULL" in call:
        assert value == 0.0  # NULL band and cutoff mean "not set"
    else:
        assert value is None


@pytest.mark.parametrize(
    "call, message",
    [
        ("dtw_distance([1, 2], [1, 2], band := -1)", "dtw_distance: band must be >= 0, got -1"),
        ("dtw_distance([1, 2], [1, 2], band := 0.5)", "dtw_distance: band must be a whole number, got 0.5"),
        ("dtw_distance([1, 2], [1, 2], cutoff := -3)", "dtw_distance: cutoff must be >= 0, got -3"),
        ("lb_keogh([1, 2], [1, 2], -2)", "lb_keogh: band must be >= 0, got -2"),
        ("dtw_path([1, 2], [1, 2], band := -1)", "dtw_path: band must be >= 0, got -1"),
    ],
)
def test_nonsense_arguments_are_errors(con, call, message):
    with pytest.raises(duckdb.Error, match=message):
        con.execute(f"SELECT {call}").fetchall()


def test_path_too_large_for_memory_is_a_clear_error(con):
    # 20,000 x 20,000 cells without a band would need 3.2 GB
    with pytest.raises(duckdb.Error, match="dtw_path: a 20000 x 20000 pair needs 400,000,000 cells"):
        con.execute("SELECT dtw_path(range(20000)::DOUBLE[], range(20000)::DOUBLE[])").fetchall()
    path = con.execute("SELECT len(dtw_path(range(20000)::DOUBLE[], range(20000)::DOUBLE[], band := 10))").fetchone()
    assert path == (20000,)
