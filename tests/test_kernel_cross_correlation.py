"""cross_correlation and lead_lag against statsmodels' ccf (test-only reference) and planted lags.

statsmodels' ``ccf(x, y, adjusted=False)[k]`` is the biased sample correlation of ``x_{t+k}`` with ``y_t``
(whole-series means, population standard deviations), for k >= 0 only. Our lag h pairs ``a_t`` with
``b_{t+h}``, so lags h >= 0 are ``ccf(b, a)[h]`` and lags h < 0 are ``ccf(a, b)[-h]``.
"""

import doctest

import numpy as np
import pytest
from statsmodels.tsa.stattools import ccf

from tsql.kernels import correlation
from tsql.kernels.correlation import acf, cross_correlation, lead_lag
from tsql.kernels.ragged import Ragged


def reference(a, b, max_lag):
    positive = ccf(b, a, adjusted=False, fft=False)[: max_lag + 1]
    negative = ccf(a, b, adjusted=False, fft=False)[1 : max_lag + 1][::-1]
    return np.r_[negative, positive]


def test_against_statsmodels_ccf():
    rng = np.random.default_rng(12)
    rows_a, rows_b, expected = [], [], []
    for n in [12, 30, 30, 97, 250]:
        a = np.cumsum(rng.standard_normal(n)) * 1e3 + 5e4  # levels and scales far from 0 and 1
        b = 0.6 * np.roll(a, 3) + rng.standard_normal(n) * 500
        rows_a.append(a)
        rows_b.append(b)
        expected.append(reference(a, b, 10))
    got = cross_correlation(Ragged.from_list(rows_a), Ragged.from_list(rows_b), max_lag=10)
    for r, want in enumerate(expected):
        np.testing.assert_allclose(got.row(r), want, rtol=0, atol=1e-12)


def test_lags_beyond_the_series_have_no_pairs():
    a, b = np.array([1.0, 4.0, 2.0, 8.0]), np.array([3.0, 1.0, 5.0, 2.0])
    got = cross_correlation(Ragged.from_list([a]), Ragged.from_list([b]), max_lag=5).row(0)
    assert np.isnan(got[[0, 1, -2, -1]]).all()
    np.testing.assert_allclose(got[2:-2], reference(a, b, 3), rtol=0, atol=1e-12)


def test_gaps_treated_as_by_acf():
    # a series against itself is its autocorrelation, gaps included (the existing acf kernel's rules)
    rng = np.random.default_rng(4)
    x = np.cumsum(rng.standard_normal(60))
    x[[3, 17, 18, 40]] = np.nan
    got = cross_correlation(Ragged.from_list([x]), Ragged.from_list([x]), max_lag=8).row(0)
    expected = acf(Ragged.from_list([x]), 8).row(0)
    np.testing.assert_allclose(got[9:], expected, rtol=0, atol=1e-14)
    np.testing.assert_allclose(got[:8][::-1], expected, rtol=0, atol=1e-14)
    assert got[8] == pytest.approx(1.0, abs=1e-14)


@pytest.mark.parametrize("lag", [-4, -1, 0, 2, 7])
def test_lead_lag_recovers_a_planted_lag(lag):
    rng = np.random.default_rng(30 + lag)
    base = np.zeros(400)
    for t in range(1, 400):  # AR(1): neighbouring lags correlate too, the peak must still be found
        base[t] = 0.7 * base[t - 1] + rng.standard_normal()
    a = base[20:320]
    b = base[20 - lag : 320 - lag] + 0.5 * rng.standard_normal(300)  # b_t = a_{t-lag} + noise: a leads by lag
    found = lead_lag(Ragged.from_list([a, -a]), Ragged.from_list([b, b]), max_lag=10)
    assert found["lag"].tolist() == [lag, lag]
    assert found["correlation"][0] > 0.7 and found["correlation"][1] < -0.7


def test_rows_without_an_answer():
    a = Ragged.from_list([[1.0, 2.0, 3.0], [1.0, 2.0, 3.0], None, [5.0, 5.0, 5.0], [1.0, np.inf, 2.0], [1.0, 2.0]])
    b = Ragged.from_list([[1.0, 3.0, 2.0], [1.0, 3.0], [1.0, 2.0, 3.0], [1.0, 2.0, 3.0], [1.0, 2.0, 3.0], [2.0, 1.0]])
    got = cross_correlation(a, b, max_lag=1)
    assert got.row_valid.tolist() == [True, False, False, False, False, True]
    found = lead_lag(a, b, max_lag=1)
    assert np.isnan(found["lag"][1:5]).all() and not np.isnan(found["lag"][[0, 5]]).any()
    with pytest.raises(ValueError, match="cross_correlation: max_lag"):
        cross_correlation(a, b, max_lag=-1)
    with pytest.raises(ValueError, match="lead_lag: max_lag"):
        lead_lag(a, b, max_lag=1.5)


def test_docstring_examples():
    assert doctest.testmod(correlation).failed == 0
