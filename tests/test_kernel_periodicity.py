"""The periodicity kernels: dominant period, seasonality strength and Fisher's g test."""

from fractions import Fraction
from math import comb, floor

import numpy as np
import pytest
from scipy import optimize, signal

from tsql.kernels.periodicity import dominant_period, fisher_g_pvalue, seasonality
from tsql.kernels.ragged import Ragged


def one(x) -> Ragged:
    return Ragged.from_list([x])


def cycle(n: int, period: float, phase: float = 0.0) -> np.ndarray:
    return np.cos(2 * np.pi * np.arange(n) / period + phase)


# --------------------------------------------------------------------------------------------
# shipped data sets with a known cycle
# --------------------------------------------------------------------------------------------


def test_sunspot_cycle_is_about_eleven_years(sunspots):
    # reference: statsmodels.datasets.sunspots (yearly, 1700-2008); the solar cycle is about
    # 11 years (textbook fact)
    period = dominant_period(one(sunspots))[0]
    assert 10.0 <= period <= 12.0
    s = seasonality(one(sunspots))
    assert s["period"][0] == period
    # the cycle is strongly non-sinusoidal and wanders in length and height, so its three
    # harmonics explain a real but partial share of the variance
    assert 0.2 < s["strength"][0] < 0.8
    assert s["p_value"][0] < 1e-10


def test_monthly_sea_surface_temperature_has_a_twelve_month_cycle():
    # reference: statsmodels.datasets.elnino, monthly sea-surface temperatures 1950-2010;
    # the annual cycle is 12 months (calendar fact)
    elnino = pytest.importorskip("statsmodels.api").datasets.elnino.load_pandas().data
    months = ["JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT", "NOV", "DEC"]
    x = elnino[months].to_numpy(dtype=float).ravel()  # year by year, month by month
    assert dominant_period(one(x))[0] == pytest.approx(12.0, abs=0.3)
    s = seasonality(one(x))
    assert s["period"][0] == pytest.approx(12.0, abs=0.3)
    assert s["strength"][0] > 0.5
    assert s["p_value"][0] < 1e-20


def test_yearly_cycles_of_shipped_monthly_series_stand_out_of_their_red_background():
    # reference: monthly international airline passengers 1949-1960 (Box & Jenkins series G,
    # shipped in statsmodels' SARIMAX test results) and statsmodels.datasets.co2 as monthly means
    # (weekly Mauna Loa 1958-2001, empty months interpolated); both wander and trend, and both
    # have a yearly cycle (calendar fact)
    sm = pytest.importorskip("statsmodels.api")
    results = pytest.importorskip("statsmodels.tsa.statespace.tests.results.results_sarimax")
    airline = np.asarray(results.air2_data, dtype=float)
    co2 = sm.datasets.co2.load_pandas().data["co2"].resample("MS").mean().interpolate().to_numpy()
    s = seasonality(Ragged.from_list([airline, np.log(airline), co2]))
    np.testing.assert_allclose(s["period"], 12.0, atol=0.15)
    assert (s["p_value"] < 1e-8).all()


def test_wandering_shipped_series_are_not_called_seasonal(nile):
    # reference: statsmodels.datasets.macrodata (US quarterly 1959-2009: real GDP, CPI and M1 in
    # levels, trending and wandering without a cycle) and statsmodels.datasets.nile (annual flow,
    # a level shift in 1898); Fisher's white-noise test alone gives realgdp p = 1e-11, CPI 4e-48
    # and M1 1e-26 at their longest allowed period
    macro = pytest.importorskip("statsmodels.api").datasets.macrodata.load_pandas().data
    rows = [macro[name].to_numpy(dtype=float) for name in ("realgdp", "cpi", "m1")] + [nile]
    assert (seasonality(Ragged.from_list(rows))["p_value"] > 0.01).all()


# --------------------------------------------------------------------------------------------
# off-grid refinement
# --------------------------------------------------------------------------------------------


