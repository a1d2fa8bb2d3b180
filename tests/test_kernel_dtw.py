"""The DTW kernels against dtaidistance (test-only oracle), hand-worked examples and properties.

dtaidistance's ``window`` counts differently: for equal lengths its ``window=w + 1`` is our
``band=w`` (cells with ``|i - j| < window``). For unequal lengths it bands around both
diagonals (``j - i`` from ``-(window - 1)`` to ``m - n + (window - 1)``), not ``|i - j| <= band``;
there it is used unbanded, and banded only as a bracket from below and above.
"""

import math

import numpy as np
import pytest
from dtaidistance import dtw as reference
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from tsql.kernels import dtw
from tsql.kernels.cancel import Cancellation, Interrupted, checkpoint, watching
from tsql.kernels.dtw import dtw_distance, dtw_path, lb_keogh
from tsql.kernels.ragged import Ragged

RTOL = 1e-12  # the reference squares with ** (pow), the kernel with d * d: last-digit differences


def pair(x, y) -> tuple[Ragged, Ragged]:
    return Ragged.from_list([x]), Ragged.from_list([y])


def distance(x, y, **kw) -> float:
    return float(dtw_distance(*pair(x, y), **kw)[0])


def path(x, y, band=None) -> list[tuple[int, int]]:
    row = dtw_path(*pair(x, y), band=band).row(0)
    return list(zip(row["i"].tolist(), row["j"].tolist()))


def walks(rng, count, low, high) -> list[np.ndarray]:
    return [np.cumsum(rng.standard_normal(int(n))) for n in rng.integers(low, high + 1, count)]


def widened(n: int, m: int, band: int | None) -> int:
    return max(n, m) if band is None else max(band, abs(n - m))


def enumerate_paths(n: int, m: int, band: int | None):
    """Every warping path from (0, 0) to (n-1, m-1) inside the (widened) band, 0-based."""
    w = widened(n, m, band)

    def extend(cells):
        i, j = cells[-1]
        if (i, j) == (n - 1, m - 1):
            yield cells
            return
        for di, dj in ((1, 1), (1, 0), (0, 1)):
            a, b = i + di, j + dj
            if a < n and b < m and abs(a - b) <= w:
                yield from extend(cells + [(a, b)])

    yield from extend([(0, 0)])


def pair_scale(x, y) -> float:
    """The power of two the kernels scale a pair by when it lies beyond about 1e120 or below 1e-120."""
    _, exponent = np.frexp(max(np.abs(np.asarray(x, float)).max(), np.abs(np.asarray(y, float)).max()))
    return 2.0 ** -int(np.clip(exponent, -1020, 1020)) if abs(exponent) > 400 else 1.0


def sequential_cost(x, y, cells) -> float:
    """Squared differences along the path, added up from its start (the programme's order), of the
    pair scaled as the kernels scale it; the square root of it divided by the scale is the distance."""
    scale = pair_scale(x, y)
    x, y = np.asarray(x, float) * scale, np.asarray(y, float) * scale
    i = np.array([c[0] for c in cells]) - 1
    j = np.array([c[1] for c in cells]) - 1
    d = x[i] - y[j]
    return float(np.cumsum(d * d)[-1])


# --- against dtaidistance ---------------------------------------------------------------------


def test_matches_dtaidistance_without_band_equal_and_unequal_lengths():
    # reference: dtaidistance.dtw.distance (pure Python) and distance_fast (C), window=None
    rng = np.random.default_rng(11)
    xs, ys = walks(rng, 300, 1, 40), walks(rng, 300, 1, 40)
    got = dtw_distance(Ragged.from_list(xs), Ragged.from_list(ys))
    fast = [reference.distance_fast(x, y, use_pruning=False) for x, y in zip(xs, ys)]
    np.testing.assert_allclose(got, fast, rtol=RTOL)
    slow = [reference.distance(x, y) for x, y in zip(xs[:40], ys[:40])]
    np.testing.assert_allclose(got[:40], slow, rtol=RTOL)
    assert sum(len(x) != len(y) for x, y in zip(xs, ys)) > 250


@pytest.mark.parametrize("band", [0, 1, 2, 5, 10, 39])
def test_matches_dtaidistance_with_band_equal_lengths(band):
    # reference: dtaidistance.dtw.distance_fast(window = band + 1)
    rng = np.random.default_rng(band)
    for n in (1, 2, 7, 36, 40):
        xs, ys = walks(rng, 60, n, n), walks(rng, 60, n, n)
        got = dtw_distance(Ragged.from_list(xs), Ragged.from_list(ys), band=band)
        expected = [reference.distance_fast(x, y, window=band + 1, use_pruning=False) for x, y in zip(xs, ys)]
        np.testing.assert_allclose(got, expected, rtol=RTOL)


