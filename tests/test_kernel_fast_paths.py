"""The kernels' branch-free and shortcut forms against the plain procedures they must equal exactly.

The noise scale of change_points sums parts of an array in the order Hoare's FIND leaves it, so its
selection must make his exchanges, in his order (and its two lags' squares, made in one pass, must give
what each lag gives by itself, and a row's range and sum, made while its present values are gathered,
those of the plain procedure): checked against FIND written out plainly from the
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
from tsql.kernels.normal_equations import cholesky, solve
from tsql.kernels.periodicity import fisher_g_pvalue, spectral_entropy
from tsql.kernels.ragged import Ragged, in_safe_range, magnitudes


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
                index = np.full(2 * m, -1, dtype=np.int64)  # scratch: what it holds must not matter
                got = changepoint._select(mine, np.int64(k), np.int64(m), index)
            else:
                m = n
                got = trend._select(mine, np.int64(k))
            assert got == hoare_find(plain, k, m)
            np.testing.assert_array_equal(mine, plain)  # the same arrangement, not only the same value


def plain_difference_scale(y: np.ndarray, lag: int, centred: bool) -> float:
    """The trimmed semivariogram at ``lag`` one lag at a time: differences, centred on their median (FIND, which
    reorders them), squared, FIND for the 90 % bound, the smallest summed in the order FIND leaves them."""
    d = y[lag:] - y[:-lag]
    centre = 0.0
    if centred:
        k = len(d)
        upper = hoare_find(d, k // 2, k)
        centre = upper if k % 2 else (max(d[: k // 2]) + upper) / 2.0
        assert centre == np.median(d)
    s = (d - centre) ** 2
    keep = max(1, math.ceil(changepoint.TRIM_KEEP * len(s)))
    bound = hoare_find(s, keep - 1, len(s))
    return 0.5 * changepoint.TRIM_CONSISTENCY * (sum_in_order(s[: keep - 1]) + bound) / keep


@pytest.mark.parametrize("centred", [False, True])
def test_both_lags_difference_scales_equal_one_lag_at_a_time(centred):
    # Mauna Loa CO2 (statsmodels' weekly record, gaps dropped) and seeded noise, walks, ties and level shifts
    co2 = statsmodels.datasets.co2.load_pandas().data["co2"].dropna().to_numpy()
    rng = np.random.default_rng(8)
    rows = [co2, co2[:20], np.round(rng.normal(size=999) * 2), np.cumsum(rng.normal(size=500))]
    rows += [rng.normal(size=n) + (np.arange(n) > n // 3) * 4.0 for n in (20, 21, 64, 1000)]
    for y in rows:
        m = len(y)
        work = np.full(2 * m, np.nan)
        index = np.full(2 * m, -1, dtype=np.int64)
        got = changepoint._difference_scales(y, np.int64(m), centred, work, index)
        assert got == (plain_difference_scale(y, 1, centred), plain_difference_scale(y, 2, centred))


def test_present_values_range_and_sum_equal_the_plain_procedure():
    # Mauna Loa CO2 (statsmodels' weekly record, its gaps kept: NaN), seeded noise with gaps, ties, signed zeros
    co2 = statsmodels.datasets.co2.load_pandas().data["co2"].to_numpy()
    rng = np.random.default_rng(9)
    gappy = rng.normal(size=500) * 1e3 + 1e6
    gappy[rng.integers(0, 500, 120)] = np.nan
    for y in [co2, gappy, np.round(rng.normal(size=300)), np.array([-0.0, 0.0, np.nan, 3.0]), np.array([np.nan, -2.0])]:
        values, positions, m, finite, lowest, highest, total = changepoint._present(y, 0, len(y))
        present = y[~np.isnan(y)]
        assert finite and m == len(present)
        np.testing.assert_array_equal(values[:m], present)
        np.testing.assert_array_equal(positions[:m], np.flatnonzero(~np.isnan(y)))
        assert (lowest, highest, total) == (present.min(), present.max(), sum_in_order(present))


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


def plain_cycle_fit(residual: np.ndarray, period: float) -> np.ndarray:
    """The fit _subtract_cycle removes, as the plain procedure: the harmonics turned position by position
    (evaluated every _RESYNC-th), each cross product a loop of its own, each position's fit summed in order."""
    n = len(residual)
    h = changepoint._harmonics(period)
    w = 2.0 * np.pi / period
    turn_c, turn_s = math.cos(w), math.sin(w)
    columns, norms = [], [0.0] * h
    c, s = 1.0, 0.0
    for t in range(n):
        c, s = changepoint._turn(t, w, c, s, turn_c, turn_s, False)
        cj, sj, row = c, s, []
        for j in range(h):
            row.append((j, cj, sj))
            norms[j] += sj * sj
            cj, sj = cj * c - sj * s, sj * c + cj * s
        if not np.isnan(residual[t]):
            columns.append([cj for _, cj, _ in row] + [sj for _, _, sj in row])
    x = np.array(columns).reshape(-1, 2 * h)
    r = residual[~np.isnan(residual)]
    gram, rhs = np.zeros((2 * h, 2 * h)), np.zeros(2 * h)
    for a in range(2 * h):
        rhs[a] = sum_in_order(x[:, a] * r)
        for b in range(a + 1):
            gram[a, b] = sum_in_order(x[:, a] * x[:, b])
    for a in range(h, 2 * h):
        if not math.sqrt(norms[a - h]) > 1e-6 * math.sqrt(n):
            gram[a, :] = gram[:, a] = 0.0
    coef = solve(cholesky(gram, 1e-12)[0], rhs)
    fit = np.full(n, np.nan)
    fit[~np.isnan(residual)] = [sum_in_order(coef * row) for row in x]
    return fit


