"""The STL kernels: decomposition against statsmodels' STL, strengths of trend and seasonality."""

import numpy as np
import pytest

from tsql.kernels.ragged import Ragged
from tsql.kernels.stl import stl_decompose, stl_strength, stl_windows

sm = pytest.importorskip("statsmodels.api")
STL = pytest.importorskip("statsmodels.tsa.seasonal").STL


@pytest.fixture(scope="module")
def airline() -> np.ndarray:
    """Monthly international airline passengers 1949-1960 (Box & Jenkins series G), shipped inside
    statsmodels' SARIMAX test results."""
    results = pytest.importorskip("statsmodels.tsa.statespace.tests.results.results_sarimax")
    return np.asarray(results.air2_data, dtype=float)


@pytest.fixture(scope="module")
def co2_monthly() -> np.ndarray:
    """statsmodels.datasets.co2 (weekly, Mauna Loa 1958-2001) as monthly means, the few empty
    months filled by linear interpolation (as statsmodels' STL example prepares it)."""
    weekly = sm.datasets.co2.load_pandas().data["co2"]
    return weekly.resample("MS").mean().interpolate().to_numpy()


def oracle(x: np.ndarray, period: int, robust: bool):
    # reference: statsmodels.tsa.seasonal.STL with its defaults (seasonal=7, trend and low_pass
    # from the period, degree 1, jumps 1, inner/outer iterations 5/0, or 2/15 when robust)
    return STL(x, period=period, robust=robust).fit()


def assert_matches(d: dict, row: int, x: np.ndarray, period: int, robust: bool) -> None:
    fit = oracle(x, period, robust)
    scale = np.abs(x).max()
    for name, expected in (("trend", fit.trend), ("seasonal", fit.seasonal), ("remainder", fit.resid)):
        np.testing.assert_allclose(d[name].row(row), expected, rtol=0, atol=1e-9 * max(scale, 1.0))


@pytest.mark.parametrize("robust", [False, True])
def test_shipped_series_match_statsmodels(robust, airline, co2_monthly, sunspots):
    rows = [(co2_monthly, 12), (airline, 12), (np.log(airline), 12), (sunspots, 11)]
    for x, period in rows:
        d = stl_decompose(Ragged.from_list([x]), period, robust=robust)
        assert_matches(d, 0, x, period, robust)
        total = d["trend"].values + d["seasonal"].values + d["remainder"].values
        np.testing.assert_allclose(total, x, rtol=1e-12)


def test_short_periods_and_short_series_match_statsmodels(sunspots):
    # two cycles exactly, odd and even periods, the smallest period; windows longer than the series
    cases = [(sunspots[:24], 12), (sunspots[:25], 12), (sunspots[:14], 7), (sunspots[:4], 2), (sunspots[:57], 5)]
    for x, period in cases:
        assert_matches(stl_decompose(Ragged.from_list([x]), period), 0, x, period, False)
    # robust: with exactly two cycles each cycle-subseries has two points, the seasonal smoother
    # passes through them and the remainders are rounding noise, so the robustness weights (and
    # statsmodels' own answer) are decided by rounding; from 2 cycles + 1 point on they are not
    for x, period in [(sunspots[:25], 12), (sunspots[:15], 7), (sunspots[:5], 2), (sunspots[:57], 5)]:
        assert_matches(stl_decompose(Ragged.from_list([x]), period, robust=True), 0, x, period, True)


def test_default_windows_are_statsmodels_defaults():
    for period in (2, 3, 4, 7, 12, 24, 52, 168):
        fit = STL(np.sin(np.arange(3 * period + 5.0)), period=period)
        assert stl_windows(period) == (fit.config["trend"], fit.config["low_pass"])


def test_rows_answer_the_same_alone_and_in_a_batch(airline, sunspots):
    rng = np.random.default_rng(5)
    rows = [airline, sunspots[:100], airline[:30], rng.standard_normal(77), np.log(airline)[::-1], None, []]
    d = stl_decompose(Ragged.from_list(rows), 12)
    for i, x in enumerate(rows):
        alone = stl_decompose(Ragged.from_list([x]), 12)
        for name in ("trend", "seasonal", "remainder"):
            assert d[name].row_valid[i] == alone[name].row_valid[0]
            np.testing.assert_array_equal(d[name].row(i), alone[name].row(0))
    assert list(d["trend"].row_valid) == [True, True, True, True, True, False, False]


def test_gaps_inside_are_filled_linearly_and_ends_trimmed(airline):
    # reference: statsmodels' STL on the series filled by numpy.interp over the present values
    x = airline.copy()
    x[[0, 1, 50, 51, 52, 90, 143]] = np.nan
    d = stl_decompose(Ragged.from_list([x]), 12, robust=True)
    t = np.arange(len(x))
    present = ~np.isnan(x)
    inner = slice(2, 143)
    filled = np.interp(t[inner], t[present], x[present])
    fit = oracle(filled, 12, True)
    np.testing.assert_allclose(d["trend"].row(0)[inner], fit.trend, atol=1e-9 * 622)
    np.testing.assert_allclose(d["seasonal"].row(0)[inner], fit.seasonal, atol=1e-9 * 622)
    remainder = d["remainder"].row(0)
    assert np.isnan(remainder[[0, 1, 50, 51, 52, 90, 143]]).all()
    keep = present[inner]
    np.testing.assert_allclose(remainder[inner][keep], fit.resid[keep], atol=1e-9 * 622)
    for name in ("trend", "seasonal"):
        assert np.isnan(d[name].row(0)[[0, 1, 143]]).all()
        assert np.isfinite(d[name].row(0)[inner]).all()


