"""periods(): several cycles per series, against statsmodels' MSTL, shipped data and seeded noise."""

import numpy as np
import pytest
from scipy import signal

from tsql.kernels.cycles import periods
from tsql.kernels.periodicity import dominant_period, seasonality
from tsql.kernels.ragged import Ragged


def hourly_load(weeks: int, seed: int) -> np.ndarray:
    # documented simulation of hourly load (no shipped hourly series with two cycles is
    # available): a daily profile with a midday peak and an evening shoulder, weekend days
    # lower, a slow rise, Gaussian noise
    t = np.arange(24 * 7 * weeks)
    hour, day = t % 24, (t // 24) % 7
    daily = 3.0 * np.exp(-0.5 * ((hour - 13) / 3.5) ** 2) + 0.8 * np.exp(-0.5 * ((hour - 20) / 1.5) ** 2)
    weekly = np.where(day >= 5, -1.2, 0.3)
    return 10 + daily + weekly + 0.002 * t + 0.5 * np.random.default_rng(seed).standard_normal(len(t))


def records(result, row: int) -> dict:
    return result.row(row)


def test_hourly_load_reports_the_daily_and_the_weekly_cycle():
    x = hourly_load(8, 0)
    n = len(x)
    r = records(periods(Ragged.from_list([x]), k=3), 0)
    # within a tenth of a Fourier bin of 24 and 168 hours
    assert abs(n / r["period"][0] - n / 24) < 0.1
    assert abs(n / r["period"][1] - n / 168) < 0.1
    # each cycle is tested against a red background fitted to what is left, which the cycles
    # still in it redden (p about 3e-46 for the daily and 1e-23 for the weekly cycle)
    assert r["p_value"][0] < 1e-30 and r["p_value"][1] < 1e-15
    # reference: statsmodels.tsa.seasonal.MSTL(x, periods=(24, 168)): the share of the
    # detrended variance in each seasonal component, in the same order and of about the same size
    # (MSTL's smoothers also take up some noise, so its shares run higher)
    mstl = pytest.importorskip("statsmodels.tsa.seasonal").MSTL(x, periods=(24, 168)).fit()
    detrended = np.var(x - mstl.trend)
    shares = [np.var(mstl.seasonal[:, 0]) / detrended, np.var(mstl.seasonal[:, 1]) / detrended]
    assert shares[0] > shares[1] and r["strength"][0] > r["strength"][1]
    np.testing.assert_allclose(r["strength"][:2], shares, atol=0.1)
    assert r["strength"].sum() <= 1


def test_first_cycle_is_the_dominant_period(sunspots, elnino):
    # reference: dominant_period on the same rows (sunspots ~11 years, El Nino 12 months)
    rows = [sunspots, elnino, hourly_load(4, 1)]
    r = periods(Ragged.from_list(rows))
    first = r.fields["period"][r.offsets[:-1]]
    np.testing.assert_allclose(first, dominant_period(Ragged.from_list(rows)), rtol=1e-9)
    season = seasonality(Ragged.from_list(rows))
    np.testing.assert_allclose(r.fields["p_value"][r.offsets[:-1]], season["p_value"], rtol=1e-9)
    assert 10 <= first[0] <= 12 and abs(first[1] - 12) < 0.3


def test_co2_yearly_cycle_and_no_harmonics_reported():
    # reference: statsmodels.datasets.co2 (weekly, gaps interpolated): the annual cycle is 52.18
    # weeks; its half-year harmonic (26.09) is part of its shape, not a new cycle
    sm = pytest.importorskip("statsmodels.api")
    co2 = sm.datasets.co2.load_pandas().data["co2"].interpolate().to_numpy()
    r = records(periods(Ragged.from_list([co2]), k=3), 0)
    assert r["period"][0] == pytest.approx(52.18, abs=0.1)
    n = len(co2)
    for p in r["period"][1:]:
        for j in range(2, 20):
            assert abs(n / p - j * n / r["period"][0]) > 0.5


def test_p_values_on_white_noise():
    # seeded calibration: Fisher's test of the first peak is exact (about 5 % below 0.05); the
    # later tests are exact when the earlier cycles are real and conservative when, as here, they
    # were noise themselves
    rng = np.random.default_rng(11)
    x = rng.standard_normal((2000, 128))
    r = periods(Ragged(x.ravel().copy(), np.arange(0, x.size + 1, 128, dtype=np.int64)), k=3)
    p = r.fields["p_value"].reshape(2000, 3)
    first = (p[:, 0] < 0.05).mean()
    assert 0.035 < first < 0.065
    assert ((p[:, 1:] < 0.05).mean(axis=0) <= 0.065).all()


@pytest.mark.parametrize("walk", [False, True])
def test_p_values_hold_against_red_noise(walk):
    # seeded calibration: AR(1) rows (phi = 0.8) and random walks have no cycle, but a red
    # spectrum; every reported p below 0.05 in at most about 5 % of the runs (conservative)
    rng = np.random.default_rng(13)
    shocks = rng.standard_normal((1500, 200))
    x = np.cumsum(shocks, axis=1) if walk else signal.lfilter([1.0], [1.0, -0.8], shocks, axis=1)
    r = periods(Ragged(x.ravel().copy(), np.arange(0, x.size + 1, 200, dtype=np.int64)), k=3)
    p = r.fields["p_value"].reshape(1500, 3)
    assert ((p < 0.05).mean(axis=0) <= 0.05 + 4 * np.sqrt(0.05 * 0.95 / 1500)).all()


def test_second_p_value_is_calibrated_after_a_real_cycle():
    # seeded calibration: one strong 12-step cycle plus noise; the second test sees noise only
    rng = np.random.default_rng(12)
    t = np.arange(240)
    x = 3 * np.cos(2 * np.pi * t / 12 + rng.uniform(0, 6, (2000, 1))) + rng.standard_normal((2000, 240))
    r = periods(Ragged(x.ravel().copy(), np.arange(0, x.size + 1, 240, dtype=np.int64)), k=2)
    p = r.fields["p_value"].reshape(2000, 2)
    assert (np.abs(r.fields["period"].reshape(2000, 2)[:, 0] - 12) < 0.2).all()
    assert 0.03 < (p[:, 1] < 0.05).mean() < 0.07


def test_rows_answer_the_same_alone_and_in_a_batch(sunspots):
    rng = np.random.default_rng(3)
    gappy = hourly_load(3, 2)
    gappy[rng.choice(len(gappy), 40, replace=False)] = np.nan
    rows = [sunspots, gappy, rng.standard_normal(100), None, [], [1.0, 2.0, 3.0], np.full(30, 2.0), sunspots[:50]]
    together = periods(Ragged.from_list(rows), k=3)
    for i, x in enumerate(rows):
        alone = periods(Ragged.from_list([x]), k=3)
        assert together.row_valid[i] == alone.row_valid[0]
        for name, values in together.row(i).items():
            np.testing.assert_array_equal(values, alone.row(0)[name])
    counts = np.diff(together.offsets).tolist()
    # NULL list, empty, too short, constant: no answer (invalid rows without records)
    assert counts[3:7] == [0, 0, 0, 0] and counts[0] == 3
    assert together.row_valid.tolist() == [True, True, True, False, False, False, False, True]


def test_period_range_and_k():
    x = hourly_load(6, 4)
    r = records(periods(Ragged.from_list([x]), k=2, min_period=30), 0)
    assert abs(r["period"][0] - 168) < 3 and (r["period"] >= 30).all()
    r = records(periods(Ragged.from_list([x]), k=1, max_period=100), 0)
    assert len(r["period"]) == 1 and abs(r["period"][0] - 24) < 0.05


def test_bad_arguments_are_errors_naming_the_function():
    b = Ragged.from_list([np.arange(30.0)])
    for kwargs, word in [({"k": 0}, "k"), ({"k": 1.5}, "k"), ({"min_period": 1}, "min_period"),
                         ({"min_period": 10, "max_period": 5}, "max_period")]:  # fmt: skip
        with pytest.raises(ValueError, match=f"periods: {word}"):
            periods(b, **kwargs)