def sum_in_order(terms: np.ndarray) -> float:
    total = 0.0
    for term in terms:
        total += term
    return total


def test_cycle_fit_equals_the_plain_procedure():
    # monthly CO2 (statsmodels' Mauna Loa weekly record, its gaps kept) and seeded noise with a cycle and gaps,
    # over periods at and near Nyquist, short, long, and with more harmonics than the fit takes
    co2 = statsmodels.datasets.co2.load_pandas().data["co2"].to_numpy(float)[:400]
    rng = np.random.default_rng(5)
    k = np.arange(300)
    noisy = 2 * np.sin(2 * np.pi * k / 12.2) + rng.standard_normal(300)
    whole = noisy.copy()  # no gaps: the columns are made harmonic by harmonic (_harmonic_columns)
    noisy[rng.random(300) < 0.2] = np.nan
    for y in (co2 - np.nanmean(co2), noisy, noisy[:23], whole, whole[:23], whole[:5]):
        for period in (2.0, 2.5, 3.0, 7.0, 12.0, 52.18, len(y) / 4.0):
            out = np.where(np.isnan(y), np.nan, 0.0)
            changepoint._subtract_cycle(y, period, out, np.empty(len(y) * (2 * changepoint.MAX_HARMONICS + 2)))
            want = plain_cycle_fit(y, period)
            assert np.array_equal(out, 0.0 - want, equal_nan=True)


def test_cycle_test_below_a_level_equals_the_full_test():
    # statsmodels' datasets (sunspots, monthly CO2 with its gaps, El Nino), random walks (significant against
    # white noise alone, not against red) and seeded white noise, cycles and near-Nyquist cycles
    sunspots = statsmodels.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(float)
    co2 = statsmodels.datasets.co2.load_pandas().data["co2"].to_numpy(float)
    elnino = statsmodels.datasets.elnino.load_pandas().data.iloc[:, 1:].to_numpy(float).ravel()
    rng = np.random.default_rng(3)
    rows = [sunspots, co2[:600], elnino]
    rows += [np.cumsum(rng.standard_normal(n)) for n in (50, 200, 200, 500, 1000)]
    rows += [rng.standard_normal(n) for n in (8, 30, 200, 1000)]
    cycles = ((48, 12), (200, 2.2), (500, 30))
    rows += [np.sin(2 * np.pi * np.arange(n) / p) + rng.standard_normal(n) for n, p in cycles]
    batch = Ragged.from_list(rows)
    full = periodicity.cycle_test(batch)
    for level in (0.01, 1e-6):
        found = periodicity.cycle_test(batch, below=level)
        reached = full["p_value"] < level
        assert 0 < reached.sum() < len(rows)
        for key in ("period", "p_value"):
            assert np.array_equal(found[key][reached], full[key][reached])
            assert np.isnan(found[key][~reached]).all()