def test_twelve_sample_cycle_in_thirty_samples_for_any_phase():
    # reference: the construction; the Fourier grid of 30 samples offers only 10 and 15
    phases = np.linspace(0, 2 * np.pi, 48, endpoint=False)
    t = np.arange(30)
    pure = dominant_period(Ragged.from_list([cycle(30, 12, ph) for ph in phases]))
    np.testing.assert_allclose(pure, 12.0, atol=1e-4)
    with_trend = dominant_period(Ragged.from_list([cycle(30, 12, ph) + 0.05 * t - 3 for ph in phases]))
    np.testing.assert_allclose(with_trend, 12.0, atol=1e-4)
    rng = np.random.default_rng(2024)
    for sigma in (0.1, 0.15):  # light and moderate noise
        rows = [cycle(30, 12, ph) + sigma * rng.standard_normal(30) for ph in np.linspace(0, 6.283, 200)]
        got = dominant_period(Ragged.from_list(rows))
        assert np.all(np.abs(got - 12.0) <= 0.6), (sigma, got[np.argmax(np.abs(got - 12))])


def test_pure_sinusoids_are_recovered_off_the_grid():
    # reference: the construction (a sinusoid of known period, with offset and trend)
    rng = np.random.default_rng(11)
    rows, truth = [], []
    for n in (20, 50, 97, 400, 1000):
        for _ in range(40):
            period = rng.uniform(2.2, n / 2.2)
            t = np.arange(n)
            rows.append(3 * cycle(n, period, rng.uniform(0, 2 * np.pi)) + rng.uniform(-1, 1) * t / n + 7)
            truth.append(period)
    got = dominant_period(Ragged.from_list(rows))
    np.testing.assert_allclose(got, truth, rtol=1e-5)


def sinusoid_rss(x: np.ndarray, f: float) -> float:
    t = np.arange(len(x))
    a = np.column_stack([np.ones(len(x)), t, np.cos(2 * np.pi * f * t), np.sin(2 * np.pi * f * t)])
    r = x - a @ np.linalg.lstsq(a, x, rcond=None)[0]
    return r @ r


def test_refined_frequency_maximises_the_least_squares_sinusoid_fit():
    # reference: numpy.linalg.lstsq of [1, t, cos, sin] on a dense frequency grid within one
    # Fourier bin of the answer (brute force)
    rng = np.random.default_rng(5)
    for n, period, sigma in [(30, 12, 0.5), (64, 9.3, 1.0), (200, 33.3, 2.0), (309, 11.1, 1.0)]:
        x = cycle(n, period, rng.uniform(0, 6)) + sigma * rng.standard_normal(n)
        got = dominant_period(one(x))[0]
        freqs = 1 / got + np.linspace(-1, 1, 2001) / n
        freqs = freqs[(freqs >= 2 / n) & (freqs <= 0.5)]

        brute = freqs[np.argmin([sinusoid_rss(x, f) for f in freqs])]
        assert abs(1 / got - brute) <= 1.5 / n / 1000  # the grid spacing is 1 / (1000 n)
        assert sinusoid_rss(x, 1 / got) <= sinusoid_rss(x, brute) * (1 + 1e-9)


def test_period_limits_are_respected():
    # reference: the construction (cycles of 5 and 12 samples, the 5-cycle the stronger; each
    # one's leakage shifts the other's single-sinusoid optimum slightly, hence 0.01)
    n = 240
    x = cycle(n, 5, 0.3) + 0.7 * cycle(n, 12, 1.0)
    b = one(x)
    assert dominant_period(b)[0] == pytest.approx(5, abs=0.01)
    assert dominant_period(b, max_period=8)[0] == pytest.approx(5, abs=0.01)
    assert dominant_period(b, min_period=8)[0] == pytest.approx(12, abs=0.01)
    assert dominant_period(b, min_period=8, max_period=20)[0] == pytest.approx(12, abs=0.01)
    # only 6..10 allowed: neither cycle is in range, the answer stays inside it
    inside = dominant_period(b, min_period=6, max_period=10)[0]
    assert 6 <= inside <= 10
    # a cycle longer than half the record is never reported: at most n / 2
    assert dominant_period(one(cycle(30, 20)))[0] <= 15
    # no Fourier period fits: n / 2 < min_period, or the range holds no period n / k
    assert np.isnan(dominant_period(one(cycle(10, 5)), min_period=6)[0])
    assert np.isnan(dominant_period(one(cycle(40, 5)), min_period=10.5, max_period=13)[0])
    s = seasonality(b, min_period=8)
    assert s["period"][0] == pytest.approx(12, abs=0.01)


