"""Mann–Kendall test and Sen's slope (tsql.kernels.trend) against outside references."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.datasets
from scipy import stats

from tsql.kernels import trend
from tsql.kernels.ragged import Ragged
from tsql.kernels.trend import PAIRWISE_MAX, trend_test

KEYS = ("tau", "p_value", "slope")


def run(series: list) -> dict[str, np.ndarray]:
    return trend_test(Ragged.from_list(series))


def present(x) -> tuple[np.ndarray, np.ndarray]:
    """Present values and their 0-based positions."""
    x = np.asarray(x, dtype=np.float64)
    t = np.flatnonzero(~np.isnan(x))
    return x[t], t.astype(np.float64)


def plain_mann_kendall(x) -> tuple[int, float]:
    """S and two-sided p written out from the textbook definition (Mann 1945;
    Kendall 1975): O(n^2) signs, tie-corrected variance, continuity correction."""
    v, _ = present(x)
    n = len(v)
    s = 0
    vals = v.tolist()
    for i in range(n):
        for j in range(i + 1, n):
            s += (vals[j] > vals[i]) - (vals[j] < vals[i])
    _, counts = np.unique(v, return_counts=True)
    var = (n * (n - 1) * (2 * n + 5) - sum(c * (c - 1) * (2 * c + 5) for c in counts)) / 18
    z = 0.0 if s == 0 else (s - math.copysign(1, s)) / math.sqrt(var)
    return int(s), float(2 * stats.norm.sf(abs(z)))  # reference: scipy.stats.norm


def check_against_scipy(series: list, rtol: float = 1e-12) -> None:
    res = run(series)
    for k, x in enumerate(series):
        v, t = present(x)
        # reference: scipy.stats.theilslopes (slope), scipy.stats.kendalltau (tau-b)
        np.testing.assert_allclose(res["slope"][k], stats.theilslopes(v, t).slope, rtol=rtol, atol=0)
        np.testing.assert_allclose(res["tau"][k], stats.kendalltau(t, v).statistic, rtol=1e-12)


def count_check(v: np.ndarray, t: np.ndarray, med: float) -> None:
    """Independent check that ``med`` is the median of all pairwise slopes,
    by counting the slopes below, at and above it lag by lag (O(n^2) time,
    O(n) memory) and locating the neighbouring slopes."""
    n = len(v)
    npairs = n * (n - 1) // 2
    k1, k2 = (npairs + 1) // 2, npairs // 2 + 1
    lt = eq = 0
    below, above = -np.inf, np.inf
    for d in range(1, n):
        s = (v[d:] - v[:-d]) / (t[d:] - t[:-d])
        lt += int(np.count_nonzero(s < med))
        eq += int(np.count_nonzero(s == med))
        if (s < med).any():
            below = max(below, s[s < med].max())
        if (s > med).any():
            above = min(above, s[s > med].min())
    if eq:  # med is itself the k1-th and k2-th slope
        assert lt < k1 and k2 <= lt + eq
    else:  # med is the mean of the two neighbouring order statistics
        assert lt == k1 and k2 == k1 + 1
        assert med == (below + above) / 2


# --------------------------------------------------------------------------- #
# hand-checkable examples
# --------------------------------------------------------------------------- #


def test_tiny_example_by_hand():
    # x = 1 2 4 3 5: 9 increasing pairs, 1 decreasing (4 -> 3): S = 8, tau = 8/10.
    # Slopes: lag 1: 1 2 -1 2; lag 2: 1.5 .5 .5; lag 3: 2/3 1; lag 4: 1
    # sorted: -1 .5 .5 .667 1 1 1 1.5 2 2 -> median (1 + 1)/2 = 1.
    # Var S = 5*4*15/18 = 50/3, z = (8 - 1)/sqrt(50/3) = 1.71464.
    r = run([[1.0, 2.0, 4.0, 3.0, 5.0]])
    assert r["tau"][0] == pytest.approx(0.8, rel=1e-15)
    assert r["slope"][0] == 1.0
    z = 7 / math.sqrt(50 / 3)
    assert r["p_value"][0] == pytest.approx(math.erfc(z / math.sqrt(2)), rel=1e-13)
    # 2 * (1 - Phi(1.7146)) = 0.0864 from a normal table (value recalled from memory)
    assert r["p_value"][0] == pytest.approx(0.0864, abs=2e-4)


def test_tiny_example_with_ties_by_hand():
    # x = 1 1 2: signs 0 + +, S = 2; one tied pair: tau-b = 2 / sqrt(3 * 2).
    # Var S = (3*2*11 - 2*1*9)/18 = 48/18, z = (2 - 1)/sqrt(48/18).
    # Slopes 0, 1, 1/2 -> median 1/2.
    r = run([[1.0, 1.0, 2.0]])
    assert r["tau"][0] == pytest.approx(2 / math.sqrt(6), rel=1e-15)
    assert r["slope"][0] == 0.5
    z = 1 / math.sqrt(48 / 18)
    assert r["p_value"][0] == pytest.approx(math.erfc(z / math.sqrt(2)), rel=1e-13)


def test_gap_keeps_true_spacing():
    # present values 0, 2, 4 at positions 0, 2, 4: every slope is 1 per step
    r = run([[0.0, np.nan, 2.0, np.nan, 4.0]])
    assert r["slope"][0] == 1.0
    assert r["tau"][0] == 1.0


# --------------------------------------------------------------------------- #
# datasets shipped with statsmodels
# --------------------------------------------------------------------------- #


def test_nile_downward_trend():
    x = statsmodels.datasets.nile.load_pandas().data["volume"].to_numpy(dtype=float)
    check_against_scipy([x])
    r = run([x])
    s, p = plain_mann_kendall(x)
    assert r["p_value"][0] == pytest.approx(p, rel=1e-9)
    # the annual flow fell after the 1890s: a clear downward trend
    assert r["slope"][0] < 0 and r["tau"][0] < 0 and r["p_value"][0] < 0.01


def test_sunspots_counting_route():
    x = statsmodels.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(dtype=float)
    assert len(x) > PAIRWISE_MAX  # one decimal: many ties, O(n log n) route
    check_against_scipy([x])
    s, p = plain_mann_kendall(x)
    assert run([x])["p_value"][0] == pytest.approx(p, rel=1e-9)


def test_co2_with_missing_weeks():
    x = statsmodels.datasets.co2.load_pandas().data["co2"].to_numpy(dtype=float)
    assert np.isnan(x).sum() > 0
    check_against_scipy([x])


# --------------------------------------------------------------------------- #
# seeded random data
# --------------------------------------------------------------------------- #

LENGTHS = [3, 4, 5, 17, PAIRWISE_MAX, PAIRWISE_MAX + 1, 250, 1200]


@pytest.mark.parametrize("n", LENGTHS)
def test_random_walks(n):
    rng = np.random.default_rng(100 + n)
    check_against_scipy([np.cumsum(rng.normal(size=n)) + 0.01 * np.arange(n) for _ in range(6)])


@pytest.mark.parametrize("n", LENGTHS)
def test_many_ties(n):
    rng = np.random.default_rng(200 + n)
    series = [
        rng.poisson(2.0, size=n).astype(float),  # small counts: median slope often exactly 0
        np.round(np.cumsum(rng.normal(size=n))),  # rounded walk
        np.round(np.arange(n) / 7 + rng.normal(size=n)),  # integer trend
        (rng.random(n) < 0.3).astype(float),  # binary
        np.round(np.cumsum(rng.normal(size=n)), 1),  # one decimal
    ]
    series = [s for s in series if np.ptp(s) > 0]
    check_against_scipy(series)


@pytest.mark.parametrize("n", [6, 60, 400, 2000])
def test_nan_gaps(n):
    rng = np.random.default_rng(300 + n)
    series = []
    for frac in (0.1, 0.5):
        x = np.cumsum(rng.normal(size=n))
        x[rng.random(n) < frac] = np.nan
        x[:2] = np.nan  # leading gap
        series.append(x)
    x = np.round(np.cumsum(rng.normal(size=n)))
    x[n // 3 : n // 2] = np.nan  # one long gap
    series.append(x)
    series = [s for s in series if (~np.isnan(s)).sum() >= 3 and np.nanmax(s) > np.nanmin(s)]
    check_against_scipy(series)


@pytest.mark.parametrize("k_final", [None, 20_000])
def test_near_linear_and_step_series(monkeypatch, k_final):
    # slopes of a line differ only by rounding; a step series has large
    # groups of exactly equal slopes.  With a small k_final more slopes sit
    # within rounding of the median than the final step may list, and the
    # answer is taken from the sampled slopes in the tiny bracket.
    if k_final is not None:
        monkeypatch.setattr(trend, "_K_FINAL", k_final)
    n = 1200
    t = np.arange(n)
    rng = np.random.default_rng(4)
    series = [
        0.1 * t + 5.0,
        -t / 3.0 + 1e6,
        (t // 250).astype(float),
        np.round(t / 90 + 0.2 * rng.normal(size=n)),
        1e9 + np.cumsum(rng.normal(size=n)),  # large offset
        1e-9 * np.cumsum(rng.normal(size=n)),  # tiny scale
        np.where(rng.random(n) < 0.01, 1e8, rng.normal(size=n)),  # outliers
    ]
    check_against_scipy(series)


def test_long_series_median_by_counting():
    # 20,000 points (2e8 slopes): too many for theilslopes' n x n matrices here,
    # so the median is checked by an independent lag-by-lag count
    rng = np.random.default_rng(20000)
    x = np.cumsum(rng.normal(size=20000)) + 0.003 * np.arange(20000)
    x[rng.random(20000) < 0.05] = np.nan
    r = run([x])
    v, t = present(x)
    count_check(v, t, r["slope"][0])
    # reference: scipy.stats.kendalltau (O(n log n)) for tau
    assert r["tau"][0] == pytest.approx(stats.kendalltau(t, v).statistic, rel=1e-12)


def test_pvalue_against_plain_implementation():
    rng = np.random.default_rng(5)
    series = [np.cumsum(rng.normal(size=n)) for n in (3, 8, 30, 150, 400)]
    series += [np.round(rng.normal(size=n)) for n in (10, 40, 200)]
    series += [rng.normal(size=60) + 0.05 * np.arange(60)]
    x = np.round(np.cumsum(rng.normal(size=300)))
    x[rng.random(300) < 0.3] = np.nan
    series.append(x)
    r = run(series)
    for k, x in enumerate(series):
        s, p = plain_mann_kendall(x)
        assert r["p_value"][k] == pytest.approx(p, rel=1e-9, abs=1e-300)


@pytest.mark.parametrize("n, rows", [(40, 4000), (150, 1500)])
def test_white_noise_p_calibrated(n, rows):
    rng = np.random.default_rng(n)
    r = run(list(rng.normal(size=(rows, n))))
    frac = float(np.mean(r["p_value"] < 0.05))
    sd = math.sqrt(0.05 * 0.95 / rows)  # binomial standard error
    assert abs(frac - 0.05) < 4 * sd
    assert np.all((r["p_value"] >= 0) & (r["p_value"] <= 1))


# --------------------------------------------------------------------------- #
# edge rows and batch behaviour
# --------------------------------------------------------------------------- #


def test_edge_rows_have_no_answer():
    series = [
        None,  # NULL list
        [],
        [1.0],
        [1.0, 2.0],
        [np.nan, 1.0, np.nan, 2.0],  # two present values
        [3.0, 3.0, 3.0, 3.0],  # constant
        [np.nan, 3.0, 3.0, np.nan, 3.0],  # constant with gaps
        [np.nan, np.nan, np.nan],
        [1.0, np.inf, 2.0, 3.0],
        [1.0, 3.0, 2.0],  # a real answer beside them
    ]
    r = run(series)
    for key in KEYS:
        assert np.isnan(r[key][:-1]).all(), key
        assert not np.isnan(r[key][-1])


def test_empty_batch():
    r = run([])
    assert all(r[key].shape == (0,) for key in KEYS)


def test_batch_independence():
    rng = np.random.default_rng(9)
    series = []
    for k in range(120):
        n = int(rng.choice([0, 2, 3, 5, 30, PAIRWISE_MAX, PAIRWISE_MAX + 1, 300, 1500]))
        kind = k % 4
        if kind == 0:
            x = np.cumsum(rng.normal(size=n))
        elif kind == 1:
            x = rng.poisson(3.0, size=n).astype(float)
        elif kind == 2:
            x = np.round(np.cumsum(rng.normal(size=n)), 1)
            x[rng.random(n) < 0.2] = np.nan
        else:
            x = np.full(n, 2.0)
        series.append(None if k % 17 == 0 else x)
    together = run(series)
    for k, x in enumerate(series):
        alone = run([x])
        for key in KEYS:
            np.testing.assert_array_equal(together[key][k], alone[key][0])
    # and the same rows in another order give the same answers
    perm = rng.permutation(len(series))
    shuffled = run([series[k] for k in perm])
    for key in KEYS:
        np.testing.assert_array_equal(shuffled[key], together[key][perm])


def test_routes_agree(monkeypatch):
    # the all-pairs route and the counting route are separate algorithms
    rng = np.random.default_rng(12)
    series = [np.cumsum(rng.normal(size=n)) for n in (3, 4, 9, 40, 100)]
    series += [np.round(rng.normal(size=n)) for n in (5, 50, 100)]
    pairwise = run(series)
    monkeypatch.setattr(trend, "PAIRWISE_MAX", 2)
    counting = run(series)
    for key in KEYS:
        np.testing.assert_array_equal(pairwise[key], counting[key])


def test_listing_outright_changes_no_answer(monkeypatch):
    # a bracket round may list the slopes of its window outright (_SPECULATE)
    # instead of counting at both ends; never, always and the default must
    # give the same answers, bit for bit, and theilslopes' slope
    rng = np.random.default_rng(21)
    series = [np.cumsum(rng.normal(size=n)) + 0.01 * np.arange(n) for n in (60, 300, 1000, 2500)]
    series += [np.round(rng.normal(size=n) * 3) + 0.002 * np.arange(n) for n in (200, 1500)]
    series += [np.where(rng.random(800) < 0.1, np.nan, rng.normal(size=800) + 0.005 * np.arange(800))]
    default = run(series)
    for speculate in (0, 10**6):
        monkeypatch.setattr(trend, "_SPECULATE", speculate)
        other = run(series)
        for key in KEYS:
            np.testing.assert_array_equal(other[key], default[key])
    check_against_scipy(series)


def test_secant_steps_and_rounds_agree(monkeypatch):
    # Sen's slope is found by secant steps on exact counts, else by bracketing
    # rounds from the start; the rounds alone (no secant step) must give the
    # same answers, bit for bit, and theilslopes' slope
    rng = np.random.default_rng(22)
    k = np.arange(1000)
    series = [np.cumsum(rng.normal(size=n)) for n in (60, 500, 1000)]  # far from 0: merge sorts
    series += [rng.normal(size=n) + 0.001 * np.arange(n) for n in (200, 1000)]  # near 0: insertion
    series += [100 + 2 * np.sin(2 * np.pi * k / 12) + rng.normal(size=1000)]
    series += [np.round(np.cumsum(rng.normal(size=n))) for n in (300, 1000)]  # tied slopes
    series += [rng.poisson(3.0, size=700).astype(float) + 0.01 * np.arange(700)]
    series += [np.where(rng.random(900) < 0.3, np.nan, np.cumsum(rng.normal(size=900)))]
    series += [0.5 * k + 1e-9 * rng.normal(size=1000)]  # slopes within rounding of each other
    default = run(series)
    monkeypatch.setattr(trend, "_SECANT", 0)
    rounds = run(series)
    for key in KEYS:
        np.testing.assert_array_equal(rounds[key], default[key])
    check_against_scipy(series)


def test_final_listing_from_either_side_of_its_window():
    # the last step lists a window's slopes from an order sorted below it, above it (one insertion
    # pass, up or down) or inside it (sorted below it first): the same middle slopes, bit for bit,
    # and theilslopes' slope
    rng = np.random.default_rng(31)
    t = np.arange(400.0)
    rows = [np.cumsum(rng.normal(size=400)), np.round(rng.normal(size=400) * 3) + 0.01 * t]
    rows += [100 + np.sin(t / 2) + rng.normal(size=400), rng.poisson(2.0, size=400) - 0.002 * t]
    for x in rows:
        n = len(x)
        npairs = n * (n - 1) // 2
        k1, k2 = (npairs + 1) // 2, npairs // 2 + 1
        i, j = np.triu_indices(n, 1)
        slopes = np.sort((x[j] - x[i]) / (t[j] - t[i]))
        width = 0.01 * (slopes[-1] - slopes[0])
        lo, hi = slopes[k1 - 1] - width, slopes[k2 - 1] + width  # the middle ranks between
        u, tau = x - (0.5 * x.min() + 0.5 * x.max()), t - 0.5 * (t[0] + t[-1])
        got = []
        for start in (lo - 5 * width, 0.5 * (lo + hi), hi + 5 * width):
            order = np.arange(n, dtype=np.int64)
            key = trend._keys(start, u, tau, order, np.empty(n))
            count = trend._sort_count(key, order, np.empty(n, dtype=np.int64), np.empty(n, dtype=np.int64))
            umax, tmax = np.abs(u).max(), np.abs(tau).max()
            got.append(trend._final(x, t, u, tau, umax, tmax, lo, hi, start, count, k1, k2, order, np.empty(n)))
        assert got[0] == got[1] == got[2]
        np.testing.assert_allclose(got[0], stats.theilslopes(x, t).slope, rtol=1e-12, atol=0)  # reference: scipy


@pytest.mark.parametrize("n", [2, 3, 4, 5, 7, 8, 9, 15, 16, 17, 31, 32, 33, 100, 1000, 1024, 1025])
def test_inversion_count_with_ties_against_kendalltau(n):
    # merges of runs of one length run from both ends, others from the front:
    # lengths about powers of two take both; ties must not count
    rng = np.random.default_rng(n)
    rows = [rng.integers(0, 3, n).astype(float), np.round(rng.normal(size=n) * 4), rng.normal(size=n)]
    npairs = n * (n - 1) // 2
    for x in rows:
        _, counts = np.unique(x, return_counts=True)
        tied = int((counts * (counts - 1) // 2).sum())
        if tied == npairs:
            continue
        # reference: scipy.stats.kendalltau; tau-b = S / sqrt(n0 (n0 - n2)), time untied
        tau = stats.kendalltau(np.arange(n), x).statistic
        s = tau * math.sqrt(npairs * (npairs - tied))
        assert trend._inversions(x[None, :])[0] == round((npairs - tied - s) / 2)


def test_inversion_count_against_kendalltau():
    # a permutation longer than 2**15 exercises the wide position sums
    rng = np.random.default_rng(13)
    n = 40000
    perm = np.argsort(np.cumsum(rng.normal(size=n)))
    npairs = n * (n - 1) // 2
    tau = stats.kendalltau(np.arange(n), perm).statistic  # reference: scipy.stats.kendalltau
    assert trend._inversions(perm[None, :])[0] == round((1 - tau) * npairs / 2)
