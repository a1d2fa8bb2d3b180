"""Decomposition, several cycles and unit-root tests through SQL, on real shipped series.

References: statsmodels' ``STL``, ``adfuller`` and ``kpss`` on the same values, and statsmodels'
shipped datasets (Mauna Loa CO2, weekly, made monthly as statsmodels' STL example does; yearly
sunspot numbers 1700-2008).
"""

import datetime as dt
import warnings

import duckdb
import numpy as np
import pyarrow as pa
import pytest

import tsql
from tsql.kernels.cycles import periods
from tsql.kernels.ragged import Ragged
from tsql.kernels.stl import stl_decompose, stl_strength
from tsql.kernels.unitroot import adf_test, kpss_test

datasets = pytest.importorskip("statsmodels.datasets")
from statsmodels.tsa.seasonal import STL  # noqa: E402
from statsmodels.tsa.stattools import adfuller, kpss  # noqa: E402


@pytest.fixture(scope="module")
def con():
    c = tsql.connect()
    yield c
    c.close()


@pytest.fixture(scope="module")
def co2(con):
    """Mauna Loa CO2, monthly means, the 5 empty months carried forward (statsmodels' STL example)."""
    data = datasets.co2.load_pandas().data["co2"].resample("MS").mean().ffill()
    months = [d.date() for d in data.index]
    con.register("co2", pa.table({"month": pa.array(months, pa.date32()), "v": data.to_numpy()}))
    return data.to_numpy()


