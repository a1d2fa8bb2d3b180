"""dtw_clusters: PAM against an exhaustive k-medoids search, planted families (adjusted Rand index from
scikit-learn, a test-only reference), determinism and the rows without an answer."""

import doctest
import itertools

import numpy as np
import pytest
from sklearn.metrics import adjusted_rand_score

from tsql.kernels import clusters
from tsql.kernels.clusters import FULL_MAX, dtw_clusters
from tsql.kernels.dtw import dtw_distance
from tsql.kernels.ragged import Ragged


def matrix(rows, band=None):
    count = len(rows)
    first, second = (a.ravel() for a in np.meshgrid(np.arange(count), np.arange(count), indexing="ij"))
    batch = Ragged.from_list(rows)
    return dtw_distance(batch.take(first), batch.take(second), band=band, normalize=True).reshape(count, count)


@pytest.mark.parametrize("seed", range(8))
def test_pam_reaches_the_exhaustive_optimum(seed):
    rng = np.random.default_rng(seed)
    count, k = int(rng.integers(6, 11)), int(rng.integers(2, 4))
    rows = [np.cumsum(rng.standard_normal(int(rng.integers(8, 14)))) for _ in range(count)]
    table = matrix(rows)
    optimum = min(table[:, list(m)].min(axis=1).sum() for m in itertools.combinations(range(count), k))
    found = dtw_clusters(np.arange(count), Ragged.from_list(rows), k=k)
    medoids = np.unique(found["medoid"])
    assert len(medoids) == k
    assert table[:, medoids].min(axis=1).sum() == pytest.approx(optimum, rel=1e-12)
    assert (table[np.arange(count), found["medoid"]] == table[:, medoids].min(axis=1)).all()  # nearest medoid


def families(rng, per_family, length=36):
    t = np.arange(length)
    shapes = [  # distinct under warping: three cycles, a rise, a fall, one bump
        np.sin(2 * np.pi * t / 12),
        np.where(t < length // 2, 0.0, 1.0),
        np.where(t < length // 2, 1.0, 0.0),
        np.exp(-0.5 * ((t - length / 3) / 3) ** 2),
    ]
    rows, labels = [], []
    for label, shape in enumerate(shapes):
        for _ in range(per_family):
            level, volume = rng.uniform(10, 1000), rng.uniform(1, 50)
            rows.append(level + volume * (shape + 0.05 * rng.standard_normal(length)))
            labels.append(label)
    return rows, np.array(labels)


def test_planted_families_are_found():
    rng = np.random.default_rng(7)
    rows, labels = families(rng, 15)
    found = dtw_clusters(np.arange(len(rows)), Ragged.from_list(rows))  # k chosen by silhouette
    assert found["cluster"].max() == 4
    assert adjusted_rand_score(labels, found["cluster"]) == 1.0
    assert (found["silhouette"] > 0.5).all()


def test_planted_families_are_found_by_sampling():
    rng = np.random.default_rng(8)
    rows, labels = families(rng, FULL_MAX // 4 + 10, length=24)
    assert len(rows) > FULL_MAX
    found = dtw_clusters(np.arange(len(rows)), Ragged.from_list(rows), k=4)
    assert adjusted_rand_score(labels, found["cluster"]) == 1.0


def test_row_order_does_not_matter():
    rng = np.random.default_rng(9)
    rows, _ = families(rng, 6)
    ids = np.array([f"sku-{n:02d}" for n in rng.permutation(len(rows))])
    found = dtw_clusters(ids, Ragged.from_list(rows))
    shuffle = rng.permutation(len(rows))
    again = dtw_clusters(ids[shuffle], Ragged.from_list([rows[s] for s in shuffle]))
    for field in ("cluster", "silhouette"):
        np.testing.assert_array_equal(again[field], found[field][shuffle])
    np.testing.assert_array_equal(ids[shuffle][again["medoid"]], ids[found["medoid"]][shuffle])


def test_rows_without_an_answer():
    rows = [[1.0, 2.0, 3.0], None, [np.nan, np.nan], [3.0, 2.0, 1.0], [1.0, 2.5, 3.0], [3.0, 2.0, 0.0]]
    found = dtw_clusters(np.arange(6), Ragged.from_list(rows), k=2)
    assert found["valid"].tolist() == [True, False, False, True, True, True]
    assert found["cluster"].tolist() == [1, 0, 0, 2, 1, 2]
    assert not dtw_clusters(np.arange(2), Ragged.from_list(rows[:2]), k=2)["valid"].any()
    with pytest.raises(ValueError, match="dtw_clusters: k must be"):
        dtw_clusters(np.arange(6), Ragged.from_list(rows), k=1)
    with pytest.raises(ValueError, match="dtw_clusters: ids must be unique"):
        dtw_clusters(np.zeros(6), Ragged.from_list(rows))


def test_docstring_examples():
    assert doctest.testmod(clusters).failed == 0


def sampled_reference(rows, k, band, normalize):
    """CLARA as the module notes say, with every item's distance to every sampled item computed."""
    from tsql.kernels.nearest import prepare

    prepared, _ = prepare(Ragged.from_list(rows), normalize)
    count = len(rows)
    rng = np.random.default_rng(clusters.SEED)
    choices = [k] if k else list(clusters.K_RANGE)
    size = 40 + 2 * max(choices)
    samples = [np.sort(rng.choice(count, size, replace=False)) for _ in range(clusters.SAMPLES)]
    pool = np.unique(np.concatenate(samples))
    first, second = np.repeat(np.arange(count), len(pool)), np.tile(pool, count)
    to_pool = dtw_distance(prepared.take(first), prepared.take(second), band=band).reshape(count, len(pool))
    to_pool[pool, np.arange(len(pool))] = 0.0
    answers = []
    for c in choices:
        best = None
        for sample in samples:
            columns = np.searchsorted(pool, sample)
            medoids = sample[clusters.pam(to_pool[sample][:, columns], c)]
            to_medoids = to_pool[:, np.searchsorted(pool, medoids)]
            if best is None or to_medoids.min(axis=1).sum() < best[0]:
                best = (to_medoids.min(axis=1).sum(), medoids, to_medoids)
        _, medoids, to_medoids = best
        ordered = np.sort(to_medoids, axis=1)
        a, b = ordered[:, 0], ordered[:, 1]
        with np.errstate(invalid="ignore", divide="ignore"):
            silhouette = np.where(np.maximum(a, b) == 0, 0.0, (b - a) / np.maximum(a, b))
        answers.append((silhouette.mean(), np.argmin(to_medoids, axis=1) + 1, medoids, silhouette))
    score = max(answer[0] for answer in answers)
    return next(answer[1:] for answer in answers if answer[0] == score)


@pytest.mark.parametrize("k, band, normalize", [(None, None, True), (3, 2, False), (None, 0, False)])
def test_sampling_computes_only_the_distances_its_answer_needs(k, band, normalize):
    # the items' distances to the chosen medoids only, not to every sampled item: the same answer, bit for bit
    rng = np.random.default_rng(31 + (band or 0))
    count = FULL_MAX + 30
    rows = [np.round(np.cumsum(rng.standard_normal(10)), 0) for _ in range(count)]  # many equal distances
    found = dtw_clusters(np.arange(count), Ragged.from_list(rows), k=k, band=band, normalize=normalize)
    labels, medoids, silhouette = sampled_reference(rows, k, band, normalize)
    np.testing.assert_array_equal(found["cluster"], labels)
    np.testing.assert_array_equal(found["medoid"], medoids[labels - 1])
    np.testing.assert_array_equal(found["silhouette"], silhouette)
