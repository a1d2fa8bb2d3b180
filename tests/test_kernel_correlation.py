"""The ACF and Ljung-Box kernels against statsmodels (test-only oracle)."""

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.tsa.stattools import acf as sm_acf

from tsql.kernels import correlation
from tsql.kernels.ragged import Ragged


def one(x) -> Ragged:
    return Ragged.from_list([x])


@pytest.mark.parametrize("dataset", ["sunspots", "nile"])
def test_acf_matches_statsmodels_on_shipped_datasets(dataset, request):
    # reference: statsmodels.tsa.stattools.acf(adjusted=False), the biased estimator
    x = request.getfixturevalue(dataset)
    expected = sm_acf(x, nlags=60, adjusted=False, fft=False)[1:]
    np.testing.assert_allclose(correlation.acf(one(x), 60).values, expected, rtol=1e-12)
    np.testing.assert_allclose(correlation.acf(one(x), 10).values, expected[:10], rtol=1e-12)
    for lag in (1, 2, 11):
        assert correlation.autocorrelation(one(x), lag)[0] == pytest.approx(expected[lag - 1], rel=1e-12)


@pytest.mark.parametrize("dataset", ["sunspots", "nile"])
def test_ljung_box_matches_statsmodels(dataset, request):
    # reference: statsmodels.stats.diagnostic.acorr_ljungbox (chi-squared, lags degrees of freedom)
    x = request.getfixturevalue(dataset)
    for lags in (1, 5, 10, 24):
        expected = acorr_ljungbox(x, lags=[lags])
        got = correlation.ljung_box(one(x), lags)
        assert got["q"][0] == pytest.approx(expected["lb_stat"].iloc[0], rel=1e-10)
        assert got["p_value"][0] == pytest.approx(expected["lb_pvalue"].iloc[0], rel=1e-8, abs=1e-300)


def test_missing_values_follow_the_conservative_estimator(sunspots):
    # reference: statsmodels acf(missing="conservative"): nan-aware mean, pairs with both values present
    x = sunspots.copy()
    x[[3, 50, 51, 52, 200]] = np.nan
    expected = sm_acf(x, nlags=50, adjusted=False, missing="conservative", fft=False)[1:]
    np.testing.assert_allclose(correlation.acf(one(x), 10).values, expected[:10], rtol=1e-12)
    np.testing.assert_allclose(correlation.acf(one(x), 50).values, expected, rtol=1e-12)


def test_ragged_batch_equals_each_series_alone():
    # reference: statsmodels acf on each series; rows of every length 0..80, some with gaps
    rng = np.random.default_rng(7)
    series = []
    for i in range(400):
        x = rng.standard_normal(int(rng.integers(0, 80))).cumsum()
        if i % 5 == 0 and len(x) > 4:
            x[rng.integers(0, len(x), 2)] = np.nan
        series.append(x)
    batch = Ragged.from_list(series)
    short, long_ = correlation.acf(batch, 6), correlation.acf(batch, 45)
    lag3 = correlation.autocorrelation(batch, 3)
    for i, x in enumerate(series):
        alone_short = correlation.acf(one(x), 6)
        np.testing.assert_array_equal(short.row(i), alone_short.row(0))
        assert bool(short.row_valid[i]) == bool(alone_short.row_valid[0])
        np.testing.assert_array_equal(lag3[i], correlation.autocorrelation(one(x), 3)[0])
        if np.sum(~np.isnan(x)) > 46 and np.ptp(x[~np.isnan(x)]) > 0:
            expected = sm_acf(x, nlags=45, adjusted=False, missing="conservative", fft=False)[1:]
            np.testing.assert_allclose(long_.row(i), expected, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize(
    "x",
    [[], [4.0], [3.0, 3.0, 3.0, 3.0], [np.nan, np.nan, np.nan], [np.nan, 2.0, np.nan]],
    ids=["empty", "single", "constant", "all-missing", "one-present"],
)
def test_rows_without_support_give_no_answer(x):
    assert np.isnan(correlation.autocorrelation(one(x), 1)[0])
    assert not correlation.acf(one(x), 3).row_valid[0]
    assert np.isnan(correlation.ljung_box(one(x), 2)["q"][0])


def test_large_level_constant_is_still_constant():
    x = np.full(50, 1234567.891)
    assert np.isnan(correlation.autocorrelation(one(x), 1)[0])


def test_lag_at_or_beyond_length_has_no_answer():
    x = [1.0, 3.0, 2.0, 5.0]
    assert np.isnan(correlation.autocorrelation(one(x), 4)[0])
    values = correlation.acf(one(x), 6).values
    assert np.isfinite(values[:3]).all() and np.isnan(values[3:]).all()
    assert np.isnan(correlation.ljung_box(one(x), 4)["q"][0])


def test_no_pair_present_at_a_lag():
    x = [1.0, np.nan, 2.0, np.nan, 4.0, np.nan]
    # pairs one apart never have both elements present
    assert np.isnan(correlation.autocorrelation(one(x), 1)[0])
    assert np.isfinite(correlation.autocorrelation(one(x), 2)[0])


def test_white_noise_ljung_box_is_calibrated():
    # reference: under H0 the p-value is uniform (Ljung & Box 1978); 2,000 seeded series of 200
    rng = np.random.default_rng(11)
    batch = Ragged(rng.standard_normal(2000 * 200), np.arange(0, 2000 * 200 + 1, 200))
    p = correlation.ljung_box(batch, 10)["p_value"]
    rate = np.mean(p < 0.05)
    assert abs(rate - 0.05) < 4 * np.sqrt(0.05 * 0.95 / 2000)


@settings(max_examples=200, deadline=None)
@given(
    st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=3, max_size=60),
    st.integers(1, 5),
    st.floats(0.01, 100),
    st.floats(-1e3, 1e3),
)
def test_acf_is_bounded_and_affine_invariant(x, lag, scale, shift):
    # property of the biased estimator (Box & Jenkins): |r_k| <= 1, unchanged by a*x + b for a > 0
    x = np.asarray(x)
    assume(np.ptp(x) > 1e-3 * max(1.0, np.abs(x).max()))
    r = correlation.autocorrelation(one(x), lag)[0]
    if lag >= len(x):
        assert np.isnan(r)
        return
    assert abs(r) <= 1 + 1e-12
    assert correlation.autocorrelation(one(scale * x + shift), lag)[0] == pytest.approx(r, abs=1e-8)