def test_long_pair_matches_dtaidistance():
    # reference: dtaidistance.dtw.distance_fast(window = band + 1)
    rng = np.random.default_rng(3)
    x, y = np.cumsum(rng.standard_normal(3000)), np.cumsum(rng.standard_normal(3000))
    for band in (0, 25, 200):
        assert distance(x, y, band=band) == pytest.approx(reference.distance_fast(x, y, window=band + 1), rel=RTOL)


@pytest.mark.parametrize("band", [0, 1, 3, 8])
def test_unequal_lengths_with_band_bracketed_by_dtaidistance(band):
    # reference: dtaidistance.dtw.distance_fast. Its band for window v is j - i in
    # [-(v-1), d + (v-1)] (d = m - n >= 0, mirrored for n > m). With W = max(band, |n - m|) our
    # band |i - j| <= W lies inside its band for v = W + 1 and contains its band for v = W - d + 1,
    # so on a larger band the distance can only be smaller.
    rng = np.random.default_rng(100 + band)
    xs, ys = walks(rng, 200, 2, 30), walks(rng, 200, 2, 30)
    got = dtw_distance(Ragged.from_list(xs), Ragged.from_list(ys), band=band)
    for x, y, g in zip(xs, ys, got):
        w, d = widened(len(x), len(y), band), abs(len(x) - len(y))
        below = reference.distance_fast(x, y, window=w + 1, use_pruning=False)
        above = reference.distance_fast(x, y, window=w - d + 1, use_pruning=False)
        assert below * (1 - RTOL) <= g <= above * (1 + RTOL)


@pytest.mark.parametrize("band", [None, 0, 1, 2])
def test_small_pairs_match_exhaustive_enumeration(band):
    # reference: the definition itself, by listing every warping path inside the widened band
    rng = np.random.default_rng(7)
    for _ in range(40):
        n, m = (int(v) for v in rng.integers(1, 7, 2))
        x, y = rng.standard_normal(n), rng.standard_normal(m)
        best = min(sequential_cost(x, y, [(i + 1, j + 1) for i, j in p]) for p in enumerate_paths(n, m, band))
        assert distance(x, y, band=band) == pytest.approx(math.sqrt(best), rel=RTOL)
        assert sequential_cost(x, y, path(x, y, band)) == pytest.approx(best, rel=RTOL)


@pytest.mark.parametrize("band", [0, 1, 4, 35])
def test_lb_keogh_matches_dtaidistance_equal_lengths(band):
    # reference: dtaidistance.dtw.lb_keogh(a, b, window = band + 1), envelope around b
    rng = np.random.default_rng(50 + band)
    xs, ys = walks(rng, 100, 36, 36), walks(rng, 100, 36, 36)
    got = lb_keogh(Ragged.from_list(xs), Ragged.from_list(ys), band)
    expected = [reference.lb_keogh(x, y, window=band + 1) for x, y in zip(xs, ys)]
    np.testing.assert_allclose(got, expected, rtol=RTOL, atol=0)


def test_normalize_matches_dtaidistance_on_z_normalised_series():
    # reference: dtaidistance.dtw.distance_fast on series z-normalised with numpy (population std)
    rng = np.random.default_rng(5)
    xs, ys = walks(rng, 50, 3, 30), walks(rng, 50, 3, 30)
    got = dtw_distance(Ragged.from_list(xs), Ragged.from_list(ys), normalize=True)

    def z(s):
        return (s - s.mean()) / s.std()

    expected = [reference.distance_fast(z(x), z(y), use_pruning=False) for x, y in zip(xs, ys)]
    np.testing.assert_allclose(got, expected, rtol=1e-9)


# --- worked by hand -----------------------------------------------------------------------------