# --------------------------------------------------------------------------------------------
# strength
# --------------------------------------------------------------------------------------------


def reference_strength(x: np.ndarray, period: float) -> float:
    # reference: numpy.polyfit line through the present values gives TSS; one numpy.linalg.lstsq
    # of a constant, t and the cos/sin pairs at j / period, j = 1..min(3, floor(period / 2)),
    # on the present values gives RSS
    t = np.arange(len(x), dtype=float)
    keep = ~np.isnan(x)
    t, x = t[keep], x[keep]
    resid = x - np.polyval(np.polyfit(t, x, 1), t)
    harmonics = int(max(1, min(3, np.floor(period / 2))))
    cols = [np.ones_like(t), t - t.mean()]
    for j in range(1, harmonics + 1):
        cols += [np.cos(2 * np.pi * j * t / period), np.sin(2 * np.pi * j * t / period)]
    a = np.column_stack(cols)
    r = x - a @ np.linalg.lstsq(a, x, rcond=None)[0]
    return 1 - (r @ r) / (resid @ resid)


@pytest.mark.parametrize("n", [24, 30, 48, 120])
def test_strength_does_not_depend_on_the_phase(n):
    # reference: the construction; a noise-free cycle is all cycle whatever its phase (a line
    # fitted before the harmonics used to take 13 % of a 12-step sine over 24 points, and
    # nearly nothing of the cosine)
    phases = np.linspace(0, 2 * np.pi, 16, endpoint=False)
    rows = [cycle(n, 12, phase) for phase in phases] + [np.sin(2 * np.pi * np.arange(n) / 12)]
    s = seasonality(Ragged.from_list(rows))
    assert np.all(np.abs(s["period"] - 12) < 1e-4)
    assert np.all(s["strength"] > 1 - 1e-9)
    # with noise, at every phase, the strength is the joint least-squares definition
    rng = np.random.default_rng(17)
    noise = 0.3 * rng.standard_normal(n)
    pinned = [cycle(n, 12, phase) + noise for phase in phases]
    s = seasonality(Ragged.from_list(pinned))
    for i, x in enumerate(pinned):
        assert s["strength"][i] == pytest.approx(reference_strength(x, s["period"][i]), rel=1e-9)


def test_strength_matches_direct_least_squares():
    rng = np.random.default_rng(3)
    rows = []
    for n, period, sigma in [(48, 12, 0.3), (100, 4.5, 1.0), (365, 7, 2.0), (240, 30, 0.1), (50, 2.5, 0.5)]:
        x = cycle(n, period, 1.0) + 0.4 * cycle(n, period / 2, 0.2) + sigma * rng.standard_normal(n)
        rows.append(x)
        # one in eight missing, then two in three missing (the kernel sums those the other way)
        for missing in (n // 8, n - n // 3):
            gappy = x.copy()
            gappy[rng.choice(n, missing, replace=False)] = np.nan
            rows.append(gappy)
    s = seasonality(Ragged.from_list(rows))
    for i, x in enumerate(rows):
        assert s["strength"][i] == pytest.approx(reference_strength(x, s["period"][i]), rel=1e-9, abs=1e-12)


def test_strength_of_harmonic_signal_and_of_noise():
    # reference: the construction; a 24-sample cycle made of three harmonics
    n = 24 * 10
    x = cycle(n, 24) + 0.5 * cycle(n, 12, 0.4) + 0.25 * cycle(n, 8, 2.0)
    s = seasonality(one(x))
    # the single-sinusoid optimum is pulled slightly by the harmonics' leakage
    assert s["period"][0] == pytest.approx(24, abs=0.05)
    assert s["strength"][0] > 0.99
    # the red background's lag-1 coefficient is fitted to the whole series, cycle included (0.97
    # here, no noise to speak of), so the harmonics weigh against the peak: p about 2e-25
    assert s["p_value"][0] < 1e-20
    # with the period pinned to 24 the three harmonics, fitted with the line, explain it all
    pinned = seasonality(one(x), min_period=24, max_period=24)
    assert pinned["period"][0] == 24
    assert pinned["strength"][0] == pytest.approx(reference_strength(x, 24.0), rel=1e-12)
    assert pinned["strength"][0] > 1 - 1e-9
    noise = np.random.default_rng(8).standard_normal(1000)
    assert seasonality(one(noise))["strength"][0] < 0.05


# --------------------------------------------------------------------------------------------
# Fisher's g
# --------------------------------------------------------------------------------------------


def exact_pvalue(x: float, m: int) -> float:
    # reference: Fisher (1929) null distribution in exact rational arithmetic (fractions, math.comb)
    q = Fraction(x)
    terms = range(1, min(m, floor(1 / q)) + 1)
    total = sum((-1) ** (j - 1) * comb(m, j) * (1 - j * q) ** (m - 1) for j in terms)
    return min(max(float(total), 0.0), 1.0)


@pytest.mark.parametrize("m", [1, 2, 3, 5, 10, 25, 60, 150])
def test_fisher_pvalue_matches_exact_rational_arithmetic(m):
    xs = np.unique(np.concatenate([np.geomspace(max(0.5 / m, 1e-3), 1.0, 40), np.linspace(1 / m, 1.0, 25)]))
    got = fisher_g_pvalue(xs, np.full(len(xs), m))
    want = np.array([exact_pvalue(float(x), m) for x in xs])
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-8)
    small = want < 0.5
    np.testing.assert_allclose(got[small], want[small], rtol=1e-10, atol=0)


