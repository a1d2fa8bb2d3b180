"""max_changes and change_points_path against exhaustive enumeration of every segmentation.

On short seeded random signals every segmentation (all sets of change positions with segments of
at least min_size present values) is costed with the definitions of tsql.kernels.changepoint.segments,
written out in numpy in test_kernel_changepoint.py; the best with exactly j changes, C_j, is then
known exactly, and so is the optimum of cost + penalty * changes for any penalty.
"""

import itertools
import math

import numpy as np
import pytest
from test_kernel_changepoint import piecewise, segment_cost, sigma_first, sigma_second

from tsql.kernels.changepoint import change_points, change_points_path, segments
from tsql.kernels.ragged import Ragged


def all_segmentations(x, model: str, min_size: int, mbic: bool = False):
    """(changes as 1-based positions, total cost) of every segmentation of the present values."""
    x = np.asarray(x, dtype=float)
    keep = ~np.isnan(x)
    y, t = x[keep], np.flatnonzero(keep).astype(float)
    m = len(y)
    scale = sigma_second(y, t) if model == "trend" else sigma_first(y)
    out = []
    for k in range(m // min_size):
        for cuts in itertools.combinations(range(1, m), k):
            bounds = (0, *cuts, m)
            if min(b - a for a, b in itertools.pairwise(bounds)) < min_size:
                continue
            cost = 0.0
            for a, b in itertools.pairwise(bounds):
                cost += segment_cost(model, y[a:b], t[a:b], scale)
                if mbic:
                    cost += math.log((b - a) / m)
            out.append(([int(t[c]) + 1 for c in cuts], cost))
    return out


def best_by_count(options) -> dict[int, tuple[list[int], float]]:
    best: dict[int, tuple[list[int], float]] = {}
    for cuts, cost in options:
        if len(cuts) not in best or cost < best[len(cuts)][1]:
            best[len(cuts)] = (cuts, cost)
    return best


def signals(seed: int, model: str, count: int = 14) -> list[np.ndarray]:
    rng = np.random.default_rng(seed)
    out = []
    for i in range(count):
        x = piecewise(rng, int(rng.integers(6, 13)), int(rng.integers(0, 4)), model)
        if i % 5 == 4:
            x[rng.integers(0, len(x))] = np.nan
        out.append(x)
    return out


@pytest.mark.parametrize("model,min_size", [("mean", 1), ("mean", 2), ("meanvar", 2), ("trend", 2), ("trend", 3)])
def test_max_changes_is_the_best_with_at_most_k_changes(model, min_size):
    xs = signals({"mean": 1, "meanvar": 2, "trend": 3}[model] + min_size, model)
    batch = Ragged.from_list(xs)
    every = {mbic: [all_segmentations(x, model, min_size, mbic) for x in xs] for mbic in (False, True)}
    checked = 0
    for k in (0, 1, 2, 3):
        for penalty in (0.0, 1.5, "bic", "mbic"):
            got = change_points(batch, model, penalty, min_size, seasonal="none", max_changes=k)
            for i, x in enumerate(xs):
                m = int(np.sum(~np.isnan(x)))
                # fewer than 20 values: the named penalties carry no long-run factor
                beta = {"bic": {"mean": 2, "meanvar": 3, "trend": 3}[model] * math.log(m), "mbic": 3 * math.log(m)}
                beta = beta.get(penalty, penalty)
                options = [
                    (cuts, cost + beta * len(cuts)) for cuts, cost in every[penalty == "mbic"][i] if len(cuts) <= k
                ]
                expected = min(options, key=lambda o: (o[1], len(o[0])))[0]
                assert [int(v) for v in got.row(i)] == expected, (model, min_size, k, penalty, i)
                checked += len(expected)
    assert checked > 100


@pytest.mark.parametrize("model,min_size", [("mean", 1), ("mean", 2), ("meanvar", 2), ("trend", 2)])
def test_every_point_of_the_path_is_exact(model, min_size):
    xs = signals({"mean": 11, "meanvar": 12, "trend": 13}[model] + min_size, model)
    k_max = 4
    records, positions = change_points_path(Ragged.from_list(xs), model, k_max, min_size, seasonal="none")
    record = 0
    for i, x in enumerate(xs):
        best = best_by_count(all_segmentations(x, model, min_size))
        row = records.row(i)
        n = len(row["changes"])
        # the path tiles [0, inf): from the most changes at penalty 0 to none at infinity
        assert row["changes"][0] == 0 and row["penalty_to"][0] == math.inf and row["penalty_from"][-1] == 0.0
        np.testing.assert_array_equal(row["penalty_from"][:-1], row["penalty_to"][1:])
        assert np.all(np.diff(row["changes"]) > 0) and np.all(row["penalty_from"] < row["penalty_to"])
        for j in range(n):
            changes = int(row["changes"][j])
            cuts, cost = best[changes]
            assert row["cost"][j] == pytest.approx(cost, rel=1e-9, abs=1e-9)
            assert [int(v) for v in positions.row(record + j)] == cuts
            # inside its penalty range the record is the optimum over at most k_max changes
            lo, hi = row["penalty_from"][j], row["penalty_to"][j]
            for beta in (lo + 1e-6, (lo + min(hi, lo + 50.0)) / 2, min(hi, lo + 100.0) - 1e-6):
                totals = {c: best[c][1] + beta * c for c in best if c <= k_max}
                assert min(totals, key=lambda c: (totals[c], c)) == changes, (i, j, beta)
            # and where the unconstrained optimum has at most k_max changes it is that optimum
            unconstrained = change_points(
                Ragged.from_list([x]), model, float((lo + min(hi, lo + 50.0)) / 2), min_size, "none"
            )
            if len(unconstrained.row(0)) <= k_max:
                assert [int(v) for v in unconstrained.row(0)] == cuts
        record += n
    assert record > 2 * len(xs)  # the paths do have several points


def test_path_edge_rows_and_arguments():
    records, positions = change_points_path(Ragged.from_list([None, [], [3.0] * 6, [1.0, 2.0, 9.0], [np.nan] * 3]))
    np.testing.assert_array_equal(records.row_valid, [False, False, True, True, False])
    for i in (2, 3):  # constant, too short: one record, no change, cost NULL (no noise scale)
        row = records.row(i)
        assert row["changes"].tolist() == [0] and np.isnan(row["cost"][0])
        assert row["penalty_from"].tolist() == [0.0] and row["penalty_to"].tolist() == [math.inf]
    assert len(positions.values) == 0
    one = Ragged.from_list([[1.0, 2.0, 3.0, 4.0]])
    for kwargs in ({"max_changes": -1}, {"max_changes": 1.5}, {"seasonal": "yearly"}, {"seasonal": 1.0}):
        with pytest.raises(ValueError):
            change_points_path(one, **kwargs)
    with pytest.raises(ValueError):
        change_points(one, max_changes=-2)


def test_max_changes_on_segments_and_a_long_series():
    # one planted shift in 1,000 points: with at most one change, that change, at any penalty
    rng = np.random.default_rng(7)
    x = np.r_[rng.normal(0, 1, 600), rng.normal(1.5, 1, 400)]
    seg = segments(Ragged.from_list([x]), penalty=0.0, max_changes=1).row(0)
    assert len(seg["first"]) == 2 and abs(seg["first"][1] - 601) <= 5
    records, _ = change_points_path(Ragged.from_list([x]), max_changes=3)
    assert records.fields["changes"][1] == 1