def test_hand_worked_distances():
    # worked by hand: [0, 1, 2] vs [0, 1, 1, 2]: the path (1,1) (2,2) (2,3) (3,4) costs 0
    assert distance([0, 1, 2], [0, 1, 1, 2]) == 0.0
    # worked by hand: [0, 2] vs [1]: the only path (1,1) (2,1) costs 1 + 1
    assert distance([0, 2], [1]) == math.sqrt(2)
    # worked by hand: [3] vs [1, 2]: (1,1) (1,2) costs 4 + 1
    assert distance([3], [1, 2]) == math.sqrt(5)
    # worked by hand: [0, 0, 1] vs [0, 1, 1]: band 0 is the diagonal, cost 0 + 1 + 0;
    # band 1 allows (1,1) (2,1) (3,2) (3,3) at cost 0
    assert distance([0, 0, 1], [0, 1, 1], band=0) == 1.0
    assert distance([0, 0, 1], [0, 1, 1], band=1) == 0.0
    # worked by hand: [1, 2, 3, 4] vs [1, 2, 3, 4] shifted: [2, 3, 4, 5], full band:
    # (1,1) 1, (2,1) 0, (3,2) 0, (4,3) 0, (4,4) 1 -> 2; the diagonal costs 4
    assert distance([1, 2, 3, 4], [2, 3, 4, 5]) == math.sqrt(2)
    assert distance([1, 2, 3, 4], [2, 3, 4, 5], band=0) == 2.0


def test_hand_worked_paths_and_tie_breaking():
    # worked by hand: the unique zero-cost path
    assert path([0, 1, 2], [0, 1, 1, 2]) == [(1, 1), (2, 2), (2, 3), (3, 4)]
    # worked by hand: every path costs 0; the diagonal wins ties
    assert path([0, 0], [0, 0]) == [(1, 1), (2, 2)]
    # worked by hand: from (3,2) the diagonal (2,1), the cell above (2,2) and the left (3,1) all
    # hold 0: the diagonal wins; from (2,1) only (1,1) is left
    assert path([0, 0, 0], [0, 0]) == [(1, 1), (2, 1), (3, 2)]
    # worked by hand: from (3,2) the diagonal (2,1) and the cell above (2,2) both hold 1: diagonal
    assert path([0, 1, 2], [0, 2], band=0) == [(1, 1), (2, 1), (3, 2)]
    assert path([5], [1, 2, 3]) == [(1, 1), (1, 2), (1, 3)]


def test_hand_worked_lb_keogh():
    # worked by hand: b = [0, 1, 0], band 1: U = [1, 1, 1], L = [0, 0, 0]; only a_2 = 5 is outside: 4^2
    assert lb_keogh(*pair([0, 5, 0], [0, 1, 0]), 1)[0] == 4.0
    # worked by hand: b = [0, 1, 2, 1], band 1: U = [1, 2, 2, 2], L = [0, 0, 1, 1];
    # a = [3, -2, 0, 1] gives (3-1)^2 + (-2-0)^2 + (0-1)^2 + 0 = 9
    assert lb_keogh(*pair([3, -2, 0, 1], [0, 1, 2, 1]), 1)[0] == 3.0
    assert distance([3, -2, 0, 1], [0, 1, 2, 1], band=1) >= 3.0


def test_band_zero_with_unequal_lengths_is_widened():
    # worked by hand: [0, 1, 2] vs [0, 2]: band 0 is widened to 1; the cheapest path
    # (1,1) (2,1) (3,2) costs 0 + 1 + 0 (the diagonal band alone has no path to (3,2))
    assert distance([0, 1, 2], [0, 2], band=0) == 1.0
    assert distance([0, 1, 2], [0, 2], band=0) == distance([0, 1, 2], [0, 2], band=1)
    assert distance([0, 2], [0, 1, 2], band=0) == 1.0
    # worked by hand: length 1 against length 4 is a single row whatever the band
    assert distance([1], [1, 2, 3, 4], band=0) == math.sqrt(0 + 1 + 4 + 9)


# --- edge rows ----------------------------------------------------------------------------------


def test_rows_without_an_answer():
    a = Ragged.from_list([None, [], [1.0, np.nan], [1.0, np.inf], [1.0, 2.0], [1.0, 2.0], [4.0]])
    b = Ragged.from_list([[1.0], [1.0], [1.0, 2.0], [1.0, 2.0], None, [np.nan], [2.0]])
    expected = [np.nan] * 6 + [2.0]
    np.testing.assert_array_equal(dtw_distance(a, b), expected)
    np.testing.assert_array_equal(dtw_distance(a, b, band=0, normalize=True, cutoff=5.0), [np.nan] * 6 + [0.0])
    np.testing.assert_array_equal(lb_keogh(a, b, 1), expected)
    paths = dtw_path(a, b)
    assert paths.row_valid.tolist() == [False] * 6 + [True]
    assert [len(paths.row(r)["i"]) for r in range(7)] == [0] * 6 + [1]
    assert paths.row(6)["i"].tolist() == [1] and paths.row(6)["j"].tolist() == [1]
    assert paths.fields["i"].dtype == np.int64 and paths.fields["j"].dtype == np.int64