@pytest.fixture(scope="module")
def sunspots(con):
    """Yearly sunspot numbers 1700-2008, in three groups of about a century."""
    data = datasets.sunspots.load_pandas().data
    year, v = data["YEAR"].to_numpy().astype(np.int64), data["SUNACTIVITY"].to_numpy()
    con.register("sunspots", pa.table({"century": (year - 1700) // 103, "year": year, "v": v}))
    return year, v


def strengths(fit):
    """Wang, Smith & Hyndman (2006) as in Hyndman & Athanasopoulos, FPP3 section 4.3, from a statsmodels fit."""
    r = fit.resid
    return max(0.0, 1 - np.var(r) / np.var(fit.trend + r)), max(0.0, 1 - np.var(r) / np.var(fit.seasonal + r))


def test_stl_decompose_of_co2_equals_statsmodels_in_list_and_agg_form(con, co2):
    fit = STL(co2, period=12).fit()  # reference: statsmodels.tsa.seasonal.STL, its defaults
    (parts,) = con.execute("SELECT stl_decompose(list(v ORDER BY month), 12) FROM co2").fetchall()[0]
    for name, expected in (("trend", fit.trend), ("seasonal", fit.seasonal), ("remainder", fit.resid)):
        np.testing.assert_allclose(parts[name], expected, rtol=0, atol=1e-9)
    # the *_agg form: one record per month, the period a year
    (records,) = con.execute("SELECT stl_decompose_agg(v, month, INTERVAL 1 YEAR) FROM co2").fetchall()[0]
    assert [r["time"] for r in records] == [dt.datetime(d.year, d.month, 1) for d in _months(con)]
    for name in ("trend", "seasonal", "remainder"):
        assert [r[name] for r in records] == parts[name]


def _months(con):
    return [m for (m,) in con.execute("SELECT month FROM co2 ORDER BY month").fetchall()]


def test_stl_decompose_robust_equals_statsmodels(con, co2):
    fit = STL(co2, period=12, robust=True).fit()  # reference: statsmodels STL(robust=True)
    (parts,) = con.execute("SELECT stl_decompose(list(v ORDER BY month), 12, robust := true) FROM co2").fetchall()[0]
    np.testing.assert_allclose(parts["trend"], fit.trend, rtol=0, atol=1e-9)
    np.testing.assert_allclose(parts["seasonal"], fit.seasonal, rtol=0, atol=1e-9)


def test_stl_strength_of_co2_equals_the_definition_on_statsmodels_stl(con, co2):
    trend, seasonal = strengths(STL(co2, period=12).fit())
    listed, found, agg = con.execute(
        """SELECT stl_strength(list(v ORDER BY month), period := 12), stl_strength(list(v ORDER BY month)),
                  stl_strength_agg(v, month) FROM co2"""
    ).fetchall()[0]
    assert listed["period"] == 12
    assert listed["trend"] == pytest.approx(trend, abs=1e-12)
    assert listed["seasonal"] == pytest.approx(seasonal, abs=1e-12)
    assert trend > 0.99 and seasonal > 0.9  # CO2: a strong rise and a strong yearly cycle
    assert found == listed  # the dominant period of CO2 is the year
    assert (agg["trend"], agg["seasonal"]) == (listed["trend"], listed["seasonal"])
    (year,) = con.execute("SELECT stl_strength_agg(v, month).period = INTERVAL 1 YEAR FROM co2").fetchall()[0]
    assert year


def test_unit_root_tests_of_co2_and_sunspots_equal_statsmodels(con, co2, sunspots):
    year, v = sunspots
    for table, order, x in (("co2", "month", co2), ("sunspots", "year", v)):
        for regression in ("c", "ct"):
            adf, kp = con.execute(
                f"""SELECT adf_test(list(v ORDER BY {order}), regression := '{regression}'),
                           kpss_test(list(v ORDER BY {order}), regression := '{regression}') FROM {table}"""
            ).fetchall()[0]
            # reference: statsmodels.tsa.stattools.adfuller (AIC lag, MacKinnon p) and kpss (lag 'auto')
            statistic, p, lag = adfuller(x, regression=regression, autolag="AIC", result_object=False)[:3]
            assert adf["statistic"] == pytest.approx(statistic, rel=1e-9)
            assert adf["p_value"] == pytest.approx(p, rel=1e-9, abs=1e-15)
            assert adf["used_lag"] == lag
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # statsmodels warns when the p-value is at its table's bound
                kp_stat, kp_p = kpss(x, regression=regression, nlags="auto")[:2]
            assert kp["statistic"] == pytest.approx(kp_stat, rel=1e-9)
            assert kp["p_value"] == pytest.approx(kp_p, rel=1e-12)
    # CO2 wanders (a rising trend): KPSS rejects a constant level at its table's bound
    (p_level,) = con.execute("SELECT kpss_test(list(v ORDER BY month)).p_value FROM co2").fetchall()[0]
    assert p_level == 0.01


def test_group_by_equals_each_series_alone_and_agg_equals_list(con, sunspots):
    year, v = sunspots
    rows = con.execute(
        """SELECT century, adf_test(list(v ORDER BY year), max_lag := 4), kpss_test(list(v ORDER BY year)),
                  stl_strength(list(v ORDER BY year), period := 11), periods(list(v ORDER BY year), k := 2),
                  adf_test_agg(v, year, max_lag := 4), kpss_test_agg(v, year),
                  stl_strength_agg(v, year, period := 11), periods_agg(v, year, k := 2)
           FROM sunspots GROUP BY century ORDER BY century"""
    ).fetchall()
    assert len(rows) == 3
    for century, adf, kp, strength, cycles, adf_agg, kp_agg, strength_agg, cycles_agg in rows:
        x = Ragged.from_list([v[(year - 1700) // 103 == century]])
        alone = adf_test(x, max_lag=4)
        assert adf == {
            "statistic": alone["statistic"][0],
            "p_value": alone["p_value"][0],
            "used_lag": int(alone["used_lag"][0]),
        }
        alone = kpss_test(x)
        assert kp == {"statistic": alone["statistic"][0], "p_value": alone["p_value"][0]}
        alone = stl_strength(x, period=11)
        assert strength == {k: alone[k][0] for k in ("period", "trend", "seasonal")}
        alone = periods(x, k=2)
        assert cycles == [{k: float(alone.fields[k][i]) for k in ("period", "strength", "p_value")} for i in (0, 1)]
        # yearly rows on a yearly grid: the agg forms answer as the list forms, periods in years
        assert (adf_agg, kp_agg, strength_agg, cycles_agg) == (adf, kp, strength, cycles)
        assert 9 <= cycles[0]["period"] <= 12  # the sunspot cycle, about 11 years


def test_periods_agg_answers_spans_for_dates(con, co2):
    spans, steps = con.execute(
        "SELECT periods_agg(v, month, k := 2), periods(list(v ORDER BY month), k := 2) FROM co2"
    ).fetchall()[0]
    assert [r["strength"] for r in spans] == [r["strength"] for r in steps]
    (year,) = con.execute("SELECT periods_agg(v, month, k := 1)[1].period = INTERVAL 1 YEAR FROM co2").fetchall()[0]
    assert round(steps[0]["period"]) == 12 and year


def test_stl_decompose_of_a_gap_is_filled_and_its_remainder_null(con, co2):
    x = co2[:60].tolist()
    x[30] = None
    (parts,) = con.execute("SELECT stl_decompose($x::DOUBLE[], 12)", {"x": x}).fetchall()[0]
    alone = stl_decompose(Ragged.from_list([np.array(x, dtype=float)]), period=12)
    assert parts["remainder"][30] is None and parts["trend"][30] is not None
    np.testing.assert_array_equal(np.array(parts["trend"], dtype=float), alone["trend"].values)


@pytest.mark.parametrize(
    ("call", "message"),
    [
        ("stl_decompose([1, 2, 3, 4, 5, 6], 1)", "stl_decompose: period must be >= 2, got 1"),
        ("stl_decompose([1, 2, 3, 4, 5, 6], 2.5)", "stl_decompose: period must be a whole number, got 2.5"),
        ("stl_strength([1, 2, 3, 4, 5, 6], period := 1)", "stl_strength: period must be >= 2"),
        ("adf_test([1, 2, 3, 4, 5, 6], regression := 'x')", "adf_test: regression must be one of 'c', 'ct'"),
        ("adf_test([1, 2, 3, 4, 5, 6], max_lag := -1)", "adf_test: max_lag must be >= 0"),
        ("kpss_test([1, 2, 3, 4, 5, 6], regression := 'ctt')", "kpss_test: regression must be one of 'c', 'ct'"),
        ("periods([1, 2, 3, 4, 5, 6], k := 0)", "periods: k must be >= 1"),
        ("periods([1, 2, 3, 4, 5, 6], min_period := 5, max_period := 3)", "periods: max_period must be >= min_period"),
        ("stl_decompose_agg(v, month, INTERVAL 1 MONTH) FROM co2", "stl_decompose_agg: period must be >= 2"),
        ("periods_agg(v, month, k := 1.5) FROM co2", "periods_agg: k must be a whole number"),
        ("adf_test_agg(v, month, regression := 'x') FROM co2", "adf_test_agg: regression must be one of"),
    ],
)
def test_bad_arguments_are_errors_naming_the_public_function(con, co2, call, message):
    with pytest.raises(duckdb.Error, match=message.replace("(", r"\(")):
        con.execute(f"SELECT {call}").fetchall()
