"""Groups of look-alike items: k-medoids on dynamic time warping distances.

A medoid is an item, so a group is shown by a real series, and any distance
will do, DTW included. Up to ``FULL_MAX`` items the whole distance matrix is
computed and PAM (Kaufman & Rousseeuw 1990, ch. 2) searches it: BUILD picks
medoids greedily, SWAP exchanges a medoid and another item while that lowers
the total distance of the items to their nearest medoid. For more items CLARA
(ch. 3) runs PAM on samples of ``40 + 2k`` items, judges each sample's medoids
by the total distance of all items to them, and keeps the best; every item is
then assigned to its nearest medoid. Only the distances within each sample
and from every item to the medoids some sample chose are computed (on the
sample warehouse's 3,000 items, k in 2..10: 69 medoids against 290 sampled
items, a quarter of the work, the same answer). The samples are drawn by a
seeded generator from the items ordered by id, so the answer does not depend
on the order of the rows.

k is chosen, when not given, among 2..10 by the average silhouette (Rousseeuw
1987): for each item, ``a`` is its mean distance to the rest of its group,
``b`` the least mean distance to another group, ``s = (b - a) / max(a, b)``.
With more than ``FULL_MAX`` items, where the whole matrix is not computed, the
medoid silhouette stands in for it: ``a`` and ``b`` are the distances to the
item's own and to the nearest other medoid.

References
----------
.. [1] Kaufman, L. & Rousseeuw, P. J. (1990). *Finding Groups in Data: An
   Introduction to Cluster Analysis*. Wiley, ch. 2 (PAM) and 3 (CLARA).
.. [2] Rousseeuw, P. J. (1987). Silhouettes: a graphical aid to the
   interpretation and validation of cluster analysis. *Journal of Computational
   and Applied Mathematics* 20, 53–65.
"""

from __future__ import annotations

import numpy as np

from tsql.kernels.dtw import dtw_distance
from tsql.kernels.nearest import prepare
from tsql.kernels.ragged import Ragged

__all__ = ["FULL_MAX", "dtw_clusters", "pam"]

#: Up to this many items the whole distance matrix is computed (about 80,000 pairs).
FULL_MAX = 400
#: CLARA: samples drawn, and the generator's seed.
SAMPLES = 5
SEED = 20_260_418
#: k tried when none is given.
K_RANGE = range(2, 11)


def pam(distances: np.ndarray, k: int) -> np.ndarray:
    """Medoids (row indices, ascending) of a k-medoids solution by PAM's BUILD and SWAP.

    Ties go to the smaller index; a swap is made only when it lowers the total
    by more than rounding could.
    """
    count = len(distances)
    medoids = [int(np.argmin(distances.sum(axis=1)))]
    nearest = distances[medoids[0]].copy()
    while len(medoids) < k:  # BUILD
        gain = np.maximum(nearest[None, :] - distances, 0.0).sum(axis=1)
        gain[medoids] = -1.0
        medoids.append(int(np.argmax(gain)))
        nearest = np.minimum(nearest, distances[medoids[-1]])
    medoids = np.array(medoids)
    total = nearest.sum()
    for _ in range(100 * count):  # SWAP: the best exchange while it helps
        to_medoids = distances[medoids]
        order = np.argsort(to_medoids, axis=0, kind="stable")
        first = np.take_along_axis(to_medoids, order[:1], 0)[0]
        second = np.take_along_axis(to_medoids, order[1:2], 0)[0] if k > 1 else np.full(count, np.inf)
        best, best_total = None, total
        for slot in range(k):
            others = np.where(order[0] == slot, second, first)
            totals = np.minimum(distances, others[None, :]).sum(axis=1)
            totals[medoids] = np.inf
            h = int(np.argmin(totals))
            if totals[h] < best_total:
                best, best_total = (slot, h), totals[h]
        if best is None or best_total >= total - 1e-12 * max(total, 1e-300):
            break
        medoids[best[0]] = best[1]
        total = best_total
    return np.sort(medoids)