def test_length_one_and_constant_series():
    assert distance([2.0], [5.0]) == 3.0
    assert lb_keogh(*pair([2.0], [5.0]), 0)[0] == 3.0
    # a constant series normalises to zeros; so does a length-1 series
    assert distance([7.0, 7.0, 7.0], [0.1, 0.1], normalize=True) == 0.0
    # worked by hand: [7] -> [0]; [3, -1] (mean 1, population std 2) -> [1, -1]; cost 1 + 1
    assert distance([7.0], [3.0, -1.0], normalize=True) == math.sqrt(2)


def test_row_counts_must_agree():
    with pytest.raises(ValueError, match="same number"):
        dtw_distance(Ragged.from_list([[1.0]]), Ragged.from_list([[1.0], [2.0]]))


def test_empty_batch():
    empty = Ragged.from_list([])
    assert dtw_distance(empty, empty).shape == (0,)
    assert lb_keogh(empty, empty, 2).shape == (0,)
    assert dtw_path(empty, empty).n_rows == 0


# --- properties ---------------------------------------------------------------------------------

values = st.floats(-1e3, 1e3, allow_nan=False, allow_infinity=False)
series = st.lists(values, min_size=1, max_size=14)
bands = st.one_of(st.none(), st.integers(0, 15))


@settings(max_examples=300, deadline=None)
@given(st.integers(1, 14).flatmap(lambda n: st.tuples(*(st.lists(values, min_size=n, max_size=n),) * 2)), bands)
def test_equal_lengths_against_euclidean(xy, band):
    # The diagonal is one warping path, and with band 0 the only one. The squared differences
    # are added up from the start, as the programme does.
    x, y = (np.asarray(v) for v in xy)
    scale = pair_scale(x, y)  # a pair beyond about 1e120 or below 1e-120: scaled by a power of two first
    d = x * scale - y * scale
    euclidean = math.sqrt(np.cumsum(d * d)[-1]) / scale
    assert distance(x, y, band=0) == euclidean
    assert distance(x, y, band=band) <= euclidean


@settings(max_examples=300, deadline=None)
@given(series, series, bands)
def test_identity_symmetry_and_lower_bound(x, y, band):
    assert distance(x, x, band=band) == 0.0
    d = distance(x, y, band=band)
    assert distance(y, x, band=band) == d
    # the same band for both: with band None every cell is allowed, as with band max(n, m)
    envelope_band = max(len(x), len(y)) if band is None else band
    assert lb_keogh(*pair(x, y), envelope_band)[0] <= d
    assert lb_keogh(*pair(y, x), envelope_band)[0] <= d


@settings(max_examples=300, deadline=None)
@given(series, series, bands)
def test_path_is_a_warping_path_of_the_distance(x, y, band):
    n, m = len(x), len(y)
    cells = path(x, y, band)
    assert cells[0] == (1, 1) and cells[-1] == (n, m)
    steps = {(i2 - i1, j2 - j1) for (i1, j1), (i2, j2) in zip(cells, cells[1:])}
    assert steps <= {(1, 0), (0, 1), (1, 1)}
    assert all(abs(i - j) <= widened(n, m, band) for i, j in cells)
    assert math.sqrt(sequential_cost(x, y, cells)) / pair_scale(x, y) == distance(x, y, band=band)


@settings(max_examples=200, deadline=None)
@given(series, st.floats(0.01, 100), st.floats(-1e3, 1e3), bands)
def test_normalize_ignores_scale_and_shift(x, scale, shift, band):
    x = np.asarray(x)
    y = scale * x + shift
    # both series must keep their shape in float64: a spread far below the level is rounding noise
    assume(np.ptp(x) > 1e-6 * (1 + np.abs(x).max()) and np.ptp(y) > 1e-6 * (1 + np.abs(y).max()))
    assert distance(x, y, band=band, normalize=True) < 1e-6
    assert distance(np.full(3, shift), np.full(5, 2 * shift + 1), normalize=True) == 0.0