def test_fisher_pvalue_closed_forms_and_domain():
    # reference: m = 2 gives P(g > x) = 2 (1 - x) for x >= 1/2 (the formula's single term);
    # g never falls below 1/m, so P(g > x) = 1 there; g = 1 is the largest possible value
    xs = np.linspace(0.5, 1.0, 11)
    np.testing.assert_allclose(fisher_g_pvalue(xs, np.full(11, 2)), 2 * (1 - xs), rtol=1e-14, atol=1e-15)
    assert fisher_g_pvalue(np.array([0.9]), np.array([1]))[0] == 1.0
    below = fisher_g_pvalue(np.array([0.01, 0.05, 0.1]), np.array([100, 20, 10]))  # x <= 1 / m
    np.testing.assert_allclose(below, 1.0, atol=1e-9)
    assert fisher_g_pvalue(np.array([1.0]), np.array([7]))[0] == 0.0
    bad = fisher_g_pvalue(np.array([np.nan, -0.1, 1.5, 0.5]), np.array([5, 5, 5, 0]))
    assert np.isnan(bad).all()
    # broadcasts, keeps shape
    assert fisher_g_pvalue(np.full((2, 3), 0.4), 10).shape == (2, 3)


# Critical values g such that P(G > g) = alpha, recalled from memory of the published table
# (Fisher 1929; reproduced e.g. in W. W. S. Wei, "Time Series Analysis: Univariate and
# Multivariate Methods", 2nd ed., table of critical values for Fisher's test). m: (5 %, 1 %).
PUBLISHED_CRITICAL_VALUES = {
    3: (0.8709, 0.9423),
    4: (0.7679, 0.8643),
    5: (0.6838, 0.7885),
    6: (0.6161, 0.7218),
    7: (0.5612, 0.6644),
    8: (0.5157, 0.6152),
    9: (0.4775, 0.5727),
    10: (0.4450, 0.5358),
    15: (0.3346, 0.4069),
    20: (0.2704, 0.3297),
}


@pytest.mark.parametrize("m", sorted(PUBLISHED_CRITICAL_VALUES))
def test_fisher_critical_values_agree_with_the_published_table(m):
    def p_value(x: float) -> float:
        return fisher_g_pvalue(np.array([x]), np.array([m]))[0]

    for alpha, table in zip((0.05, 0.01), PUBLISHED_CRITICAL_VALUES[m], strict=True):
        g = optimize.brentq(lambda x, a=alpha: p_value(x) - a, 1e-3, 1 - 1e-9, xtol=1e-12)
        assert abs(g - table) <= 1.01e-4, (m, alpha, g, table)  # the table has four decimals


