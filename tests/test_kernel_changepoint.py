"""Change points (PELT) against exhaustive optimal partitioning, ruptures and published answers.

The exhaustive search, a vectorised optimal partitioning for 'mean' and the noise scales below
are written out plainly in numpy from the definitions in tsql.kernels.changepoint.segments;
ruptures (test-only oracle) gives an independent exact PELT for the 'mean' model.
"""

import hashlib
import math
import multiprocessing
import threading
import warnings
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest
from scipy.stats import chi2

from tsql.kernels import changepoint
from tsql.kernels.changepoint import change_points, segments
from tsql.kernels.ragged import Ragged

FLOOR = 1e-4  # 'meanvar' variance floor, as a share of the series' variance
ULPS = 1000  # a scale within this many ulps of max |y| counts as zero


# --------------------------------------------------------------------------- plain references


def sigma_first(y: np.ndarray) -> float:
    """'mean' and 'meanvar' scale: the standard deviation (ddof 0) of the present values."""
    return float(np.std(y))


def sigma_second(y: np.ndarray, t: np.ndarray) -> float:
    """'trend' scale: the standard deviation of the residuals about the least-squares line."""
    slope, intercept = np.polyfit(t, y, 1)
    return float(np.std(y - (intercept + slope * t)))


def semivariogram(y: np.ndarray, lag: int, centred: bool) -> float:
    """Half the mean of the smallest 90 % of squared lag differences (centred at their median if asked),
    times 1 / E[X | X <= q90] for X ~ chi2(1) (= 0.9 / P(chi2(3) <= q90), since x f_1(x) = f_3(x))."""
    d = y[lag:] - y[:-lag]
    if centred:
        d = d - np.median(d)
    squares = np.sort(d * d)
    keep = max(1, math.ceil(0.9 * len(squares)))
    consistency = 0.9 / chi2.cdf(chi2.ppf(0.9, 1), 3)
    return 0.5 * consistency * squares[:keep].mean()


def long_run_factor(model: str, y: np.ndarray, t: np.ndarray) -> float:
    """max(1, AR(1) long-run variance / the cost's variance), rho = gamma(2) / gamma(1) - 1 in [0, 0.99];
    1 below 20 values, at most len(y) / 20 (never fewer than 20 effective values)."""
    variance = sigma_second(y, t) ** 2 if model == "trend" else float(np.var(y))
    if len(y) < 20 or variance <= 0:
        return 1.0
    g1 = semivariogram(y, 1, model == "trend")
    g2 = semivariogram(y, 2, model == "trend")
    if g1 <= 0:
        return 1.0
    rho = min(max(g2 / g1 - 1, 0.0), 0.99)
    return min(max(g1 * (1 + rho) / (1 - rho) ** 2 / variance, 1.0), max(1.0, len(y) / 20))


def segment_cost(model: str, y: np.ndarray, t: np.ndarray, scale: float) -> float:
    if model == "mean":
        return float(np.sum((y - y.mean()) ** 2)) / scale**2
    if model == "meanvar":
        return len(y) * math.log(np.var(y) / scale**2 + FLOOR)
    if len(y) < 2:
        return 0.0
    slope, intercept = np.polyfit(t, y, 1)
    return float(np.sum((y - (intercept + slope * t)) ** 2)) / scale**2


def reference_terms(model: str, penalty, y: np.ndarray, t: np.ndarray) -> tuple[float, float, float]:
    """The references' scale, long-run factor and penalty per change of the present values ``y`` at ``t``."""
    m = len(y)
    scale = sigma_first(y) if model == "mean" else sigma_second(y, t) if model == "trend" else float(np.std(y))
    params = {"mean": 2, "meanvar": 3, "trend": 3}[model]
    factor = 1.0 if not isinstance(penalty, str) else long_run_factor(model, y, t)
    beta = params * math.log(m) if penalty == "bic" else 3 * math.log(m) if penalty == "mbic" else penalty
    return scale, factor, beta * factor


def exhaustive(x, model: str, penalty, min_size: int) -> list[int]:
    """Optimal partitioning (Jackson et al. 2005): every last-segment start, no pruning, O(n^2) costs.

    Same rule as the kernel: earliest last-segment start among equal totals, a change point is
    the original 1-based position of its segment's first present value.
    """
    x = np.asarray(x, dtype=float)
    keep = ~np.isnan(x)
    y, t = x[keep], np.flatnonzero(keep).astype(float)
    m = len(y)
    if m < 2 * min_size or y.min() == y.max():
        return []
    scale, factor, beta = reference_terms(model, penalty, y, t)
    best = np.full(m + 1, np.inf)
    best[0] = -beta
    last = np.zeros(m + 1, dtype=int)
    for end in range(min_size, m + 1):
        for start in range(0, end - min_size + 1):
            if not np.isfinite(best[start]):
                continue
            c = segment_cost(model, y[start:end], t[start:end], scale)
            if penalty == "mbic":
                c += math.log((end - start) / m) * factor
            total = best[start] + c + beta
            if total < best[end]:
                best[end], last[end] = total, start
    starts, end = [], m
    while end > 0:
        end = last[end]
        starts.append(end)
    return [int(t[s]) + 1 for s in sorted(starts)[1:]]


def segmentation_total(x, model: str, penalty, changes: list[int]) -> float:
    """The penalised total cost that :func:`exhaustive` minimises, of the segmentation with these change points."""
    x = np.asarray(x, dtype=float)
    keep = ~np.isnan(x)
    y, t = x[keep], np.flatnonzero(keep).astype(float)
    m = len(y)
    scale, factor, beta = reference_terms(model, penalty, y, t)
    bounds = [0] + [int(np.searchsorted(t, c - 1)) for c in changes] + [m]
    total = -beta
    for a, b in zip(bounds[:-1], bounds[1:]):
        total += segment_cost(model, y[a:b], t[a:b], scale) + beta
        if penalty == "mbic":
            total += math.log((b - a) / m) * factor
    return total


def optimal_partitioning_mean(x, penalty, min_size: int) -> list[int]:
    """Optimal partitioning (Jackson et al. 2005) for 'mean', every start at once for each end: O(n^2).

    The cost as segments() defines it, RSS / sigma^2 about each segment's mean, from cumulative sums
    of the standardised values; same tie rule and output as exhaustive(), fast enough for a few
    thousand points.
    """
    x = np.asarray(x, dtype=float)
    keep = ~np.isnan(x)
    y, where = x[keep], np.flatnonzero(keep)
    m = len(y)
    if m < 2 * min_size or y.min() == y.max():
        return []
    z = (y - y.mean()) / sigma_first(y)
    s1 = np.r_[0.0, np.cumsum(z)]
    s2 = np.r_[0.0, np.cumsum(z * z)]
    factor = 1.0 if not isinstance(penalty, str) else long_run_factor("mean", y, where.astype(float))
    beta = (2 * math.log(m) if penalty == "bic" else 3 * math.log(m) if penalty == "mbic" else penalty) * factor
    best = np.full(m + 1, np.inf)
    best[0] = -beta
    last = np.zeros(m + 1, dtype=int)
    for end in range(min_size, m + 1):
        start = np.arange(end - min_size + 1)
        length = end - start
        d = s1[end] - s1[start]
        total = best[start] + (s2[end] - s2[start]) - d * d / length
        if penalty == "mbic":
            total += np.log(length / m) * factor
        last[end] = int(np.argmin(total))  # the first of equal totals: the earliest start
        best[end] = total[last[end]] + beta
    starts, end = [], m
    while end > 0:
        end = last[end]
        starts.append(end)
    return [int(where[s]) + 1 for s in sorted(starts)[1:]]