@settings(max_examples=300, deadline=None)
@given(series, series, bands, st.floats(0, 4))
def test_cutoff_returns_exact_distances_up_to_the_cutoff(x, y, band, fraction):
    exact = distance(x, y, band=band)
    cutoff = fraction * exact
    got = distance(x, y, band=band, cutoff=cutoff)
    if exact <= cutoff:
        assert got == exact
    else:
        assert math.isnan(got)
    assert distance(x, y, band=band, cutoff=exact) == exact
    assert distance(x, y, band=band, cutoff=math.inf) == exact


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(series, series), min_size=1, max_size=8), bands)
def test_cutoff_on_a_batch_equals_filtering_the_distances(rows, band):
    a, b = Ragged.from_list([r[0] for r in rows]), Ragged.from_list([r[1] for r in rows])
    exact = dtw_distance(a, b, band=band)
    cutoff = float(np.median(exact))
    np.testing.assert_array_equal(
        dtw_distance(a, b, band=band, cutoff=cutoff), np.where(exact <= cutoff, exact, np.nan)
    )


# --- batch independence -------------------------------------------------------------------------


def test_pairs_alone_and_in_a_big_batch_agree_exactly():
    rng = np.random.default_rng(21)
    xs, ys = walks(rng, 400, 0, 40), walks(rng, 400, 0, 40)
    xs[3], ys[9] = None, None
    xs[5] = np.array([1.0, np.nan, 2.0])
    for i in range(0, 400, 7):  # a block of equal lengths, as a self-join hands over
        xs[i], ys[i] = rng.standard_normal(36), rng.standard_normal(36)
    a, b = Ragged.from_list(xs), Ragged.from_list(ys)
    settings_ = [{}, {"band": 0}, {"band": 3, "normalize": True}, {"band": 5, "cutoff": 4.0}]
    for kw in settings_:
        together = dtw_distance(a, b, **kw)
        alone = [dtw_distance(*pair(x, y), **kw)[0] for x, y in zip(xs, ys)]
        np.testing.assert_array_equal(together, alone)
    together = lb_keogh(a, b, 2)
    np.testing.assert_array_equal(together, [lb_keogh(*pair(x, y), 2)[0] for x, y in zip(xs, ys)])
    paths = dtw_path(a, b, band=4)
    for r, (x, y) in enumerate(zip(xs, ys)):
        one = dtw_path(*pair(x, y), band=4)
        assert paths.row_valid[r] == one.row_valid[0]
        for field in ("i", "j"):
            np.testing.assert_array_equal(paths.row(r)[field], one.row(0)[field])


@pytest.mark.parametrize("count", [3, 4, 31, 32, 36, 67])
def test_equal_shapes_stepped_together_agree_with_each_alone(count):
    # pairs of one shape go through the programme side by side; remainders go alone
    rng = np.random.default_rng(count)
    xs, ys = list(rng.standard_normal((count, 12))), list(rng.standard_normal((count, 9)))
    a, b = Ragged.from_list(xs), Ragged.from_list(ys)
    for kw in ({}, {"band": 4}, {"normalize": True}, {"band": 3, "cutoff": 3.0}, {"cutoff": 0.0}):
        together = dtw_distance(a, b, **kw)
        alone = [dtw_distance(*pair(x, y), **kw)[0] for x, y in zip(xs, ys)]
        np.testing.assert_array_equal(together, alone)
    # reference: dtaidistance.dtw.distance_fast; the unequal lengths here need no band
    expected = [reference.distance_fast(x, y, use_pruning=False) for x, y in zip(xs, ys)]
    np.testing.assert_allclose(dtw_distance(a, b), expected, rtol=RTOL)
    # paths are traced side by side too, each from its own lane
    for band in (None, 4):
        together = dtw_path(a, b, band=band)
        for r, (x, y) in enumerate(zip(xs, ys)):
            one = dtw_path(*pair(x, y), band=band)
            for field in ("i", "j"):
                np.testing.assert_array_equal(together.row(r)[field], one.row(0)[field])
    # reference: dtaidistance.dtw.warping_path (0-based cells); Gaussian values leave no tied paths
    paths = dtw_path(a, b)
    for r, (x, y) in enumerate(zip(xs, ys)):
        cells = list(zip(paths.row(r)["i"] - 1, paths.row(r)["j"] - 1))
        assert cells == [tuple(c) for c in reference.warping_path(x, y)]