def test_fisher_pvalue_is_uniform_under_exact_null():
    # reference: under the null the m ordinates are i.i.d. exponential (seeded simulation);
    # P(p < a) = a within four binomial standard deviations
    rng = np.random.default_rng(1929)
    draws = 40_000
    for m in (4, 40, 400):
        ordinates = rng.exponential(size=(draws, m))
        p = fisher_g_pvalue(ordinates.max(axis=1) / ordinates.sum(axis=1), np.full(draws, m))
        for a in (0.05, 0.01):
            assert abs(np.mean(p < a) - a) <= 4 * np.sqrt(a * (1 - a) / draws), (m, a)


def test_seasonality_p_value_is_calibrated_on_white_noise():
    # reference: seeded Gaussian white noise, for which Fisher's null holds; the fraction with
    # p < a stays within four binomial standard deviations of a
    rng = np.random.default_rng(1898)
    rows = 6000
    for n in (64, 301):
        p = seasonality(Ragged.from_list(list(rng.standard_normal((rows, n)))))["p_value"]
        for a in (0.05, 0.01):
            assert abs(np.mean(p < a) - a) <= 4 * np.sqrt(a * (1 - a) / rows), (n, a, np.mean(p < a))


@pytest.mark.parametrize("n,min_period,max_period", [(200, 2, None), (201, 2, None), (200, 3, 40), (97, 5, 9)])
def test_g_statistic_matches_scipy_periodogram(n, min_period, max_period):
    # reference: scipy.signal.periodogram with linear detrending; g over the allowed Fourier
    # periods n / k (k >= 2, within the limits), Nyquist excluded
    rng = np.random.default_rng(n)
    x = cycle(n, 7.5) * 0.3 + rng.standard_normal(n) + 0.01 * np.arange(n)
    freqs, power = signal.periodogram(x, detrend="linear")
    k = np.arange(len(freqs))
    allowed = (k >= 2) & (2 * k < n) & (n / np.maximum(k, 1) >= min_period)
    if max_period is not None:
        allowed &= n / np.maximum(k, 1) <= max_period
    g = power[allowed].max() / power[allowed].sum()
    want = fisher_g_pvalue(np.array([g]), np.array([allowed.sum()]))[0]
    got = seasonality(one(x), min_period=min_period, max_period=max_period)["p_value"][0]
    assert got == pytest.approx(want, rel=1e-8)


def red_noise(rng, phi: float, rows: int, n: int) -> np.ndarray:
    """Seeded AR(1) rows (a random walk for phi = 1), started in their stationary state."""
    shocks = rng.standard_normal((rows, n))
    if phi == 1.0:
        return np.cumsum(shocks, axis=1)
    return signal.lfilter([1.0], [1.0, -phi], shocks, axis=1, zi=shocks[:, :1] / np.sqrt(1 - phi * phi))[0]


@pytest.mark.parametrize("phi", [0.3, 0.5, 0.8, 0.95, 1.0])
def test_seasonality_p_value_holds_against_red_noise(phi):
    # seeded calibration: AR(1) and random-walk rows have no cycle; their spectrum is red, so the
    # white-noise test alone calls most of them seasonal (a random walk of 200 points: p < 0.05
    # in every run). The fraction with p < a must not exceed a by more than four binomial
    # standard deviations (the test is conservative under strong red noise)
    rng = np.random.default_rng(int(phi * 100))
    rows = 1500
    for n in (72, 300, 1000):
        p = seasonality(Ragged.from_list(list(red_noise(rng, phi, rows, n))))["p_value"]
        for a in (0.05, 0.01):
            assert np.mean(p < a) - a <= 4 * np.sqrt(a * (1 - a) / rows), (phi, n, a, np.mean(p < a))


def test_random_walks_on_weekdays_are_not_seasonal():
    # seeded calibration: a random walk seen on weekdays only, on a daily grid (weekends missing);
    # zero-filling alone would throw its low-frequency power onto the weekly frequencies
    rng = np.random.default_rng(7)
    x = red_noise(rng, 1.0, 1000, 7 * 150)
    x[:, np.arange(x.shape[1]) % 7 >= 5] = np.nan
    p = seasonality(Ragged.from_list(list(x)))["p_value"]
    assert np.mean(p < 0.05) <= 0.05 + 4 * np.sqrt(0.05 * 0.95 / 1000)