def _silhouette(distances: np.ndarray, labels: np.ndarray, k: int) -> np.ndarray:
    """Rousseeuw's silhouette per item from the full matrix; 0 for an item alone in its group."""
    count = len(distances)
    sums = np.zeros((count, k))
    for c in range(k):
        sums[:, c] = distances[:, labels == c].sum(axis=1)
    sizes = np.bincount(labels, minlength=k).astype(float)
    own = sizes[labels] - 1
    with np.errstate(invalid="ignore", divide="ignore"):
        a = sums[np.arange(count), labels] / own
        means = sums / sizes[None, :]
        means[np.arange(count), labels] = np.inf
        b = means.min(axis=1)
        s = (b - a) / np.maximum(a, b)
    s[own == 0] = 0.0
    s[(own > 0) & (np.maximum(a, b) == 0)] = 0.0
    return s


def _medoid_silhouette(to_medoids: np.ndarray) -> np.ndarray:
    """The medoid silhouette: own medoid's distance against the nearest other medoid's."""
    ordered = np.sort(to_medoids, axis=1)
    a, b = ordered[:, 0], ordered[:, 1]
    with np.errstate(invalid="ignore", divide="ignore"):
        s = (b - a) / np.maximum(a, b)
    s[np.maximum(a, b) == 0] = 0.0
    return s


def _pairs(batch: Ragged, first: np.ndarray, second: np.ndarray, band: int | None) -> np.ndarray:
    return dtw_distance(batch.take(first), batch.take(second), band=band)


def _full_matrix(batch: Ragged, band: int | None) -> np.ndarray:
    count = batch.n_rows
    first, second = np.triu_indices(count, 1)
    matrix = np.zeros((count, count))
    matrix[first, second] = matrix[second, first] = _pairs(batch, first, second, band)
    return matrix


