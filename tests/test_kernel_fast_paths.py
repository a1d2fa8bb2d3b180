"""The kernels' branch-free and shortcut forms against the plain procedures they must equal exactly.

The noise scale of change_points sums parts of an array in the order Hoare's FIND leaves it, so its
selection must make his exchanges, in his order: checked against FIND written out plainly from the
paper (C. A. R. Hoare, "Algorithm 65: Find", Communications of the ACM 4(7), 321-322, 1961; pivot a
median of three, as the kernels choose it). trend_test's merge sort must give the stable order
(numpy's stable argsort) and the inversion count (counted pair by pair), also on the integers it sorts
in the order of the doubles. The spread test of
change_points settles most rows on a harmonic turned from one position to the next; its statistic
must lie far within the margin it is trusted by of the one on the evaluated harmonic. spectral_entropy
and ljung_box skip their masks for complete rows: the same answers as through the masks. fisher_g_pvalue sums
each band of rows in a table only as wide as the band needs: the same sums as one table.
must lie far within the margin it is trusted by of the one on the evaluated harmonic. The test makes
its sums in one pass: they must equal those of the plain procedure, one loop per sum, bit for bit; so
must the cycle fit's cross products made ten and four at a time on the Gram matrix's diagonal.
"""

import math

import numpy as np
import pytest
import statsmodels.datasets

from tsql.kernels import changepoint, periodicity, trend
from tsql.kernels.correlation import ljung_box
from tsql.kernels.periodicity import fisher_g_pvalue, spectral_entropy
from tsql.kernels.ragged import Ragged