def piecewise(rng, n: int, n_changes: int, kind: str = "mean") -> np.ndarray:
    cuts = (
        np.sort(rng.choice(np.arange(1, n), size=min(n_changes, n - 1), replace=False))
        if n > 1
        else np.array([], dtype=int)
    )
    lengths = np.diff(np.r_[0, cuts, n])
    if kind == "mean":
        return np.repeat(rng.normal(0, 3, len(lengths)), lengths) + rng.standard_normal(n)
    if kind == "meanvar":
        return np.repeat(rng.normal(0, 2, len(lengths)), lengths) + rng.standard_normal(n) * np.repeat(
            np.exp(rng.normal(0, 1, len(lengths))), lengths
        )
    slopes = np.repeat(rng.normal(0, 0.5, len(lengths)), lengths)
    return np.cumsum(slopes) + rng.standard_normal(n)


def cps(batch: Ragged, i: int) -> list[int]:
    return [int(v) for v in batch.row(i)]


# --------------------------------------------------------------------------- published answer


def test_nile_has_one_change_at_1899(nile):
    # Cobb (1978), Biometrika 65(2) (citation recalled from memory): the Nile's annual flow at
    # Aswan drops after 1898; the statsmodels copy starts in 1871, so 1899 is position 29.
    got = change_points(Ragged.from_list([nile]))
    assert cps(got, 0) == [29]
    seg = segments(Ragged.from_list([nile])).row(0)
    np.testing.assert_array_equal(seg["first"], [1, 29])
    np.testing.assert_array_equal(seg["last"], [28, 100])
    np.testing.assert_allclose(seg["mean"], [nile[:28].mean(), nile[28:].mean()], rtol=1e-13)


def test_nile_penalty_and_its_long_run_factor(nile):
    # reference: the definitions, in numpy. The Nile's flow is close to white noise about its two
    # levels (Cobb 1978), so the long-run factor stays near 1 and the shift is found with the
    # plain BIC penalty given as a number too (2 log 100 = 9.21, on the standardised series)
    factor = long_run_factor("mean", nile, np.arange(100.0))
    assert 1.0 <= factor < 1.5
    assert cps(change_points(Ragged.from_list([nile]), penalty=2 * math.log(100) * factor), 0) == [29]


# --------------------------------------------------------------------------- exactness


CASES = [
    ("mean", [1, 2, 3]),
    ("meanvar", [2, 3, 5]),
    ("trend", [2, 3, 4]),
]


@pytest.mark.parametrize("model,sizes", CASES)
def test_pelt_equals_exhaustive_search(model, sizes):
    # reference: exhaustive optimal partitioning above, on seeded random piecewise signals
    rng = np.random.default_rng({"mean": 1, "meanvar": 2, "trend": 3}[model])
    signals = []
    for i in range(24):
        x = piecewise(rng, int(rng.integers(4, 36)), int(rng.integers(0, 5)), model)
        if i % 4 == 3:
            x[rng.integers(0, len(x), 3)] = np.nan
        signals.append(x)
    batch = Ragged.from_list(signals)
    checked = ties = 0
    for min_size in sizes:
        for penalty in (0.0, 0.7, 4.0, 15.0, "bic", "mbic"):
            got = change_points(batch, model, penalty, min_size, seasonal="none")
            for i, x in enumerate(signals):
                expected = exhaustive(x, model, penalty, min_size)
                if cps(got, i) != expected:
                    # only a tie may differ: the two totals equal but for the reference's own rounding
                    # (np.polyfit's LAPACK rounds differently on different CPUs; a 4-point 'trend'
                    # series costs 4 unsegmented, as much as a change at its middle with penalty 4)
                    ours = segmentation_total(x, model, penalty, cps(got, i))
                    best = segmentation_total(x, model, penalty, expected)
                    assert abs(ours - best) <= 1e-12 * (1.0 + abs(best)), (model, min_size, penalty, i, ours, best)
                    ties += 1
                checked += len(expected)
    assert checked > 300  # the signals do have change points to find
    assert ties <= 2  # a tie within rounding is rare: the answers are compared, not only the totals


def test_pelt_equals_ruptures_exact_pelt():
    # reference: ruptures.Pelt(model="l2", min_size=2, jump=1), an exact PELT on the plain RSS;
    # our cost is RSS / sigma^2, so its penalty is ours times sigma^2. It returns segment ends.
    rpt = pytest.importorskip("ruptures")
    rng = np.random.default_rng(11)
    for n, k in ((150, 2), (240, 5), (300, 0), (300, 8)):
        x = piecewise(rng, n, k) * 7.0 + 100.0
        sigma = sigma_first(x)
        for penalty in ("bic", 3.0):
            beta = 2 * math.log(n) * long_run_factor("mean", x, np.arange(float(n))) if penalty == "bic" else penalty
            ends = rpt.Pelt(model="l2", min_size=2, jump=1).fit(x).predict(pen=beta * sigma**2)
            got = change_points(Ragged.from_list([x]), "mean", penalty, seasonal="none")
            assert cps(got, 0) == [e + 1 for e in ends[:-1]]