@pytest.mark.parametrize("n", [200, 301])
def test_red_background_matches_scipy_periodogram(n):
    # reference: scipy.signal.periodogram with linear detrending, whitened by the AR(1) spectrum
    # 1 / (1 - 2 phi cos w + phi^2) with phi the circular lag-1 autocorrelation of the detrended
    # series computed in the time domain; the p-value is the larger of the white and the red test
    # of the periodogram peak
    rng = np.random.default_rng(n)
    x = red_noise(rng, 0.7, 1, n)[0] + 2.0 * cycle(n, 9.3) + 0.01 * np.arange(n)
    freqs, power = signal.periodogram(x, detrend="linear")
    d = signal.detrend(x)
    phi = (d * np.roll(d, -1)).sum() / (d * d).sum()
    assert phi > 1.96 / np.sqrt(n)  # red enough for the red background to count
    k = np.arange(len(freqs))
    allowed = (k >= 2) & (2 * k < n)
    peak = np.argmax(np.where((k >= 2) & (2 * k <= n), power, -1.0))
    want = 0.0
    for ordinates in (power, power * (1 - 2 * phi * np.cos(2 * np.pi * freqs) + phi * phi)):
        g = ordinates[peak] / ordinates[allowed].sum()
        want = max(want, fisher_g_pvalue(np.array([g]), np.array([allowed.sum()]))[0])
    got = seasonality(one(x))["p_value"][0]
    assert got == pytest.approx(want, rel=1e-8)
    assert got > fisher_g_pvalue(np.array([power[allowed].max() / power[allowed].sum()]), np.array([allowed.sum()]))[0]


# --------------------------------------------------------------------------------------------
# rows without an answer, gaps
# --------------------------------------------------------------------------------------------


def test_rows_without_an_answer_are_nan():
    nan = np.nan
    rows = [
        None,  # NULL row
        [],  # empty
        [1.0, 2.0, 3.0],  # too short
        [5.0] * 20,  # constant
        [nan] * 12,  # all missing
        list(np.arange(50) * 0.3 + 2),  # a straight line: constant after detrending
        [1.0, nan, nan, 2.0, nan, 3.0, nan, nan],  # three present values
        list(cycle(20, 5)[:10]) + [np.inf] + list(cycle(20, 5)[11:]),  # not a number
        list(1e9 + np.arange(40.0)),  # large offset and trend, nothing else
    ]
    batch = Ragged.from_list(rows)
    assert np.isnan(dominant_period(batch)).all()
    s = seasonality(batch)
    for key in ("period", "strength", "p_value"):
        assert s[key].shape == (len(rows),)
        assert np.isnan(s[key]).all(), key


def test_four_values_have_a_period_but_nothing_for_fisher_to_test():
    # docs/behaviour.md: with 4 values only a period of 2 fits, and that is Nyquist, so Fisher's g
    # has no ordinate to compare the peak with (m = 0): period and strength, NULL p-value;
    # a fifth value brings the period of 2.5 into range and a p-value with it
    x = [1.0, 2.1, 0.9, 2.0]
    s = seasonality(one(x))
    assert np.isfinite(s["period"][0]) and np.isfinite(s["strength"][0])
    assert np.isnan(s["p_value"][0])
    s5 = seasonality(one(x + [1.1]))
    assert 0.0 <= s5["p_value"][0] <= 1.0