def test_unbanded_and_wide_bands_agree():
    rng = np.random.default_rng(8)
    xs, ys = walks(rng, 100, 1, 20), walks(rng, 100, 1, 20)
    a, b = Ragged.from_list(xs), Ragged.from_list(ys)
    np.testing.assert_array_equal(dtw_distance(a, b), dtw_distance(a, b, band=19))
    np.testing.assert_array_equal(dtw_distance(a, b), dtw_distance(a, b, band=10**9))
    unbanded, wide = dtw_path(a, b), dtw_path(a, b, band=10**9)
    np.testing.assert_array_equal(unbanded.offsets, wide.offsets)
    for field in ("i", "j"):
        np.testing.assert_array_equal(unbanded.fields[field], wide.fields[field])


# --------------------------------------------------------------------------- #
# work cut into pieces with a look at interrupt requests between them
# --------------------------------------------------------------------------- #


def chunking_batch(rng) -> tuple[Ragged, Ragged]:
    """Ragged shapes, 40 pairs of one shape (a full tile of 32 and a padded one of 8) and a few of another."""
    left = walks(rng, 30, 1, 45) + [np.cumsum(rng.standard_normal(40)) for _ in range(40 + 3)]
    right = walks(rng, 30, 1, 45) + [np.cumsum(rng.standard_normal(37 if k < 40 else 52)) for k in range(43)]
    return Ragged.from_list(left), Ragged.from_list(right)


@pytest.mark.parametrize("budget", [1, 40, 2_000, 60_000])
def test_work_in_pieces_gives_the_same_answers_bit_for_bit(monkeypatch, budget):
    # budget 1: every pair, and every tile of 32 pairs, goes through the programme one row per piece
    rng = np.random.default_rng(99)
    a, b = chunking_batch(rng)
    settings_list = [{}, {"band": 3}, {"band": 0, "cutoff": 6.0}, {"normalize": True, "cutoff": 2.5}]
    whole = [dtw_distance(a, b, **kw) for kw in settings_list]
    paths = [dtw_path(a, b, band=band) for band in (None, 2)]
    monkeypatch.setattr(dtw, "_BUDGET", budget)
    for kw, expected in zip(settings_list, whole):
        np.testing.assert_array_equal(dtw_distance(a, b, **kw), expected)
    for band, expected in zip((None, 2), paths):
        got = dtw_path(a, b, band=band)
        np.testing.assert_array_equal(got.offsets, expected.offsets)
        for field in ("i", "j"):
            np.testing.assert_array_equal(got.fields[field], expected.fields[field])


@pytest.mark.parametrize("kernel", ["distance one pair", "distance tiles", "distance many pairs", "path"])
def test_a_long_call_looks_for_an_interrupt_between_pieces_and_stops(monkeypatch, kernel):
    rng = np.random.default_rng(5)
    if kernel == "distance many pairs":  # 94 tiles of 32 pairs of 25 x 25 cells: pieces of several tiles
        a, b = Ragged.from_list(walks(rng, 3000, 25, 25)), Ragged.from_list(walks(rng, 3000, 25, 25))
    elif kernel == "distance tiles":  # 40 pairs of 300 x 300 cells: tiles in blocks of rows
        a, b = Ragged.from_list(walks(rng, 40, 300, 300)), Ragged.from_list(walks(rng, 40, 300, 300))
    else:  # one pair of 1,000 x 1,000 cells: blocks of rows
        a, b = pair(np.cumsum(rng.standard_normal(1000)), np.cumsum(rng.standard_normal(1000)))
    run = (lambda: dtw_path(a, b)) if kernel == "path" else (lambda: dtw_distance(a, b))
    monkeypatch.setattr(dtw, "_BUDGET", 20_000)
    expected = run()
    looks = []
    cancel = Cancellation()

    def look(interrupt_at: int | None) -> None:
        looks.append(1)
        if len(looks) == interrupt_at:
            cancel.bump()  # as tsql.interrupt does, from another thread
        checkpoint()

    monkeypatch.setattr(dtw, "checkpoint", lambda: look(None))
    got = watching(run, cancel)()
    # 1,000,000 cells or more, in pieces of about 20,000 units (a cell of a tile of 32 pairs is 4 units)
    assert len(looks) >= 10
    if kernel != "path":
        np.testing.assert_array_equal(got, expected)
    looks.clear()
    monkeypatch.setattr(dtw, "checkpoint", lambda: look(3))
    with pytest.raises(Interrupted, match="interrupted by tsql.interrupt"):
        watching(run, cancel)()
    assert len(looks) == 3  # stopped at the first look after the request