def dtw_clusters(
    ids: np.ndarray, series: Ragged, k: int | None = None, band: int | None = None, normalize: bool = True
) -> dict[str, np.ndarray]:
    """Groups of look-alike items by k-medoids on the dynamic time warping distance.

    PAM on the whole distance matrix up to ``FULL_MAX`` items, CLARA above
    (see the module notes) [1]_; ``k`` chosen by the average silhouette when
    not given [2]_.

    Parameters
    ----------
    ids : numpy.ndarray
        One id per item (numbers or strings), unique and not missing. Items
        are ordered by id before anything else, so the row order does not
        matter; ties go to the smaller id.
    series : Ragged
        One series per item. Gaps are filled and unusable items left out as in
        :func:`tsql.kernels.nearest.dtw_nearest`.
    k : int or None
        Number of groups (>= 2); None tries 2..10 and keeps the one with the
        largest average silhouette (the smaller k on a tie).
    band : int or None
        Sakoe–Chiba half-width, as in :func:`tsql.kernels.dtw.dtw_distance`.
    normalize : bool
        z-normalise each filled series first. True by default: items that move
        alike at very different volumes belong together.

    Returns
    -------
    dict of numpy.ndarray
        Per row of the input: ``cluster`` (int64, 1..k, numbered in the order
        of the medoids' ids; 0 when the row has no answer), ``medoid`` (int64,
        the input position of the group's medoid; -1), ``silhouette``
        (float64; NaN) and ``valid`` (bool). A row has no answer when its
        series is unusable, or when fewer than ``k + 1`` items (3 for k=None)
        are usable.

    See Also
    --------
    tsql.kernels.nearest.dtw_nearest : the nearest items of each item.

    References
    ----------
    .. [1] Kaufman, L. & Rousseeuw, P. J. (1990). *Finding Groups in Data*.
       Wiley, ch. 2-3.
    .. [2] Rousseeuw, P. J. (1987). *J. Comput. Appl. Math.* 20, 53–65.

    Examples
    --------
    >>> up, down = [0, 1, 2, 3, 4, 5], [5, 4, 3, 2, 1, 0]
    >>> found = dtw_clusters(np.array([1, 2, 3, 4]), Ragged.from_list([up, down, up[::-1], up]), k=2)
    >>> found["cluster"].tolist(), found["medoid"].tolist()
    ([1, 2, 2, 1], [0, 1, 1, 0])
    """
    ids = np.asarray(ids)
    if len(ids) != series.n_rows:
        raise ValueError(f"dtw_clusters: {len(ids)} ids for {series.n_rows} series; give one id per series")
    if k is not None and (int(k) != k or k < 2):
        raise ValueError(f"dtw_clusters: k must be a whole number >= 2 or NULL (chosen), got {k!r}")
    if band is not None and band < 0:
        raise ValueError(f"dtw_clusters: band must be >= 0 or NULL (any warping), got {band}")
    try:
        order = np.argsort(ids, kind="stable")
    except TypeError:
        raise ValueError("dtw_clusters: ids must be numbers or strings of one kind, none missing") from None
    if len(ids) > 1 and np.any(ids[order][1:] == ids[order][:-1]):
        raise ValueError("dtw_clusters: ids must be unique; group the rows to one series per id first")
    prepared, usable = prepare(series, normalize)
    items = order[usable[order]]
    batch = prepared.take(items)
    count = len(items)
    out = {
        "cluster": np.zeros(series.n_rows, dtype=np.int64),
        "medoid": np.full(series.n_rows, -1, dtype=np.int64),
        "silhouette": np.full(series.n_rows, np.nan),
        "valid": np.zeros(series.n_rows, dtype=bool),
    }
    choices = [int(k)] if k is not None else [c for c in K_RANGE if c < count]
    if not choices or choices[0] >= count:
        return out
    if count <= FULL_MAX:
        matrix = _full_matrix(batch, band)
        candidates = []
        for c in choices:
            medoids = pam(matrix, c)
            labels = np.argmin(matrix[:, medoids], axis=1)
            silhouette = _silhouette(matrix, labels, c)
            candidates.append((float(silhouette.mean()), c, medoids, labels, silhouette))
    else:
        rng = np.random.default_rng(SEED)
        size = min(count, 40 + 2 * max(choices))
        samples = [np.sort(rng.choice(count, size, replace=False)) for _ in range(SAMPLES)]
        within = _pairs(batch, np.repeat(samples, size), np.tile(samples, size).ravel(), band)
        within = within.reshape(SAMPLES, size, size)
        within[:, np.arange(size), np.arange(size)] = 0.0
        chosen = {(c, s): samples[s][pam(within[s], c)] for c in choices for s in range(SAMPLES)}
        medoid_pool = np.unique(np.concatenate(list(chosen.values())))  # all items need distances to these only
        to_pool = _pairs(batch, np.repeat(np.arange(count), len(medoid_pool)), np.tile(medoid_pool, count), band)
        to_pool = to_pool.reshape(count, len(medoid_pool))
        to_pool[medoid_pool, np.arange(len(medoid_pool))] = 0.0
        candidates = []
        for c in choices:
            best = None
            for s in range(SAMPLES):
                medoids = chosen[c, s]
                to_medoids = to_pool[:, np.searchsorted(medoid_pool, medoids)]
                total = to_medoids.min(axis=1).sum()
                if best is None or total < best[0]:
                    best = (total, medoids, to_medoids)
            _, medoids, to_medoids = best
            labels = np.argmin(to_medoids, axis=1)
            silhouette = _medoid_silhouette(to_medoids)
            candidates.append((float(silhouette.mean()), c, medoids, labels, silhouette))
    best_score = max(score for score, *_ in candidates)
    _, c, medoids, labels, silhouette = next(item for item in candidates if item[0] == best_score)
    out["cluster"][items] = labels + 1  # medoids ascend in id order
    out["medoid"][items] = items[medoids[labels]]
    out["silhouette"][items] = silhouette
    out["valid"][items] = True
    return out