def hoare_find(a: np.ndarray, k: int, n: int) -> float:
    """Hoare's FIND on ``a[:n]`` for the k-th smallest (0-based), in place, as the paper's loop."""
    lo, hi = 0, n - 1
    while lo < hi:
        x, y, z = a[lo], a[(lo + hi) // 2], a[hi]
        pivot = max(min(x, y), min(max(x, y), z))
        i, j = lo, hi
        while i <= j:
            while a[i] < pivot:
                i += 1
            while a[j] > pivot:
                j -= 1
            if i <= j:
                a[i], a[j] = a[j], a[i]
                i += 1
                j -= 1
        if k <= j:
            hi = j
        elif k >= i:
            lo = i
        else:
            return a[k]
    return a[k]


def arrays(seed: int):
    """Random, tied, sorted, reversed and few-valued arrays of many lengths."""
    rng = np.random.default_rng(seed)
    for n in [1, 2, 3, 4, 5, 7, 8, 16, 33, 100, 257, 999]:
        yield rng.standard_normal(n)
        yield rng.integers(0, 3, n).astype(float)
        yield np.sort(rng.standard_normal(n))
        yield np.sort(rng.standard_normal(n))[::-1].copy()
        yield np.round(rng.standard_normal(n), 1) ** 2
        yield np.full(n, 2.5)


@pytest.mark.parametrize("select", ["changepoint", "trend"])
def test_selection_makes_hoares_exchanges(select):
    rng = np.random.default_rng(4)
    for a in arrays(3):
        n = len(a)
        for k in sorted({0, n // 2, n - 1, int(rng.integers(0, n))}):
            mine, plain = a.copy(), a.copy()
            if select == "changepoint":
                m = n if n < 3 else int(rng.integers(n // 2 + 1, n + 1))  # a prefix, as the noise scale uses
                k = min(k, m - 1)
                got = changepoint._select(mine, np.int64(k), np.int64(m))
            else:
                m = n
                got = trend._select(mine, np.int64(k))
            assert got == hoare_find(plain, k, m)
            np.testing.assert_array_equal(mine, plain)  # the same arrangement, not only the same value


def test_merge_sort_order_and_count():
    for a in arrays(5):
        n = len(a)
        key, idx = a.copy(), np.arange(n, dtype=np.int64)
        count = trend._sort_count(key, idx, np.empty(n), np.empty(n, dtype=np.int64))
        order = np.argsort(a, kind="stable")  # reference: numpy's stable sort
        np.testing.assert_array_equal(idx, order)
        np.testing.assert_array_equal(key, a[order])
        assert count == sum(int((a[p] > a[p + 1 :]).sum()) for p in range(n))  # pair by pair


def test_merge_sort_by_ordered_integers():
    # trend_test merges integers in the order of its doubles: the same stable order (numpy's stable
    # argsort) and count (pair by pair), signed zeros alike, negatives and subnormals in place
    rng = np.random.default_rng(6)
    special = np.array([0.0, -0.0, 5e-324, -5e-324, 1e-300, -1e-300, 1.0, -1.0, 1e300, -1e300, -2.5, 2.5])
    zeros = np.where(rng.random(300) < 0.5, -0.0, 0.0)
    for a in [*arrays(7), special, np.tile(special, 9)[rng.permutation(108)], zeros, -np.abs(zeros) + 0.5]:
        n = len(a)
        key, idx = trend._ordered(a.copy()), np.arange(n, dtype=np.int64)
        count = trend._sort_count(key, idx, np.empty(n, dtype=np.int64), np.empty(n, dtype=np.int64))
        np.testing.assert_array_equal(idx, np.argsort(a, kind="stable"))
        assert count == sum(int((a[p] > a[p + 1 :]).sum()) for p in range(n))


def spread_inputs(y: np.ndarray):
    """What _spread_row hands its test: the deviations from the mean, their squares' sum, present count."""
    present = ~np.isnan(y)
    m = int(present.sum())
    level = y[present].sum() / m
    r = np.where(present, y - level, 0.0)
    return m, r, float((r[present] ** 2).sum())


def test_spread_statistic_on_the_turned_harmonic_within_its_margin():
    # real series (statsmodels datasets: Mauna Loa CO2 weekly, sunspots, El Nino monthly temperatures)
    # and a seeded one whose noise grows with its cycle, over periods short, long and at Nyquist
    co2 = statsmodels.datasets.co2.load_pandas().data["co2"].to_numpy(float)
    sunspots = statsmodels.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(float)
    elnino = statsmodels.datasets.elnino.load_pandas().data.iloc[:, 1:].to_numpy(float).ravel()
    k = np.arange(2000)
    rng = np.random.default_rng(0)
    growing = 10 + 3 * np.sin(2 * np.pi * k / 12) + (1 + 0.8 * np.sin(2 * np.pi * k / 12)) * rng.standard_normal(2000)
    largest = 0.0
    for y in (co2, sunspots, elnino, growing, growing[:37]):
        n = len(y)
        m, r, sum_r2 = spread_inputs(y)
        for period in (2.0, 3.0, 7.0, 11.0, 12.0, 52.18, n / 4.0):
            w = 2.0 * np.pi / period
            found = []
            for exact in (False, True):
                design, fitted, target = np.empty((3, n)), np.empty(n), np.empty(n)
                low, used, statistic, near = changepoint._spread_test(
                    y, n, m, max(m, 1), w, exact, r, sum_r2, design, fitted, target
                )
                found.append((used, statistic, near))
            (used_t, turned, near_t), (used_e, evaluated, _) = found
            assert near_t or used_t == used_e
            largest = max(largest, abs(turned - evaluated) / max(evaluated, 1.0))
    # the margin the turned harmonic is trusted by is many orders of magnitude above the gap
    assert largest < 1e-4 * changepoint._SPREAD_SETTLED
    assert math.isfinite(largest)


@pytest.mark.parametrize("n", [40, 101, 1000])
def test_complete_rows_skip_the_masks_with_the_same_answers(n):
    """spectral_entropy and ljung_box take a shortcut for a batch (a bucket) whose values are all present:
    no masks, the lengths as the counts. A row with a gap beside the complete ones sends them through the
    masked path; their answers must not move by a bit. Among the rows: one whose power is all at Nyquist
    (the other ordinates exactly 0, the entropy's terms 0 log 0) and one of huge magnitude (scaled first)."""
    rng = np.random.default_rng(n)
    t = np.arange(n)
    complete = [
        rng.standard_normal(n),
        np.sin(2 * np.pi * t / 7) + 0.1 * rng.standard_normal(n),
        np.cumsum(rng.standard_normal(n)),
        np.where(t % 2 == 0, 1.0, -1.0),
        1e300 * rng.standard_normal(n),
        np.round(rng.standard_normal(n)),
    ]
    gappy = rng.standard_normal(n)
    gappy[::5] = np.nan
    alone = Ragged.from_list(complete)
    beside = Ragged.from_list([*complete, gappy])
    assert not alone.has_missing and beside.has_missing
    for fn in (spectral_entropy, lambda b: ljung_box(b)["q"], lambda b: ljung_box(b)["p_value"]):
        a, b = fn(alone), fn(beside)[: len(complete)]
        assert np.isfinite(a[[0, 1, 2, 5]]).all()
        np.testing.assert_array_equal(a.view(np.int64), b.view(np.int64))


def fisher_one_table(g: np.ndarray, m: np.ndarray) -> np.ndarray:
    """fisher_g_pvalue's sum as one table for all rows, as wide as the widest row needs (at most 128 terms)."""
    x, mm = g.astype(np.float64), np.floor(m.astype(np.float64))
    return np.clip(periodicity._fisher_terms(x, mm, np.minimum(mm, np.floor(1.0 / x))), 0.0, 1.0)


def test_fisher_bands_equal_one_table():
    """fisher_g_pvalue sums each row's terms in a table only as wide as the rows of its band need; the
    terms a wider table adds are 0, so every p-value equals the one-table sum bit for bit."""
    rng = np.random.default_rng(17)
    m = rng.integers(1, 600, 4000).astype(np.float64)
    g = np.concatenate([rng.uniform(0, 1, 1000), 10.0 ** rng.uniform(-3.5, 0, 3000)])  # up to the 128-term cap
    g[:5] = [1.0, 0.5, 0.25, 1 / 3, 1 / 128]  # on band edges
    want = fisher_one_table(g, m)
    got = fisher_g_pvalue(g, m)
    assert len(np.unique(np.ceil(np.log2(np.minimum(m, np.floor(1 / g)).clip(1, 128))))) == 8  # every band
    np.testing.assert_array_equal(got.view(np.int64), want.view(np.int64))


def plain_spread_test(y, n, m, count, w, exact, r, sum_r2):
    """Koenker's statistic as the plain procedure makes it: the design (turned or evaluated), its columns'
    lengths, the columns left out zeroed, then each sum over the positions in a loop of its own."""
    design = np.zeros((3, n))
    norms = [0.0, 0.0, 0.0]
    c, s = 1.0, 0.0
    turn_c, turn_s = math.cos(w), math.sin(w)
    for t in range(n):
        if exact or t % changepoint._RESYNC == 0:
            c, s = math.cos(w * t), math.sin(w * t)
        else:
            c, s = c * turn_c - s * turn_s, s * turn_c + c * turn_s
        design[:, t] = (1.0, c, s)
        norms[0] += 1.0
        norms[1] += c * c
        norms[2] += s * s
    gram = np.zeros((3, 3))
    used, near, floor = 0, False, 1e-6 * math.sqrt(n)
    for i in range(3):
        length = math.sqrt(norms[i])
        near |= abs(length - floor) <= changepoint._SPREAD_SETTLED * floor
        if length > floor:
            used += 1
        else:
            gram[i, i] = 1.0
            design[i] = 0.0
    design[:, np.isnan(y)] = 0.0
    for a in range(3):
        for b in range(a + 1):
            acc = 0.0
            for t in range(n):
                acc += design[a, t] * design[b, t]
            gram[a, b] += acc
    low, _ = changepoint.cholesky(gram, 1e-12)
    target = r * r
    v = np.zeros(3)
    for a in range(3):
        for t in range(n):
            v[a] += design[a, t] * target[t]
    coef = changepoint.solve(low, v)
    mean_r2 = sum_r2 / count
    explained = spread = 0.0
    for t in range(n):
        if not np.isnan(y[t]):
            fitted = ((0.0 + design[0, t] * coef[0]) + design[1, t] * coef[1]) + design[2, t] * coef[2]
            explained += (fitted - mean_r2) ** 2
            spread += (target[t] - mean_r2) ** 2
    df = used - 1
    statistic = m * explained / spread if df > 0 and m > df + 1 and spread > 0 else 0.0
    return low, used, statistic, near


def test_spread_test_in_one_pass_equals_the_plain_procedure():
    # real series (statsmodels datasets: sunspots yearly, El Nino monthly temperatures, the latter also with
    # a seeded fifth of its values missing) and a seeded one whose noise grows with its cycle; periods short,
    # long and at Nyquist (2: the sine vanishes on the grid and is left out)
    sunspots = statsmodels.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(float)
    elnino = statsmodels.datasets.elnino.load_pandas().data.iloc[:, 1:].to_numpy(float).ravel()
    rng = np.random.default_rng(7)
    gappy = np.where(rng.random(len(elnino)) < 0.2, np.nan, elnino)
    k = np.arange(300)
    growing = 10 + 3 * np.sin(2 * np.pi * k / 12) + (1 + 0.8 * np.sin(2 * np.pi * k / 12)) * rng.standard_normal(300)
    checked = 0
    for y in (sunspots, elnino, gappy, growing, growing[:9]):
        n = len(y)
        m, r, sum_r2 = spread_inputs(y)
        for period in (2.0, 3.0, 7.0, 12.0, 52.18):
            w = 2.0 * np.pi / period
            for exact in (False, True):
                design, fitted, target = np.empty((3, n)), np.empty(n), np.empty(n)
                got = changepoint._spread_test(y, n, m, max(m, 1), w, exact, r, sum_r2, design, fitted, target)
                want = plain_spread_test(y, n, m, max(m, 1), w, exact, r, sum_r2)
                np.testing.assert_array_equal(got[0], want[0])
                assert got[1:] == want[1:]
                checked += got[2] > 0
    assert checked > 20  # most cases have a statistic to compare


def test_diagonal_cross_products_equal_their_sums_one_by_one():
    # the cycle fit's columns (cosines and sines of a period, a residual) with values of many magnitudes
    rng = np.random.default_rng(11)
    for m in (0, 1, 5, 96, 1001):
        t = np.arange(m)
        cols = np.vstack(
            [np.cos(2 * np.pi * j * t / 12.3) for j in range(1, 4)]
            + [np.sin(2 * np.pi * j * t / 12.3) for j in range(1, 4)]
            + [np.zeros((2, m)), rng.standard_normal(m) * 10.0 ** rng.integers(-8, 8, m)]
        )
        for a0 in (0, 4):
            block, four = np.full((4, 4), np.nan), np.full(4, np.nan)
            changepoint._cross4_lower(cols, a0, 8, m, block, four)
            for i in range(4):
                for j in range(i + 1):
                    acc = 0.0
                    for k in range(m):
                        acc += cols[a0 + i, k] * cols[a0 + j, k]
                    assert block[i, j] == acc
                acc = 0.0
                for k in range(m):
                    acc += cols[a0 + i, k] * cols[8, k]
                assert four[i] == acc