def test_series_with_gaps():
    # reference: the construction (a 12-sample cycle, one value in eight missing); with gaps
    # the period is approximate (zero-filled), the strength is exact on the present values
    rng = np.random.default_rng(17)
    n = 144
    x = 10 + cycle(n, 12, 0.7) + 0.1 * rng.standard_normal(n)
    x[rng.choice(n, n // 8, replace=False)] = np.nan
    x[40:46] = np.nan
    s = seasonality(one(x))
    assert s["period"][0] == pytest.approx(12, abs=0.2)
    assert s["strength"][0] == pytest.approx(reference_strength(x, s["period"][0]), rel=1e-9)
    assert s["strength"][0] > 0.9
    assert s["p_value"][0] < 1e-10
    # missing values at the ends only: the same cycle
    padded = np.concatenate([[np.nan] * 5, cycle(120, 10), [np.nan] * 3])
    assert dominant_period(one(padded))[0] == pytest.approx(10, abs=0.3)


def test_answers_stay_in_their_ranges():
    # reference: the definitions (period in [min_period, min(max_period, n / 2)], strength and
    # p-value in [0, 1], all three NaN together); seeded random rows of every kind and scale
    rng = np.random.default_rng(1)
    for _ in range(60):
        rows = []
        for kind in range(20):
            n = int(rng.integers(0, 60))
            x = rng.standard_normal(n) * 10 ** rng.uniform(-8, 8) + rng.uniform(-1e6, 1e6) * (kind % 5 == 1)
            if kind % 5 == 2 and n:
                x[rng.random(n) < 0.5] = np.nan
            if kind % 5 == 3:
                x = np.round(x)  # ties
            rows.append(x)
        low = float(rng.choice([2, 2.5, 3, 7]))
        high = None if rng.random() < 0.5 else low + float(rng.uniform(0, 20))
        s = seasonality(Ragged.from_list(rows), low, high)
        assert np.array_equal(dominant_period(Ragged.from_list(rows), low, high), s["period"], equal_nan=True)
        for i, x in enumerate(rows):
            if np.isnan(s["period"][i]):
                assert np.isnan(s["strength"][i]) and np.isnan(s["p_value"][i])
                continue
            top = len(x) / 2 if high is None else min(len(x) / 2, high)
            assert low <= s["period"][i] <= top
            assert 0 <= s["strength"][i] <= 1
            assert 0 <= s["p_value"][i] <= 1 or np.isnan(s["p_value"][i])  # NaN: only Nyquist allowed


# --------------------------------------------------------------------------------------------
# determinism
# --------------------------------------------------------------------------------------------


def mixed_rows(seed: int, count: int) -> list:
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(count):
        kind = i % 9
        n = int(rng.integers(0, 400))
        x = rng.standard_normal(n) + 2 * cycle(n, rng.uniform(2, max(2.5, n / 2)), rng.uniform(0, 6))
        if kind == 0:
            rows.append(None)
        elif kind == 1 and n > 5:
            x[rng.integers(0, n, 3)] = np.nan
            rows.append(x)
        elif kind == 2:
            rows.append(np.full(n, 3.0))
        elif kind == 3:
            rows.append(x[: int(rng.integers(0, 8))])
        else:
            rows.append(x)
    return rows


def assert_same(a: dict, b: dict) -> None:
    for key in a:
        assert np.array_equal(a[key], b[key], equal_nan=True), key


def test_rows_answer_the_same_alone_and_in_any_batch():
    rows = mixed_rows(99, 240)
    rows += [cycle(300, 12.5, i) + 0.01 * i for i in range(12)]  # a bucket of equal lengths
    together = seasonality(Ragged.from_list(rows), min_period=2.5)
    period_only = dominant_period(Ragged.from_list(rows), min_period=2.5)
    assert np.array_equal(together["period"], period_only, equal_nan=True)
    alone = [seasonality(Ragged.from_list([r]), min_period=2.5) for r in rows]
    for key in together:
        assert np.array_equal(together[key], np.concatenate([a[key] for a in alone]), equal_nan=True), key
    reversed_ = seasonality(Ragged.from_list(rows[::-1]), min_period=2.5)
    assert_same(together, {k: v[::-1] for k, v in reversed_.items()})
    halves = [seasonality(Ragged.from_list(rows[i::2]), min_period=2.5) for i in (0, 1)]
    for key in together:
        assert np.array_equal(together[key][0::2], halves[0][key], equal_nan=True)
        assert np.array_equal(together[key][1::2], halves[1][key], equal_nan=True)


def test_equal_length_batch_matches_rows_alone():
    # the whole batch is one length bucket without gaps (the zero-copy path)
    rng = np.random.default_rng(4)
    rows = list(rng.standard_normal((64, 1000)) + cycle(1000, 52.18, 0.5))
    together = seasonality(Ragged.from_list(rows))
    for i in (0, 1, 31, 63):
        alone = seasonality(Ragged.from_list([rows[i]]))
        for key in together:
            assert together[key][i] == alone[key][0], key
    np.testing.assert_allclose(together["period"], 52.18, atol=1.0)