def plain_sums(groups: list, omega: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """periodicity.Sums.sums as whole-array numpy steps: the doubled tables of cos and sin, one matrix product
    per row and block, the blocks turned and summed over by numpy's reduction along the first axis."""

    def powers(theta, count, start=None):
        cos, sin = np.empty((count, len(theta))), np.empty((count, len(theta)))
        cos[0], sin[0] = (1.0, 0.0) if start is None else (np.cos(start), np.sin(start))
        size, power = 1, 1.0
        while size < count:
            take = min(size, count - size)
            turn_c, turn_s = np.cos(theta * power), np.sin(theta * power)
            cos[size : size + take] = cos[:take] * turn_c - sin[:take] * turn_s
            sin[size : size + take] = sin[:take] * turn_c + cos[:take] * turn_s
            size, power = size + take, 2.0 * power
        return cos, sin

    rows, m = omega.shape
    n = np.concatenate([np.full(len(g.rows), float(g.n)) for g in groups])
    width = np.concatenate([np.full(len(g.rows), float(g.width)) for g in groups])
    most, blocks = max(g.width for g in groups), max(g.blocks for g in groups)
    flat = omega.ravel()
    cos_l, sin_l = powers(flat, most)
    inner = np.stack([cos_l.reshape(most, rows, m), sin_l.reshape(most, rows, m)], axis=-1)
    inner = np.ascontiguousarray(inner.transpose(1, 0, 2, 3)).reshape(rows, most, 2 * m)
    partial = np.zeros((rows, blocks, 2 * m))
    lo = 0
    for g in groups:
        hi = lo + len(g.rows)
        table = inner[lo:hi, : g.width]
        partial[lo:hi, : g.height] = g.body @ table
        if g.tail is not None:
            partial[lo:hi, g.height] = (g.tail @ table[:, : g.tail.shape[2]])[:, 0]
        lo = hi
    partial = np.ascontiguousarray(partial.transpose(1, 0, 2)).reshape(blocks, rows, m, 2)
    cos_h, sin_h = powers(flat * np.repeat(width, m), blocks, -0.5 * (np.repeat(n, m) - 1.0) * flat)
    cos_h, sin_h = cos_h.reshape(blocks, rows, m), sin_h.reshape(blocks, rows, m)
    c = (cos_h * partial[..., 0]).sum(axis=0) - (sin_h * partial[..., 1]).sum(axis=0)
    s = (sin_h * partial[..., 0]).sum(axis=0) + (cos_h * partial[..., 1]).sum(axis=0)
    return c, s


def test_trigonometric_sums_equal_the_whole_array_procedure():
    # residuals of statsmodels' sunspots and El Nino, and seeded rows of many lengths and magnitudes, in
    # groups of one length each (one row, several, lengths whose blocks differ) at frequencies up to Nyquist
    sunspots = statsmodels.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(float)
    elnino = statsmodels.datasets.elnino.load_pandas().data.iloc[:, 1:].to_numpy(float).ravel()
    rng = np.random.default_rng(8)
    rows_by_length = [sunspots[None, :300], elnino[None, :], rng.standard_normal((3, 4))]
    rows_by_length += [
        rng.standard_normal((k, n)) * 10.0 ** rng.integers(-6, 6, (k, 1)) for k, n in ((5, 17), (2, 1001))
    ]
    for chosen in ([0], [1, 2], [0, 3, 4], [4, 2, 1, 3]):
        groups = []
        for i in chosen:
            resid = rows_by_length[i] - rows_by_length[i].mean(axis=1, keepdims=True)
            groups.append(periodicity.Group(np.arange(len(resid)), resid, None))
        sums = periodicity.Sums(groups)
        for m in (3, 6):  # as the callers ask (numpy reduces a single sum, rows * m = 1, pairwise instead)
            omega = rng.uniform(0.0, np.pi, (len(sums.n), m))
            got, want = sums.sums(omega), plain_sums(groups, omega)
            assert got[0].tobytes() == want[0].tobytes() and got[1].tobytes() == want[1].tobytes()


def test_dirichlet_sums_from_shared_sines_equal_their_own():
    rng = np.random.default_rng(2)
    n = rng.integers(4, 5000, (200, 1)).astype(float)
    theta = np.concatenate([rng.uniform(0.0, 2 * np.pi, (200, 3)), np.zeros((200, 1)), np.full((200, 1), 1e-12)], 1)
    d, slope = periodicity._dirichlet_and_slope(theta, n)
    assert d.tobytes() == periodicity._dirichlet(theta, n).tobytes()
    assert slope.tobytes() == periodicity._dirichlet_slope(theta, n).tobytes()


def test_fisher_lower_bound_lies_below_the_p_value():
    # the Bonferroni bound that settles a row short of a level without the whole sum: at or below the exact
    # p-value everywhere (seeded g over many orders of magnitude and m), and close to it where it settles rows
    rng = np.random.default_rng(12)
    m = rng.integers(1, 5000, 40000).astype(float)
    g = np.concatenate([rng.uniform(0.0, 1.0, 20000) ** 4, 10.0 ** rng.uniform(-4, 0, 20000)])
    bound, exact = periodicity._fisher_lower_bound(g, m), fisher_g_pvalue(g, m)
    trusted = ~np.isnan(bound)
    assert trusted.mean() > 0.5
    assert (bound[trusted] <= exact[trusted] * (1.0 + 1e-9) + 1e-15).all()
    settles = trusted & (bound >= 0.02)
    assert (exact[settles] >= 0.02).all() and (bound[settles] >= 0.5 * exact[settles]).mean() > 0.9


def test_row_magnitudes_equal_the_largest_finite_absolute_value():
    # seeded rows over the whole exponent range, with NaN, infinities, empty and all-missing rows, subnormals
    rng = np.random.default_rng(21)
    rows = [rng.standard_normal(n) * 10.0 ** rng.integers(-320, 300) for n in rng.integers(0, 40, 300)]
    rows += [[np.nan, np.inf, 1.0], [-np.inf, np.nan], [], [np.nan], [1e300, -1e305], [5e-310, -0.0], [-3.0, 2.0]]
    batch = Ragged.from_list(rows)
    got = magnitudes(batch)
    want = [np.max(np.where(np.isfinite(r), np.abs(r), 0.0), initial=0.0) for r in map(np.asarray, rows)]
    assert got.tobytes() == np.array(want, dtype=np.float64).tobytes()


def test_periodogram_steps_equal_their_numpy_forms():
    # the detrending, the periodogram and the Dirichlet kernel, each as the numpy steps it replaces
    rng = np.random.default_rng(17)
    matrix = rng.standard_normal((9, 301)) * 1e3 + np.arange(301) * 0.7
    n = matrix.shape[1]
    u = np.arange(n, dtype=np.float64) - 0.5 * (n - 1)
    resid, _, _, _ = periodicity.detrend(matrix, None)
    mean = matrix.sum(axis=1) / n
    slope = np.einsum("ij,j->i", matrix, u) / (n * (n * n - 1.0) / 12.0)
    plain = matrix - mean[:, None]
    plain -= slope[:, None] * u
    assert np.array_equal(resid, plain)
    spectrum = np.fft.rfft(resid, axis=1)
    assert np.array_equal(periodicity._power(spectrum), spectrum.real**2 + spectrum.imag**2)
    theta = np.concatenate([rng.uniform(-7, 7, 50), [0.0, 1e-12, -1e-10, 2 * np.pi, 4 * np.pi + 1e-11]])
    for counts in (np.array([7.0]), rng.integers(2, 500, len(theta)).astype(float)):
        half = 0.5 * theta
        s = np.sin(half)
        small = np.abs(s) < 1e-9
        want = np.where(
            small, counts * np.cos(counts * half) / np.cos(half), np.sin(counts * half) / np.where(small, 1.0, s)
        )
        assert small.any()
        assert np.array_equal(periodicity._dirichlet(theta, counts), want)


def test_whitened_ordinates_equal_their_numpy_form():
    # the red background's ordinates, for one mask of tested bins and for one per row
    rng = np.random.default_rng(23)
    power = rng.exponential(size=(7, 65)) * 10.0 ** rng.integers(-3, 4, (7, 1))
    cos = np.cos(2.0 * np.pi * np.arange(65) / 128)
    phi = np.r_[0.0, 0.5, -0.3, 0.999, -0.999, 1e-3, 0.2][:, None]
    for untested in (np.arange(65) < 2, rng.random((7, 65)) < 0.3):
        want = np.multiply(2.0 * phi, cos)
        np.subtract(1.0, want, out=want)
        want += phi * phi
        want *= power
        np.copyto(want, 0.0, where=untested)
        got = np.empty_like(power)
        periodicity._whiten(
            power, cos, (2.0 * phi)[:, 0], (phi * phi)[:, 0], np.broadcast_to(untested, power.shape), got
        )
        assert np.array_equal(got, want)


def test_safe_range_scales_as_the_largest_magnitude_says():
    # rows in range, beyond it either way, with NaN, infinities, zeros and all missing: the rows the
    # magnitude max |x| (NaN skipped, infinities looked past) puts out of range are scaled by a power of two
    rng = np.random.default_rng(29)
    rows = [rng.standard_normal(6) * s for s in (1.0, 1e130, -1e130, 1e-130, 1e300, 1e-300)]
    rows += [np.r_[np.nan, -3e150, 2.0, np.nan, 1.0, 0.0], np.r_[np.inf, 1e-200, -np.inf, np.nan, 0.0, 0.0]]
    rows += [np.zeros(6), np.full(6, np.nan), -np.zeros(6), np.r_[-np.inf, -1e200, 0.0, 0.0, 0.0, 0.0]]
    matrix = np.array(rows)
    out = in_safe_range(matrix)
    for row, got in zip(matrix, out, strict=True):
        finite = np.abs(row[np.isfinite(row)])
        top = finite.max() if len(finite) else 0.0
        exponent = np.frexp(top)[1]
        if top > 0 and abs(exponent) > 400:
            want = row * np.ldexp(1.0, -int(np.clip(exponent, -1020, 1020)))
        else:
            want = row
        assert np.array_equal(got, want, equal_nan=True)