def long_stretches(rng, n: int, n_changes: int) -> np.ndarray:
    """Few level shifts, so most candidate starts sit inside long homogeneous segments."""
    x = piecewise(rng, n, n_changes) * rng.choice([0.4, 1.0, 5.0]) + rng.choice([0.0, -3.0, 1e4])
    if rng.random() < 0.3:
        x[rng.integers(0, n, n // 25)] = np.nan
    return x


def test_functional_pruning_equals_optimal_partitioning():
    # reference: optimal_partitioning_mean above (no pruning at all), on seeded series whose long
    # segments are where the 'mean' search prunes functionally; every penalty and several min_size
    rng = np.random.default_rng(14)
    signals = [long_stretches(rng, int(rng.integers(150, 500)), int(rng.integers(0, 4))) for _ in range(12)]
    batch = Ragged.from_list(signals)
    checked = 0
    for min_size in (1, 2, 5, 13):
        for penalty in (0.3, 6.0, 25.0, "bic", "mbic"):
            got = change_points(batch, "mean", penalty, min_size, seasonal="none")
            for i, x in enumerate(signals):
                expected = optimal_partitioning_mean(x, penalty, min_size)
                assert cps(got, i) == expected, (min_size, penalty, i)
                checked += len(expected)
    assert checked > 600


def test_functional_pruning_on_a_few_thousand_points():
    # reference: optimal_partitioning_mean above, on series of 2,000-4,000 points with at most two
    # shifts (plain PELT keeps most of a segment's starts there; functional pruning keeps a few)
    rng = np.random.default_rng(15)
    signals = [long_stretches(rng, int(rng.integers(2000, 4000)), k) for k in (0, 1, 1, 2)]
    batch = Ragged.from_list(signals)
    for penalty, min_size in (("bic", 2), ("mbic", 1), (4.0, 8)):
        got = change_points(batch, "mean", penalty, min_size, seasonal="none")
        for i, x in enumerate(signals):
            assert cps(got, i) == optimal_partitioning_mean(x, penalty, min_size), (penalty, min_size, i)


def test_reference_agrees_with_the_exhaustive_search():
    # the vectorised reference above against the per-segment exhaustive one, so both stand for the definition
    rng = np.random.default_rng(16)
    for _ in range(12):
        x = piecewise(rng, int(rng.integers(8, 40)), int(rng.integers(0, 4)))
        for penalty, min_size in (("bic", 2), ("mbic", 1), (1.0, 3)):
            assert optimal_partitioning_mean(x, penalty, min_size) == exhaustive(x, "mean", penalty, min_size)


# --------------------------------------------------------------------------- what each model sees


def test_meanvar_finds_a_variance_only_change():
    # planted: same mean, standard deviation 1 then 4, change at position 201
    rng = np.random.default_rng(5)
    x = np.r_[rng.normal(10, 1, 200), rng.normal(10, 4, 200)]
    (found,) = cps(change_points(Ragged.from_list([x]), "meanvar", min_size=5), 0)
    assert abs(found - 201) <= 5
    # and nothing in the same stretch without the change
    assert cps(change_points(Ragged.from_list([x[:200]]), "meanvar", min_size=5), 0) == []


def test_trend_finds_slope_changes():
    # planted: a continuous line whose slope goes +1, -2, +0.5 at positions 101 and 201
    rng = np.random.default_rng(6)
    t = np.arange(300.0)
    line = np.where(t < 100, t, np.where(t < 200, 100 - 2 * (t - 100), -100 + 0.5 * (t - 200)))
    x = line + rng.normal(0, 3, 300)
    got = cps(change_points(Ragged.from_list([x]), "trend"), 0)
    assert len(got) == 2 and abs(got[0] - 101) <= 4 and abs(got[1] - 201) <= 4
    seg = segments(Ragged.from_list([x]), "trend").row(0)
    np.testing.assert_allclose(seg["slope"], [1, -2, 0.5], atol=0.1)


@pytest.mark.parametrize("model", ["mean", "meanvar", "trend"])
def test_min_size_is_honoured(model):
    rng = np.random.default_rng(8)
    signals = [piecewise(rng, 80, 12, model) for _ in range(10)]
    for min_size in (2, 3, 7):
        seg = segments(Ragged.from_list(signals), model, 0.0, min_size)
        for i in range(len(signals)):
            lengths = seg.row(i)["last"] - seg.row(i)["first"] + 1
            assert len(lengths) > 1 and lengths.min() >= min_size


def test_segments_cover_the_list_with_exact_means_and_slopes():
    # reference: numpy means and np.polyfit slopes over each segment's present values
    rng = np.random.default_rng(9)
    for model in ("mean", "trend", "meanvar"):
        x = piecewise(rng, 120, 4, "trend" if model == "trend" else "mean")
        x[[0, 1, 30, 31, 32, 77, 119]] = np.nan
        seg = segments(Ragged.from_list([x]), model, 2.0).row(0)
        assert seg["first"][0] == 1 and seg["last"][-1] == len(x)
        np.testing.assert_array_equal(seg["first"][1:], seg["last"][:-1] + 1)
        assert len(seg["first"]) > 1
        for first, last, mean, slope in zip(seg["first"], seg["last"], seg["mean"], seg["slope"]):
            part = x[first - 1 : last]
            t = np.arange(first - 1, last)[~np.isnan(part)]
            assert mean == pytest.approx(np.nanmean(part), rel=1e-12, abs=1e-12)
            assert slope == pytest.approx(np.polyfit(t, part[~np.isnan(part)], 1)[0], rel=1e-9, abs=1e-12)
        starts = change_points(Ragged.from_list([x]), model, 2.0)
        np.testing.assert_array_equal(starts.values, seg["first"][1:])
        # a change point is where a present value starts the new segment
        assert not np.isnan(x[starts.values.astype(int) - 1]).any()


# --------------------------------------------------------------------------- edge rows


def test_edge_rows():
    rows = [
        None,  # NULL
        [],  # empty
        [np.nan, np.nan, np.nan],  # all missing
        [1.0, 5.0, 2.0],  # fewer than 2 * min_size present values
        [4.0] * 10,  # constant
        [4.0, np.nan, 4.0, 4.0, np.nan],  # constant with gaps
        [7.0],  # one value
        [0.0, 1.0, np.inf, 0.0],  # an infinite value
    ]
    batch = Ragged.from_list(rows)
    got = change_points(batch)
    np.testing.assert_array_equal(got.row_valid, [False, False, False, True, True, True, True, False])
    assert len(got.values) == 0
    seg = segments(batch)
    np.testing.assert_array_equal(seg.row_valid, got.row_valid)
    assert seg.row(3)["first"].tolist() == [1] and seg.row(3)["last"].tolist() == [3]
    assert seg.row(3)["mean"][0] == pytest.approx(np.mean([1.0, 5.0, 2.0]))
    assert seg.row(3)["slope"][0] == pytest.approx(np.polyfit([0, 1, 2], [1, 5, 2], 1)[0])
    assert seg.row(4)["slope"][0] == 0.0 and seg.row(4)["mean"][0] == 4.0
    assert seg.row(5)["last"].tolist() == [5]
    assert seg.row(6)["mean"][0] == 7.0 and np.isnan(seg.row(6)["slope"][0])
    for i in (0, 1, 2, 7):
        assert len(seg.row(i)["first"]) == 0


def test_gaps_keep_original_positions():
    # a level step with missing elements just before and at the start of the new level
    rng = np.random.default_rng(12)
    x = np.r_[rng.normal(0, 0.1, 20), rng.normal(5, 0.1, 20)]
    x[[0, 18, 19, 20, 21, 39]] = np.nan
    assert cps(change_points(Ragged.from_list([x])), 0) == [23]  # first present value of the new level
    seg = segments(Ragged.from_list([x])).row(0)
    assert seg["first"].tolist() == [1, 23] and seg["last"].tolist() == [22, 40]
    np.testing.assert_allclose(seg["mean"], [np.nanmean(x[:22]), np.nanmean(x[22:])], rtol=1e-13)


def test_rounding_is_not_noise():
    # a clean step is found (sigma = std = 2.5, the shift 2 sigma: RSS drops by 8 > 2 log 8)
    x = [0.0, 0.1, -0.1, 0.0, 5.0, 5.1, 4.9, 5.0]
    assert cps(change_points(Ragged.from_list([x])), 0) == [5]
    # equal up to rounding is constant: 0.1 + 0.2 != 0.3 in floating point
    assert cps(change_points(Ragged.from_list([[0.1 + 0.2, 0.3, 0.3, 0.1 + 0.2] * 3]), penalty=0.0), 0) == []


def test_too_short_for_the_min_size():
    x = [0.0, 0.0, 9.0, 9.0, 9.0]
    assert cps(change_points(Ragged.from_list([x]), min_size=3), 0) == []
    assert cps(change_points(Ragged.from_list([x]), min_size=2), 0) == [3]


def test_arguments_are_checked():
    one = Ragged.from_list([[1.0, 2.0, 3.0, 4.0]])
    for kwargs in (
        {"model": "median"},
        {"penalty": "aic"},
        {"penalty": -1.0},
        {"penalty": math.inf},
        {"model": "trend", "min_size": 1},
        {"model": "meanvar", "min_size": 1},
        {"min_size": 0},
    ):
        with pytest.raises(ValueError):
            change_points(one, **kwargs)
    assert changepoint.MIN_SIZE == {"mean": 1, "meanvar": 2, "trend": 2}


# --------------------------------------------------------------------------- batch independence


@pytest.mark.parametrize("model", ["mean", "meanvar", "trend"])
def test_rows_alone_equal_rows_in_a_mixed_batch(model):
    rng = np.random.default_rng(13)
    rows = []
    for i in range(300):
        if i % 37 == 0:
            rows.append(None)
            continue
        x = piecewise(rng, int(rng.integers(0, 160)), int(rng.integers(0, 6)), model)
        if i % 5 == 0 and len(x) > 3:
            x[rng.integers(0, len(x), 3)] = np.nan
        rows.append(x)
    together = change_points(Ragged.from_list(rows), model)
    seg_together = segments(Ragged.from_list(rows), model)
    for i in rng.permutation(len(rows))[:60]:
        alone = change_points(Ragged.from_list([rows[i]]), model)
        assert alone.row_valid[0] == together.row_valid[i]
        np.testing.assert_array_equal(alone.row(0), together.row(i))
        seg_alone = segments(Ragged.from_list([rows[i]]), model).row(0)
        for name, values in seg_together.row(i).items():
            np.testing.assert_array_equal(seg_alone[name], values)
    # shuffling the batch changes nothing either
    order = rng.permutation(len(rows))
    shuffled = change_points(Ragged.from_list([rows[i] for i in order]), model)
    for j, i in enumerate(order):
        np.testing.assert_array_equal(shuffled.row(j), together.row(i))


# --------------------------------------------------------------------------- threads


def mixed_batch(seed: int) -> Ragged:
    """NULL, empty, constant, infinite, gapped, short and long rows, of very different costs."""
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(400):
        kind = i % 9
        if kind == 0:
            rows.append(None)
        elif kind == 1:
            rows.append([] if i % 2 else [3.0] * int(rng.integers(1, 30)))
        elif kind == 2:
            x = rng.standard_normal(int(rng.integers(4, 60)))
            x[1] = np.inf
            rows.append(x)
        elif kind == 3:
            rows.append(rng.standard_normal(int(rng.integers(600, 1200))))  # nothing to prune
        else:
            x = piecewise(rng, int(rng.integers(1, 300)), int(rng.integers(0, 6)), ("mean", "meanvar", "trend")[i % 3])
            if kind % 2 and len(x) > 4:
                x[rng.integers(0, len(x), 4)] = np.nan
            rows.append(x)
    return Ragged.from_list(rows)


def answers(batch: Ragged) -> dict[str, bytes]:
    """Every output of change_points and segments for all models, as raw bytes."""
    out = {}
    for model in ("mean", "meanvar", "trend"):
        cp = change_points(batch, model, "bic", 2)
        seg = segments(batch, model, "mbic", 3)
        arrays = {"cp": cp.values, "cp_offsets": cp.offsets, "cp_valid": cp.row_valid}
        arrays |= {f"seg_{name}": values for name, values in seg.fields.items()}
        arrays |= {"seg_offsets": seg.offsets, "seg_valid": seg.row_valid}
        for name, values in arrays.items():
            out[f"{model}/{name}"] = values.dtype.str.encode() + values.tobytes()
    return out


def test_calls_from_two_python_threads_at_once():
    # DuckDB may run the UDF from several of its threads; calls must not crash or mix answers
    batches = [mixed_batch(seed) for seed in (31, 32)]
    expected = [answers(b) for b in batches]
    start = threading.Barrier(2)

    def work(k: int) -> list[dict[str, bytes]]:
        start.wait()
        return [answers(batches[(k + j) % 2]) for j in range(4)]

    with ThreadPoolExecutor(max_workers=2) as pool:
        results = list(pool.map(work, range(2)))
    for k, got in enumerate(results):
        for j, one in enumerate(got):
            assert one == expected[(k + j) % 2]


def digest(outputs: dict[str, bytes]) -> str:
    return hashlib.sha256(b"".join(name.encode() + value for name, value in sorted(outputs.items()))).hexdigest()


def _digest_in_child(batch: Ragged, conn) -> None:
    conn.send(digest(answers(batch)))
    conn.close()


@pytest.mark.skipif("fork" not in multiprocessing.get_all_start_methods(), reason="no fork here")
def test_a_forked_process_gets_the_same_answers():
    # a child forked after the kernels ran (DuckDB's threads, the compiled code loaded) must still answer
    batch = mixed_batch(41)
    expected = digest(answers(batch))
    context = multiprocessing.get_context("fork")
    receiver, sender = context.Pipe(duplex=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)  # fork of a multi-threaded process
        child = context.Process(target=_digest_in_child, args=(batch, sender), daemon=True)
        child.start()
    sender.close()
    child.join(120)
    if child.is_alive():
        child.kill()
        child.join()
    assert child.exitcode == 0
    assert receiver.poll() and receiver.recv() == expected


# --------------------------------------------------------------------------- geometric functional pruning


def search(x, model: str, penalty, min_size: int, functional: bool = True):
    """The kernel's own standardised sums of a series' present values, then its search: (F, last, stats).

    ``functional=False`` is plain PELT (Killick et al. 2012, K = 0), which drops a start only once
    it is worse than the optimum so far: the search the pruning must agree with bit for bit.
    """
    spec = changepoint.MODELS[model]
    x = np.asarray(x, dtype=float)
    keep = ~np.isnan(x)
    y = x[keep].copy()
    p = np.flatnonzero(keep).astype(np.int64)
    m = len(y)
    stats = np.empty((changepoint.MAX_STATS, m + 1))
    assert changepoint._prepare(spec.code, y, p, m, *changepoint._present(y, 0, m)[4:], stats)
    log_m = math.log(m)
    beta = spec.params_per_change * log_m if penalty == "bic" else 3 * log_m if penalty == "mbic" else float(penalty)
    length_term = np.r_[0.0, np.log(np.arange(1, m + 1)) - log_m]
    F = np.empty(m + 1)
    last = np.empty(m + 1, dtype=np.int64)
    changepoint._pelt(
        spec.code,
        spec.n_stats,
        stats,
        m,
        beta,
        length_term,
        penalty == "mbic",
        min_size,
        F,
        last,
        np.empty(m + 1),
        np.empty((changepoint.MAX_STATS, m + 1)),
        np.empty(m + 1),
        np.empty(m + 1),
        np.empty(m + 1),
        np.empty((changepoint._BOX_ROWS, m + 1)),
        functional,
    )
    return F, last, stats, beta


def search_reference(stats, model: str, beta: float, mbic: bool, min_size: int):
    """Optimal partitioning (Jackson et al. 2005) on the same sums, every start for each end: O(m^2).

    The costs as segments() defines them, written out in numpy: 'meanvar' L log(var + 1e-4) of the
    standardised values, 'trend' the RSS of the least-squares line against the positions.
    """
    m = stats.shape[1] - 1
    best = np.full(m + 1, np.inf)
    best[0] = -beta
    last = np.zeros(m + 1, dtype=int)
    for end in range(min_size, m + 1):
        start = np.arange(end - min_size + 1)
        length = (end - start).astype(float)
        if model == "meanvar":
            mean = (stats[0, end] - stats[0, start]) / length
            var = np.maximum((stats[1, end] - stats[1, start]) / length - mean**2, 0.0)
            cost = length * np.log(var + FLOOR)
        else:
            # rows: sums of u, u^2 (two exact parts: 1 and 5), z, z^2, u z, with the positions u
            # taken from the segment's last one, o (exact integers here)
            d = stats[:, end, None] - stats[:, start]
            o = stats[0, end] - stats[0, end - 1]
            st = d[0] - length * o
            stt = (d[1] + d[5]) - 2 * o * d[0] + length * o * o
            tt = length * stt - st**2
            tx = length * (d[4] - o * d[2]) - st * d[2]
            xx = length * d[3] - d[2] ** 2
            with np.errstate(divide="ignore", invalid="ignore"):
                cost = np.where(tt > 0, np.maximum((xx * tt - tx**2) / (tt * length), 0.0), 0.0)
        total = best[start] + cost + (np.log(length / m) if mbic else 0.0)
        last[end] = int(np.argmin(total))  # the first of equal totals: the earliest start
        best[end] = total[last[end]] + beta
    return best, last


def chain(last) -> list[int]:
    starts, end = [], len(last) - 1
    while end > 0:
        end = int(last[end])
        starts.append(end)
    return sorted(starts)[1:]


def hard_series(rng, kind: str, n: int, model: str) -> np.ndarray:
    """Series chosen to stress the pruning: long calm stretches, many changes, ties, constants, gaps."""
    t = np.arange(n, dtype=float)
    if kind == "calm":  # one change in a long homogeneous series
        x = rng.standard_normal(n) + (1.0 if model == "meanvar" else 0.0) * (t >= n // 2)
        return x * (1 + 2 * (t >= n // 2)) if model == "meanvar" else x + 0.02 * np.maximum(t - n // 2, 0)
    if kind == "many":
        return piecewise(rng, n, n // 15, model)
    if kind == "ties":  # exact repeats: many segmentations cost exactly the same
        return np.tile([0.0, 0.0, 1.0, 1.0, 0.0, 3.0], n // 6 + 1)[:n]
    if kind == "constant":  # constant stretches (the variance floor binds) between noisy ones
        x = rng.standard_normal(n)
        x[n // 5 : 2 * n // 5] = 4.0
        x[3 * n // 5 : 4 * n // 5] = -1.0 + 0.5 * t[3 * n // 5 : 4 * n // 5] * (model == "trend")
        return x
    if kind == "offset":  # a large offset and a steep trend, with gaps
        x = 1e4 + 3.0 * t + rng.standard_normal(n) * 2 + 40 * (t > n / 3)
        x[rng.integers(0, n, n // 10)] = np.nan
        return x
    raise ValueError(kind)


@pytest.mark.parametrize("model", ["meanvar", "trend"])
def test_geometric_pruning_equals_optimal_partitioning(model):
    # reference: search_reference above (numpy, no pruning at all) on the kernel's own sums, so the
    # check is of the search alone, whatever noise scale the model uses; every kind of hard series,
    # numeric penalties from 0, 'bic', 'mbic', min_size up to 7
    rng = np.random.default_rng({"meanvar": 41, "trend": 42}[model])
    checked = identical = 0
    for kind in ("calm", "many", "ties", "constant", "offset"):
        x = hard_series(rng, kind, int(rng.integers(400, 900)), model)
        if kind == "many":
            x[rng.integers(0, len(x), 30)] = np.nan
        for penalty, min_size in ((0.0, 2), (0.5, 3), (5.0, 2), ("bic", 2), ("bic", 7), ("mbic", 2), ("mbic", 5)):
            F, last, stats, beta = search(x, model, penalty, min_size)
            F_ref, last_ref = search_reference(stats, model, beta, penalty == "mbic", min_size)
            where = f"{kind} {penalty} {min_size}"
            np.testing.assert_allclose(F[min_size:], F_ref[min_size:], rtol=1e-12, atol=1e-9, err_msg=where)
            if (last[min_size:] == last_ref[min_size:]).all():
                identical += 1
            else:
                # only exact ties (a constant stretch cut anywhere costs the same under the floor)
                # may go either way, by the rounding of numba's arithmetic against numpy's
                assert kind == "constant" and penalty == 0.0, where
            # plain PELT on the same sums, where it found the optimum too: the same numbers, bit for bit
            F_old, last_old, _, _ = search(x, model, penalty, min_size, functional=False)
            if (last_old[min_size:] == last_ref[min_size:]).all():
                np.testing.assert_array_equal(last, last_old, err_msg=where)
                np.testing.assert_array_equal(F, F_old, err_msg=where)
            checked += len(chain(last))
    assert checked > 500 and identical >= 33


@pytest.mark.parametrize("model", ["meanvar", "trend"])
def test_geometric_pruning_under_a_penalty_far_above_the_costs(model):
    # reference: exhaustive optimal partitioning above. A penalty of 1e3 to 1e6 on short series
    # makes the region of a start's parameters so wide that exp(log variance) overflowed in the
    # 'meanvar' boxes (inf * 0), which once emptied the box of the optimal start
    rng = np.random.default_rng(47)
    signals = [rng.standard_normal(int(rng.integers(10, 60))) for _ in range(12)]
    batch = Ragged.from_list(signals)
    for penalty in (1e3, 1e6):
        for min_size in (2, 3):
            got = change_points(batch, model, penalty, min_size, seasonal="none")
            for i, x in enumerate(signals):
                assert cps(got, i) == exhaustive(x, model, penalty, min_size), (penalty, min_size, i)


def test_boxes_keep_the_optimum_on_an_exact_line_with_penalty_zero():
    # reference: search_reference above. On an exact line (zero residuals, costs that are rounding
    # noise) with penalty 0, a margin smaller than the rounding of the 'trend' costs would drop
    # optimal starts (plain PELT's 1e-9 (1 + |F|) can, depending on the scale); the boxes leave one
    x = hard_series(np.random.default_rng(42), "constant", 1288, "trend")
    F, last, stats, beta = search(x, "trend", 0.0, 2)
    F_ref, last_ref = search_reference(stats, "trend", beta, False, 2)
    np.testing.assert_array_equal(last, last_ref)


@pytest.mark.parametrize("model", ["meanvar", "trend"])
def test_geometric_pruning_on_long_calm_series(model):
    # reference: plain PELT on the same sums, 10,000 points with one change: where plain PELT keeps
    # thousands of starts and the boxes keep a few hundred; a series of white noise alone as well
    rng = np.random.default_rng(45)
    for x in (hard_series(rng, "calm", 10000, model), rng.standard_normal(10000)):
        for penalty in ("bic", 3.0):
            F_new, last_new, _, _ = search(x, model, penalty, 2)
            F_old, last_old, _, _ = search(x, model, penalty, 2, functional=False)
            np.testing.assert_array_equal(last_new, last_old)
            np.testing.assert_array_equal(F_new, F_old)


@pytest.mark.parametrize("model", ["meanvar", "trend"])
def test_lazy_evaluation_equals_plain_pelt_on_seeded_signals(model):
    # reference: plain PELT on the same sums (Killick et al. 2012, K = 0: every start costed at
    # every step until PELT's own rule drops it) and, on the short ones, search_reference above.
    # The search costs a start set aside by a pass (a group) again only when the best start's gain
    # since the pass could reach its excess: long calm stretches, a change after one (the gain grows), changes
    # of mean, spread and slope, rounded values (ties), gaps, several penalties and min_size
    rng = np.random.default_rng({"meanvar": 51, "trend": 52}[model])
    runs = 0
    for case in range(24):
        n = int(rng.integers(60, 400)) if case % 3 else int(rng.integers(1500, 4000))
        t = np.arange(n, dtype=float)
        x = rng.standard_normal(n) * math.exp(rng.normal(0.0, 1.0))
        for cut in np.sort(rng.integers(1, n, int(rng.integers(0, 4)))):
            x[cut:] += rng.normal(0.0, 2.0)
            x[cut:] *= math.exp(rng.normal(0.0, 0.7)) if model == "meanvar" else 1.0
            x[cut:] += (t[cut:] - cut) * rng.normal(0.0, 0.02) if model == "trend" else 0.0
        if case % 4 == 1:
            x = np.round(x, 1)
        if case % 5 == 2:
            x[rng.integers(0, n, n // 20)] = np.nan
        penalty, min_size = [("bic", 2), ("mbic", 2), (3.0, 3), (0.5, 2), ("bic", 5), (25.0, 2)][case % 6]
        F, last, stats, beta = search(x, model, penalty, min_size)
        F_old, last_old, _, _ = search(x, model, penalty, min_size, functional=False)
        where = f"case {case}: {n} points, {penalty}, min_size {min_size}"
        np.testing.assert_array_equal(last, last_old, err_msg=where)
        np.testing.assert_array_equal(F, F_old, err_msg=where)
        if n < 400:
            F_ref, last_ref = search_reference(stats, model, beta, penalty == "mbic", min_size)
            np.testing.assert_allclose(F[min_size:], F_ref[min_size:], rtol=1e-12, atol=1e-9, err_msg=where)
        runs += 1
    assert runs == 24


@pytest.mark.parametrize("model", ["meanvar", "trend"])
def test_pruning_equals_plain_pelt_on_long_series_with_short_segments(model):
    # reference: plain PELT on the same sums (Killick et al. 2012, K = 0), fast here because every
    # few hundred points a change lets it prune. 200,000 points: positions far from the origin of
    # the sums (up to 100,000 from it), where the rounding bound of the pruning is widest, with a
    # calm stretch of 20,000 points at the end, then one change in its last 2,000 points
    rng = np.random.default_rng({"meanvar": 61, "trend": 62}[model])
    n = 200_000
    x = piecewise(rng, n - 20_000, 800, "mean" if model == "trend" else model)
    tail = rng.standard_normal(20_000)
    tail[-2_000:] += 1.5
    x = np.r_[x, tail]
    for penalty in ("bic", 8.0):
        F, last, _, _ = search(x, model, penalty, 2)
        F_old, last_old, _, _ = search(x, model, penalty, 2, functional=False)
        np.testing.assert_array_equal(last, last_old, err_msg=str(penalty))
        np.testing.assert_array_equal(F, F_old, err_msg=str(penalty))
        assert len(chain(last)) > 300


@pytest.mark.parametrize("model", ["meanvar", "trend"])
def test_pruning_is_exact_on_present_values_far_apart(model):
    # reference: search_reference above (exhaustive optimal partitioning, numpy) and plain PELT.
    # 2,500 present values among 3,000,000 positions: wide gaps, positions up to 1.5 million from
    # the origin, a dense block late in the series with changes in it
    rng = np.random.default_rng({"meanvar": 63, "trend": 64}[model])
    places = np.r_[np.sort(rng.choice(2_900_000, 1_500, replace=False)), 2_999_000 + np.arange(1_000)]
    x = np.full(3_000_000, np.nan)
    x[places] = piecewise(rng, len(places), 12, model)
    for penalty, min_size in (("bic", 2), (2.0, 3), ("mbic", 2)):
        F, last, stats, beta = search(x, model, penalty, min_size)
        F_ref, last_ref = search_reference(stats, model, beta, penalty == "mbic", min_size)
        np.testing.assert_allclose(F[min_size:], F_ref[min_size:], rtol=1e-12, atol=1e-9)
        np.testing.assert_array_equal(last[min_size:], last_ref[min_size:])
        F_old, last_old, _, _ = search(x, model, penalty, min_size, functional=False)
        np.testing.assert_array_equal(last, last_old)
        np.testing.assert_array_equal(F, F_old)


@pytest.mark.parametrize("model", ["meanvar", "trend"])
def test_rounding_bound_holds_for_segment_costs_at_a_million_points(model):
    # reference: Python's decimal module at 60 digits, on the stored sums read exactly: the least
    # loss those sums define ('meanvar' L log(var + floor), 'trend' the RSS about the segment's
    # line, positions less the segment's last one). The pruning needs every computed cost within
    # _rounding_scale of it, for every segment; checked on short segments late in the series
    # (where positions are largest), long ones and random ones, and a constant stretch (the clip at
    # zero variance)
    from decimal import Decimal, getcontext

    getcontext().prec = 60
    rng = np.random.default_rng({"meanvar": 65, "trend": 66}[model])
    m = 1_000_000
    x = rng.standard_normal(m) + 1.0 * (np.arange(m) >= m // 2) + 0.3 * np.sin(np.arange(m) / 5_000.0)
    x[600_000:600_050] = 2.0
    spec = changepoint.MODELS[model]
    stats = np.empty((changepoint.MAX_STATS, m + 1))
    summary = changepoint._present(x, 0, m)[4:]
    assert changepoint._prepare(spec.code, x, np.arange(m, dtype=np.int64), m, *summary, stats)
    bound = changepoint._rounding_scale(spec.code, stats, m)
    pairs = [(m - k, m) for k in (2, 3, 5, 40, 1_000)] + [(600_000, 600_050), (600_010, 600_040), (0, m)]
    pairs += [(m // 2 - 7, m // 2 + 9), (10, 900_000)]
    for _ in range(60):
        s = int(rng.integers(0, m - 2))
        pairs.append((s, int(min(m, s + 2 + rng.integers(0, 10 ** rng.integers(0, 6))))))
    worst = 0.0
    for s, t in pairs:
        out = np.empty(1)
        rows = tuple(stats[:, s : s + 1])
        if model == "meanvar":
            changepoint._cost_meanvar(stats, rows, np.array([float(s)]), np.zeros(1), np.zeros(1, np.int64), 1, t, out)
            d1 = Decimal(stats[0, t]) - Decimal(stats[0, s])
            d2 = Decimal(stats[1, t]) - Decimal(stats[1, s])
            length = Decimal(t - s)
            exact = length * (d2 / length - (d1 / length) ** 2 + Decimal(FLOOR)).ln()
        else:
            changepoint._cost_trend(stats, rows, np.array([float(s)]), np.zeros(1), np.zeros(1, np.int64), 1, t, out)
            d = [Decimal(stats[k, t]) - Decimal(stats[k, s]) for k in range(6)]
            o = Decimal(stats[0, t]) - Decimal(stats[0, t - 1])
            length = Decimal(t - s)
            st = d[0] - length * o
            stt = d[1] + d[5] - 2 * o * d[0] + length * o * o
            stx = d[4] - o * d[2]
            tt = length * stt - st * st
            tx = length * stx - st * d[2]
            xx = length * d[3] - d[2] * d[2]
            exact = (xx * tt - tx * tx) / (tt * length) if tt > 0 else Decimal(0)
        worst = max(worst, abs(float(Decimal(out[0]) - exact)))
    assert worst <= bound, (worst, bound)
    # and not absurdly loose: well below the least gain a change needs (the pruning works with it)
    assert bound < 1e-2


def test_trend_costs_on_a_million_points_equal_direct_least_squares():
    # reference: numpy.linalg.lstsq on each segment alone (positions from the segment's first one),
    # its RSS in units of the kernel's whole-series residual variance. A million positions with
    # gaps: sums of squared positions pass 2^53 (about 3e5 points), where plain float sums had
    # costs of short segments at the end wrong in the first digit
    rng = np.random.default_rng(48)
    p = np.flatnonzero(rng.random(1_000_000) > 0.1).astype(np.int64)
    y = 5.0 + 0.002 * p + rng.standard_normal(len(p))
    m = len(p)
    stats = np.empty((changepoint.MAX_STATS, m + 1))
    assert changepoint._prepare(changepoint.TREND, y, p, m, *changepoint._present(y, 0, m)[4:], stats)
    variance = changepoint._line_residual_sd(y, p, m)[2] ** 2
    pairs = [(m - 3, m), (m - 10, m), (m - 100, m), (m - 5000, m - 17), (m // 2, m // 2 + 7), (10, 200_000), (0, m)]
    for s, t in pairs:
        out = np.empty(1)
        changepoint._cost_trend(
            stats, tuple(stats[:, s : s + 1]), np.array([float(s)]), np.zeros(1), np.zeros(1, np.int64), 1, t, out
        )
        design = np.c_[np.ones(t - s), (p[s:t] - p[s]).astype(float)]
        residual = y[s:t] - design @ np.linalg.lstsq(design, y[s:t], rcond=None)[0]
        assert out[0] == pytest.approx(residual @ residual / variance, rel=1e-9, abs=1e-7), (s, t)


def test_meanvar_cost_is_a_least_sum_of_point_losses():
    # the premise of the pruning: L log(var + floor) = min over (mu, v) of
    # sum of log v + ((z - mu)^2 + floor) / v - 1; checked with scipy's optimiser (an outside minimiser)
    from scipy.optimize import minimize

    rng = np.random.default_rng(46)
    for z in (rng.normal(0.3, 0.7, 9), np.full(5, 2.0), rng.normal(0, 0.005, 12)):

        def total(theta, z=z):
            mu, w = theta
            return float(np.sum(w + ((z - mu) ** 2 + FLOOR) * np.exp(-w) - 1.0))

        found = minimize(total, x0=[0.0, 0.0], method="Nelder-Mead", options={"xatol": 1e-10, "fatol": 1e-12})
        assert found.fun == pytest.approx(len(z) * math.log(np.var(z) + FLOOR), abs=1e-7)


def test_log_variance_range_brackets_the_roots():
    # reference: scipy.optimize.brentq on u + expm1(-u) - g (u + exp(-u) = 1 + g; its roots are
    # 1 + g + W(-exp(-1 - g)) on Lambert W's branches 0 and -1, which scipy's lambertw loses near
    # the branch point for small g)
    from scipy.optimize import brentq

    for g in (1e-12, 1e-9, 1e-6, 1e-3, 0.05, 0.25, 0.26, 1.0, 3.0, 40.0, 700.0, 1e5):
        lo, hi = changepoint._log_variance_range(g, -np.inf, np.inf)

        def f(u, g=g):
            return u + math.expm1(-u) - g

        right = brentq(f, 0.0, 2.0 + g, xtol=1e-300, rtol=1e-15)
        left = brentq(f, -math.log1p(g) - 2.0, 0.0, xtol=1e-300, rtol=1e-15)
        assert lo <= left < 0 < right <= hi, g
        # and close: a few Newton steps from good starts
        assert hi - right <= 1e-3 * right and left - lo <= 1e-3 * -left, g
        # a box's ends outside the roots: bounds between them and the roots, at least as close
        lo_box, hi_box = changepoint._log_variance_range(g, 2.0 * left, 2.0 * right)
        assert 2.0 * left < lo_box <= left and right <= hi_box < 2.0 * right, g
        assert lo_box >= lo and hi_box <= hi, g
        # ends inside them: nothing to cut on either side
        assert changepoint._log_variance_range(g, 0.5 * left, 0.5 * right) == (-np.inf, np.inf), g


def test_log_variance_bounds_lie_outside_the_roots():
    # reference: f(u) = u + exp(-u) - 1 - g in 60-digit decimals; f is convex with its least value
    # -g at 0, so a bound lies outside a root exactly when f >= 0 there; g drawn over the table's
    # range and beyond, and at its points and their neighbours (where a chord would fail)
    from decimal import Decimal, getcontext

    getcontext().prec = 60

    def f(u, g):
        u = Decimal(float(u))
        return u + (-u).exp() - 1 - Decimal(float(g))

    table = changepoint._ROOTS
    rng = np.random.default_rng(53)
    points = np.concatenate([table[::7, 0], table[3::7, 3]])
    middles = np.sqrt(points[:-1] * points[1:])
    drawn = 2.0 ** rng.uniform(-64.0, 12.0, 400)
    for g in np.concatenate([points, np.nextafter(points, 0.0), middles, drawn, [1e-300, 300.0, 1e5]]):
        lo, hi = changepoint._log_variance_bounds(g, -np.inf, np.inf)
        assert lo < 0.0 < hi and f(lo, g) >= 0 and f(hi, g) >= 0, g
        if 1e-9 <= g <= 100.0:
            # and close: 1e-4 of the root inside either bound is inside the roots
            assert f(lo * (1.0 - 1e-4), g) < 0 and f(hi * (1.0 - 1e-4), g) < 0, g


def test_box_clipping_and_cutting_against_sampled_points():
    # reference: a dense grid of points of the box; _clip_ellipse must keep every point of the box in
    # the ellipse (and be tight), _cut_ellipse every point of the box outside it
    rng = np.random.default_rng(47)
    for _ in range(120):
        centre = rng.normal(0, 1, 2)
        root = rng.normal(0, 1, (2, 2))
        a = root @ root.T + 0.05 * np.eye(2)
        r = rng.exponential(1.0)
        lo = rng.normal(0, 1, 2) - rng.exponential(1.0, 2)
        hi = lo + rng.exponential(1.5, 2)
        grid = np.linspace(0.0, 1.0, 201)
        pts = lo + np.stack(np.meshgrid(grid, grid), axis=-1).reshape(-1, 2) * (hi - lo)
        inside = np.einsum("ij,jk,ik->i", pts - centre, a, pts - centre) <= r
        args = (centre[0], centre[1], a[0, 0], a[0, 1], a[1, 1], r)
        box = np.array([[lo[0]], [hi[0]], [lo[1]], [hi[1]]])
        met = changepoint._clip_ellipse(box, 0, *args)
        if inside.any():
            assert met
            kept = pts[inside]
            assert (kept[:, 0] >= box[0, 0]).all() and (kept[:, 0] <= box[1, 0]).all()
            assert (kept[:, 1] >= box[2, 0]).all() and (kept[:, 1] <= box[3, 0]).all()
            # tight: just inside each side of the clipped box, the ellipse's cross-section (in closed
            # form) still meets the old box's range of the other parameter
            det = a[0, 0] * a[1, 1] - a[0, 1] ** 2
            for k, side in ((0, box[0, 0]), (0, box[1, 0]), (1, box[2, 0]), (1, box[3, 0])):
                other = 1 - k
                x = side + (1e-6 if side in (box[0, 0], box[2, 0]) else -1e-6) * (hi[k] - lo[k])
                d = x - centre[k]
                reach = (r - det / a[other, other] * d * d) / a[other, other]
                assert reach >= 0
                mid = centre[other] - a[0, 1] / a[other, other] * d
                assert mid - math.sqrt(reach) <= hi[other] and mid + math.sqrt(reach) >= lo[other]
        box = np.array([[lo[0]], [hi[0]], [lo[1]], [hi[1]]])
        gone = changepoint._cut_ellipse(box, 0, *args)
        outside = pts[~inside]
        if gone:
            assert len(outside) == 0
        else:
            assert (outside[:, 0] >= box[0, 0]).all() and (outside[:, 0] <= box[1, 0]).all()
            assert (outside[:, 1] >= box[2, 0]).all() and (outside[:, 1] <= box[3, 0]).all()


def test_meanvar_clip_and_cut_against_sampled_points():
    # reference: a dense grid of the box in (mean, log variance), each point's loss over the segment
    # in closed form, sum of log v + ((z - mu)^2 + floor) / v - 1 = L (u + (1 + d^2 / V) e^-u - 1)
    # above its least value, d = mu - mean, u = w - log V. _clip_meanvar must keep every point where
    # it is at most the room, _cut_meanvar every point where it is not below it, and
    # _meanvar_cut_misses may only skip a cut that could not reach an end of the box's means
    rng = np.random.default_rng(71)
    grid = np.linspace(0.0, 1.0, 161)
    clipped = cut = skipped = 0
    for case in range(400):
        mean = rng.normal(0.0, 1.0)
        v = math.exp(rng.normal(0.0, 3.0)) + FLOOR  # tiny and huge variances
        log_v = math.log(v)
        length = float(rng.integers(2, 5000))
        g = math.exp(rng.normal(-3.0, 3.0))
        lo = np.array([mean, log_v]) + rng.normal(0.0, 1.0, 2) * np.array([math.sqrt(v), 1.0]) * 3 * math.sqrt(g)
        hi = lo + rng.exponential(1.0, 2) * np.array([math.sqrt(v), 1.0]) * 4 * math.sqrt(g)
        pts = lo + np.stack(np.meshgrid(grid, grid), axis=-1).reshape(-1, 2) * (hi - lo)
        d = pts[:, 0] - mean
        u = pts[:, 1] - log_v
        excess = u + (1.0 + d * d / v) * np.exp(-u) - 1.0
        where = f"case {case}: g {g:.3g}, V {v:.3g}"
        box = np.array([[lo[0]], [hi[0]], [lo[1]], [hi[1]]])
        met = changepoint._clip_meanvar(box, 0, mean, v, log_v, g)
        clipped += not (met and np.array_equal(box[:, 0], [lo[0], hi[0], lo[1], hi[1]]))
        kept = pts[excess <= g]
        if len(kept):
            assert met, where
            assert (kept[:, 0] >= box[0, 0]).all() and (kept[:, 0] <= box[1, 0]).all(), where
            assert (kept[:, 1] >= box[2, 0]).all() and (kept[:, 1] <= box[3, 0]).all(), where
        box = np.array([[lo[0]], [hi[0]], [lo[1]], [hi[1]]])
        if changepoint._meanvar_cut_misses(box, 0, mean, v, g):
            skipped += 1
            reach = min(abs(lo[0] - mean), abs(hi[0] - mean))
            assert math.expm1(g) <= 1e-6 or v * math.expm1(g) < reach * reach, where
        gone = changepoint._cut_meanvar(box, 0, mean, v, log_v, length, g * length)
        outside = pts[excess >= g]
        cut += gone or not np.array_equal(box[:, 0], [lo[0], hi[0], lo[1], hi[1]])
        if gone:
            assert len(outside) == 0, where
        else:
            assert (outside[:, 0] >= box[0, 0]).all() and (outside[:, 0] <= box[1, 0]).all(), where
            assert (outside[:, 1] >= box[2, 0]).all() and (outside[:, 1] <= box[3, 0]).all(), where
    # every path taken often enough to matter
    assert clipped > 100 and cut > 10 and skipped > 100, (clipped, cut, skipped)


def test_meanvar_pruning_is_exact_on_extreme_spreads():
    # reference: search_reference above (exhaustive optimal partitioning on the kernel's own sums)
    # and plain PELT (Killick et al. 2012, K = 0) bit for bit. Spreads a million times apart (the
    # quiet stretches near the variance floor, where a start's region is narrowest in log
    # variance), constant stretches (zero variance), repeated values, gaps, min_size 2 and 3, penalties
    # from 0 to 1e3: a region cut too tight drops an optimal start and changes F or the chain
    rng = np.random.default_rng(73)
    for case in range(10):
        n = int(rng.integers(300, 700))
        t = np.arange(n)
        x = rng.standard_normal(n) * np.where((t // int(rng.integers(20, 90))) % 2 == 0, 1e-3, 1e3)
        x[n // 3 : n // 3 + int(rng.integers(2, 40))] = 7.0
        x[-int(rng.integers(2, 30)) :] = -2.0
        if case % 2:
            x = np.round(x, 2)
        x[rng.integers(0, n, n // 15)] = np.nan
        for penalty, min_size in ((0.0, 2), (1.0, 2), ("bic", 2), ("mbic", 3), (1e3, 2)):
            F, last, stats, beta = search(x, "meanvar", penalty, min_size)
            F_ref, last_ref = search_reference(stats, "meanvar", beta, penalty == "mbic", min_size)
            where = f"case {case}: {penalty}, min_size {min_size}"
            np.testing.assert_allclose(F[min_size:], F_ref[min_size:], rtol=1e-12, atol=1e-9, err_msg=where)
            F_old, last_old, _, _ = search(x, "meanvar", penalty, min_size, functional=False)
            np.testing.assert_array_equal(last, last_old, err_msg=where)
            np.testing.assert_array_equal(F, F_old, err_msg=where)


def test_trend_pruning_margin_holds_for_clipped_costs_at_a_start_line():
    # reference: Python's decimal module at 60 digits, on the stored sums read exactly. The
    # 'trend' pruning (changepoint._trend_margins, Notes) needs, for a newer start c and a later
    # end t, the loss of (c, t] at the line of an older start s's segment (s, t] (inside s's box)
    # to be at least the computed C(c, t) less 2 own less _box_drift of the box, for t - s at
    # least _STEEP_AFTER. The data make that hard: 1.2 million positions with gaps, an offset of
    # 1e6, a shift near the end (the stored sums of z are largest far from position 0), and exact
    # lines there, whose short segments' costs are clipped at zero while the sums say a little less
    from decimal import Decimal, getcontext

    getcontext().prec = 60
    rng = np.random.default_rng(67)
    n = 1_200_000
    keep = rng.random(n) > 0.15
    t = np.arange(n, dtype=float)
    x = 1e6 + rng.standard_normal(n) + 4.0 * (t >= n - n // 10)
    lines = (n - n // 10 - 40, n - n // 10 + 5, n - n // 10 - 300, n - 100, 20, n // 2 + 11)
    for lo in lines:
        keep[lo : lo + 100] = True
        x[lo : lo + 100] = 1e6 - 4.0 + 0.1 * (t[lo : lo + 100] - lo)
    p = np.flatnonzero(keep).astype(np.int64)
    m = len(p)
    stats = np.empty((changepoint.MAX_STATS, m + 1))
    assert changepoint._prepare(changepoint.TREND, x[keep], p, m, *changepoint._present(x[keep], 0, m)[4:], stats)
    margins = changepoint._trend_margins(changepoint.TREND, stats, m, 28.0, np.zeros(m + 1))
    own = changepoint._trend_rounding(stats, m)[0]

    def sums(a, b):  # over (a, b], positions in the stored sums' own coordinates
        d = [Decimal(stats[k, b]) - Decimal(stats[k, a]) for k in range(6)]
        return Decimal(b - a), d[0], d[1] + d[5], d[2], d[3], d[4]

    def line(a, b):  # least-squares level at position 0 and slope of (a, b]
        n_, st, stt, sx, _, stx = sums(a, b)
        slope = (n_ * stx - st * sx) / (n_ * stt - st * st)
        return (sx - slope * st) / n_, slope

    def loss(a, b, level, slope):
        n_, st, stt, sx, sxx, stx = sums(a, b)
        return (
            sxx - 2 * level * sx - 2 * slope * stx + level * level * n_ + 2 * level * slope * st + slope * slope * stt
        )

    cases = []
    shortest = changepoint._STEEP_AFTER
    for e in (int(np.searchsorted(p, lo)) for lo in lines):
        for s in (e, e + 1, e + 3):
            for c in (s + 1, s + 2, s + shortest - 4, s + shortest - 2):
                cases += [(s, c, end) for end in (c + 2, c + 3, e + 80, e + 100) if end - s >= shortest and end <= m]
    for _ in range(40):
        c = int(rng.integers(shortest, m - 8))
        cases.append((c - shortest + 2, c, c + 2 + int(rng.integers(0, 5))))
    worst = 0.0
    beyond_own = 0.0
    for s, c, end in cases:
        out = np.empty(1)
        rows = tuple(stats[:, c : c + 1])
        changepoint._cost_trend(stats, rows, np.array([float(c)]), np.zeros(1), np.zeros(1, np.int64), 1, end, out)
        level, slope = line(s, end)
        x0 = stats[0, s + 1] - stats[0, s]  # the box's levels are at s's first position
        at_x0 = float(level + slope * Decimal(x0))
        box = np.zeros((changepoint._BOX_ROWS, 1))
        box[:4, 0] = (at_x0 - 1e-3, at_x0 + 1e-3, float(slope) - 1e-4, float(slope) + 1e-4)
        box[11, 0] = x0
        short = float(Decimal(out[0]) - loss(c, end, level, slope))
        worst = max(worst, short / (2.0 * own + changepoint._box_drift(box, 0, margins)))
        beyond_own = max(beyond_own, short - 2.0 * own)
    assert worst <= 1.0, worst
    # the data need the box's part: the rounding of the arithmetic alone would not do
    assert beyond_own > 0.0