def test_rows_without_an_answer():
    rng = np.random.default_rng(2)
    base = rng.standard_normal(60)
    long_gap = base.copy()
    long_gap[20:32] = np.nan  # a whole cycle missing
    sparse = base.copy()
    sparse[1:60:3] = np.nan  # a third missing, in short gaps
    infinite = base.copy()
    infinite[7] = np.inf
    shortish = np.r_[np.nan, np.nan, base[:23]]  # 23 present in the span: under two cycles
    rows = [long_gap, sparse, infinite, shortish, np.full(40, np.nan), None, [], base]
    d = stl_decompose(Ragged.from_list(rows), 12)
    assert list(d["trend"].row_valid) == [False] * 7 + [True]
    assert d["trend"].lengths.tolist() == [0] * 7 + [60]
    s = stl_strength(Ragged.from_list(rows), 12)
    assert np.isnan(s["trend"][:7]).all() and np.isfinite(s["trend"][7])
    # a gap one shorter than the cycle is filled
    ok = base.copy()
    ok[20:31] = np.nan
    assert stl_decompose(Ragged.from_list([ok]), 12)["trend"].row_valid[0]


def test_bad_period_is_an_error_naming_the_function():
    b = Ragged.from_list([np.arange(30.0)])
    for bad in (1, 0, -3, 2.5):
        with pytest.raises(ValueError, match="stl_decompose: period"):
            stl_decompose(b, bad)
        with pytest.raises(ValueError, match="stl_strength: period"):
            stl_strength(b, bad)


# --------------------------------------------------------------------------------------------
# strengths
# --------------------------------------------------------------------------------------------


def reference_strengths(x: np.ndarray, period: int) -> tuple[float, float]:
    # reference: the definitions of Wang, Smith & Hyndman (2006) as given in Hyndman &
    # Athanasopoulos, Forecasting: Principles and Practice, 3rd ed., section 4.3, on statsmodels' STL
    fit = oracle(x, period, False)
    t, s, r = fit.trend, fit.seasonal, fit.resid
    return max(0.0, 1 - np.var(r) / np.var(t + r)), max(0.0, 1 - np.var(r) / np.var(s + r))


def test_strengths_of_shipped_series(airline, co2_monthly, sunspots, nile):
    rows = [airline, np.log(airline), co2_monthly, sunspots, nile]
    s = stl_strength(Ragged.from_list(rows), 12)
    for i, x in enumerate(rows):
        trend, seasonal = reference_strengths(x, 12)
        assert s["trend"][i] == pytest.approx(trend, abs=1e-9)
        assert s["seasonal"][i] == pytest.approx(seasonal, abs=1e-9)
        assert s["period"][i] == 12
    # airline passengers and CO2: strongly trending and strongly seasonal (known features)
    assert (s["trend"][:3] > 0.95).all() and (s["seasonal"][:3] > 0.95).all()


def test_period_found_when_not_given(airline, co2_monthly, sunspots):
    s = stl_strength(Ragged.from_list([airline, co2_monthly, sunspots]))
    # the yearly cycle of the monthly series, the ~11-year solar cycle
    assert s["period"].tolist()[:2] == [12.0, 12.0]
    assert s["period"][2] in (10.0, 11.0, 12.0)
    for i, x in enumerate([airline, co2_monthly, sunspots]):
        trend, seasonal = reference_strengths(x, int(s["period"][i]))
        assert s["trend"][i] == pytest.approx(trend, abs=1e-9)
        assert s["seasonal"][i] == pytest.approx(seasonal, abs=1e-9)


def test_strength_with_gaps_uses_present_elements(airline):
    x = airline.copy()
    x[[30, 31, 77]] = np.nan
    s = stl_strength(Ragged.from_list([x]), 12)
    d = stl_decompose(Ragged.from_list([x]), 12)
    keep = ~np.isnan(x)
    t, se, r = (d[k].row(0)[keep] for k in ("trend", "seasonal", "remainder"))
    assert s["trend"][0] == pytest.approx(1 - np.var(r) / np.var(t + r), rel=1e-12)
    assert s["seasonal"][0] == pytest.approx(1 - np.var(r) / np.var(se + r), rel=1e-12)


def test_constant_rows_have_no_strength():
    s = stl_strength(Ragged.from_list([np.full(48, 3.0), np.r_[np.full(47, 3.0), np.nan]]), 12)
    assert np.isnan(s["trend"]).all() and np.isnan(s["seasonal"]).all() and np.isnan(s["period"]).all()
