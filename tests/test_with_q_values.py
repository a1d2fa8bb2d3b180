"""with_q_values: false-discovery-rate adjusted p-values over a table, against scipy's false_discovery_control."""

import duckdb
import numpy as np
import pyarrow as pa
import pytest
from scipy import stats

import tsql


@pytest.fixture(scope="module")
def con():
    return tsql.connect()


def q_values(con, p: np.ndarray, method: str = "bh") -> np.ndarray:
    """with_q_values over a table of (i, p) with NaN as NULL; q in the order of i, NaN for NULL."""
    con.register("screen", pa.table({"i": np.arange(len(p)), "p": pa.array(p, from_pandas=True)}))
    try:
        rows = con.execute(f"SELECT i, q_value FROM with_q_values(screen, p, method := '{method}') ORDER BY i")
        return np.array([np.nan if q is None else q for _, q in rows.fetchall()], dtype=float)
    finally:
        con.unregister("screen")


@pytest.mark.parametrize("method", ["bh", "by"])
@pytest.mark.parametrize("m", [1, 2, 7, 500, 3000])
def test_equals_scipy_false_discovery_control_with_nulls_and_ties(con, method, m):
    # reference: scipy.stats.false_discovery_control (Benjamini & Hochberg 1995; Benjamini & Yekutieli 2001)
    rng = np.random.default_rng(m)
    p = rng.uniform(size=m) ** 3  # many small p-values, as in a screen
    if m > 2:
        p[rng.choice(m, m // 10 + 1, replace=False)] = np.nan
        tied = rng.choice(m, m // 5 + 1, replace=False)
        p[tied] = np.round(p[tied], 2)  # ties, also among the small ones
        p[:3] = [0.0, 1.0, p[3]]  # both ends of [0, 1]
    q = q_values(con, p, method)
    present = ~np.isnan(p)
    assert np.isnan(q[~present]).all()
    expected = stats.false_discovery_control(p[present], method=method)
    np.testing.assert_allclose(q[present], expected, rtol=0, atol=1e-12)
    for value in np.unique(p[present]):  # tied p-values share their q
        assert np.ptp(q[p == value]) == 0


def test_no_present_p_value(con):
    assert np.isnan(q_values(con, np.array([np.nan, np.nan]))).all()
    empty = "WITH screen AS (SELECT 0.5 AS p WHERE false) SELECT count(*) FROM with_q_values(screen, p)"
    assert con.execute(empty).fetchall() == [(0,)]


def test_on_a_cte_with_a_struct_field_and_every_column_kept(con):
    query = """
        WITH found AS (
            SELECT 'item ' || i AS item, {'period': 12.0, 'p_value': p} AS s, i % 3 AS shelf
            FROM (VALUES (1, 0.001), (2, 0.02), (3, 0.03), (4, 0.5), (5, NULL)) t(i, p)
        )
        SELECT * FROM with_q_values(found, s.p_value) ORDER BY item"""
    result = con.execute(query)
    assert [d[0] for d in result.description] == ["item", "s", "shelf", "q_value"]
    rows = result.fetchall()
    q = [r[-1] for r in rows]
    # by hand (BH over the 4 present p-values): 0.001 * 4 = 0.004; min(0.02 * 2, 0.03 * 4/3, 0.5) = 0.04
    assert q[:3] == pytest.approx([0.004, 0.04, 0.04], abs=1e-15) and q[3] == 0.5 and q[4] is None
    assert [r[2] for r in rows] == [1, 2, 0, 1, 2]


def test_decimal_and_integer_columns(con):
    rows = con.execute(
        "WITH t(p) AS (VALUES (0.01::DECIMAL(4, 3)), (0.04), (1::DECIMAL(4, 3))) SELECT q_value FROM "
        "with_q_values(t, p) ORDER BY q_value"
    ).fetchall()
    assert [r[0] for r in rows] == pytest.approx([0.03, 0.06, 1.0], abs=1e-15)
    rows = con.execute("WITH t(p) AS (VALUES (0), (1)) SELECT q_value FROM with_q_values(t, p) ORDER BY 1").fetchall()
    assert rows == [(0.0,), (1.0,)]


@pytest.mark.parametrize(
    "query, message",
    [
        ("WITH t(p) AS (VALUES (0.1)) FROM with_q_values(t, p, method := 'holm')", "method must be 'bh'"),
        ("WITH t(p) AS (VALUES (0.1)) FROM with_q_values(t, p, method := NULL)", "got NULL"),
        ("WITH t(p) AS (VALUES (0.1)) FROM with_q_values(t, 'p')", "p_column must be a numeric column"),
        ("WITH t(p) AS (VALUES ('0.1')) FROM with_q_values(t, p)", "got VARCHAR"),
        ("WITH t(p) AS (VALUES (true)) FROM with_q_values(t, p)", "got BOOLEAN"),
        ("WITH t(p) AS (VALUES (0.1), (1.5)) FROM with_q_values(t, p)", "must lie in [0, 1], got 1.5"),
        ("WITH t(p) AS (VALUES (-0.1)) FROM with_q_values(t, p)", "must lie in [0, 1]"),
        ("WITH t(p) AS (VALUES ('NaN'::DOUBLE)) FROM with_q_values(t, p)", "must lie in [0, 1], got nan"),
    ],
)
def test_bad_input_is_an_error_naming_with_q_values(con, query, message):
    with pytest.raises(duckdb.Error) as raised:
        con.execute(query).fetchall()
    assert "with_q_values: " in str(raised.value) and message in str(raised.value)


def test_bh_keeps_the_false_discovery_proportion_at_the_level_on_average(con):
    # Seeded simulated screens: 900 true nulls (uniform p) and 100 real effects (one-sided z-test of a shift
    # of 3 sd). Benjamini & Hochberg (1995), Theorem 1: for independent tests the expected false-discovery
    # proportion is at most (m0 / m) * level = 0.09; Benjamini & Yekutieli (2001) is more conservative still.
    rng = np.random.default_rng(2026)
    level, m0, m1, screens = 0.10, 900, 100, 150
    fdp = {"bh": [], "by": [], "raw": []}
    power = []
    for _ in range(screens):
        p = np.concatenate([rng.uniform(size=m0), stats.norm.sf(rng.normal(3.0, 1.0, size=m1))])
        null = np.arange(m0 + m1) < m0
        for method in ("bh", "by"):
            flagged = q_values(con, p, method) < level
            fdp[method].append((flagged & null).sum() / max(flagged.sum(), 1))
            if method == "bh":
                power.append((flagged & ~null).sum() / m1)
        flagged = p < level
        fdp["raw"].append((flagged & null).sum() / max(flagged.sum(), 1))
    assert np.mean(fdp["bh"]) <= level
    assert np.mean(fdp["bh"]) > 0.07  # about (m0 / m) * level, not a Bonferroni-like zero
    assert np.mean(fdp["by"]) <= np.mean(fdp["bh"])
    assert np.mean(fdp["raw"]) > 2 * level  # unadjusted p < level lets far more noise onto the list
    assert np.mean(power) > 0.5
