"""dtw_nearest against brute force (every pair through dtw_distance, then a ranking), side by side in one run.

    python -m benchmarks.dtw_nearest_kernel [--items 1000] [--repeat 3] [--big 20000] [--pruning]

1. The sample warehouse's monthly sales (72 months, missing months as gaps), the first ``--items`` items:
   ``dtw_nearest`` (k = 5, no band, not normalised) against ``dtw_distance`` on every unordered pair
   (compiled, 32 pairs per vector tile) plus a ranking; the answers are checked equal.
   The same items as a table in DuckDB: the brute-force self-join with a window rank through the shipped SQL
   ``dtw_distance`` (every ordered pair, as a user would write it) against the SQL aggregate ``dtw_nearest``
   unnested to the same rows; the rows are checked equal.
2. All 3,000 items of the warehouse through ``dtw_nearest`` alone (the issue's bar: under 15 s); then with
   ``band`` 2 and None, not normalised against ``normalize=True`` (shapes only), one after the other.
3. All 3,000 items through ``dtw_clusters`` (k chosen among 2..10, normalised), timed once.
4. ``--big`` seeded synthetic weekly series of 52 points (families of shapes at log-normal volumes, Poisson
   counts), ``dtw_nearest`` alone, timed once.
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

import duckdb
import numpy as np
from tsql.sample_db import ensure

from benchmarks.harness import side_by_side
from tsql.kernels.clusters import dtw_clusters
from tsql.kernels.dtw import dtw_distance
from tsql.kernels.nearest import dtw_nearest, prepare
from tsql.kernels.ragged import Ragged


def sample_sales(folder: Path) -> tuple[np.ndarray, np.ndarray]:
    con = duckdb.connect(str(ensure(folder / "sample.duckdb")), read_only=True)
    rows = con.execute(
        "SELECT item, list(units ORDER BY month), list(datediff('month', DATE '2019-01-01', month)) "
        "FROM monthly_sales GROUP BY item ORDER BY item"
    ).fetchall()
    matrix = np.full((len(rows), 72), np.nan)
    for r, (_, units, months) in enumerate(rows):
        matrix[r, months] = units
    return np.array([row[0] for row in rows]), matrix


def batch(matrix: np.ndarray) -> Ragged:
    return Ragged(matrix.ravel().copy(), np.arange(len(matrix) + 1, dtype=np.int64) * matrix.shape[1])


def brute_force(matrix: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    count = len(matrix)
    filled = batch(prepare(batch(matrix))[0].values.reshape(matrix.shape))
    first, second = np.triu_indices(count, 1)
    found = dtw_distance(filled.take(first), filled.take(second))
    table = np.full((count, count), np.inf)
    table[first, second] = found
    table[second, first] = found
    order = np.argsort(table, axis=1, kind="stable")[:, :k]  # ids are in row order: ties go to the smaller
    return order, np.take_along_axis(table, order, 1)


SELF_JOIN = """
SELECT item, other, distance, rank FROM (
    SELECT a.item, b.item AS other, dtw_distance(a.curve, b.curve) AS distance,
           row_number() OVER (PARTITION BY a.item ORDER BY dtw_distance(a.curve, b.curve), b.item) AS rank
    FROM curves a JOIN curves b ON a.item <> b.item
) WHERE rank <= 5 ORDER BY item, rank
"""


AGGREGATE = """
SELECT r.id AS item, r.neighbor AS other, r.distance, r.rank
FROM (SELECT unnest(dtw_nearest(item, curve, k := 5)) AS r FROM curves) ORDER BY item, r.rank
"""


def in_sql(ids: np.ndarray, matrix: np.ndarray, repeat: int) -> None:
    import pyarrow as pa

    import tsql

    con = tsql.connect()
    filled = prepare(batch(matrix))[0].values.reshape(matrix.shape)
    con.register("filled", pa.table({"item": ids, "curve": list(filled)}))
    con.execute("CREATE TABLE curves AS SELECT item, curve::DOUBLE[] AS curve FROM filled")

    def self_join():
        return con.execute(SELF_JOIN).fetchall()

    def aggregate():
        return con.execute(AGGREGATE).fetchall()

    same = self_join() == aggregate()
    medians = side_by_side({"self-join in SQL": self_join, "dtw_nearest in SQL": aggregate}, repeat)
    print(f"the same {len(ids)} items in DuckDB, k = 5: rows equal: {same}")
    for name, seconds in medians.items():
        print(f"  {name:<20} {seconds:8.3f} s")
    print(f"  self-join / dtw_nearest = {medians['self-join in SQL'] / medians['dtw_nearest in SQL']:.1f}x")


def pruning(matrix: np.ndarray, band: int | None, normalize: bool, ends: int = 6) -> tuple[float, ...]:
    """Shares of the ordered pairs whose lower bound is not above the item's final k-th distance (k = 5): those
    the programme must start on. LB_Kim (first + last, largest, smallest), then LB_Keogh both ways, and for
    comparison a bound over the first and last ``ends`` steps of the path (each step's cheapest cell on the
    layer ``max(i, j) = l`` from either corner, as in LB_Enhanced, Tan et al. 2019)."""
    count = len(matrix)
    x = prepare(batch(matrix), normalize)[0].values.reshape(matrix.shape)
    found = dtw_nearest(np.arange(count), batch(matrix), k=5, band=band, normalize=normalize)
    kth = found["distance"].reshape(count, 5)[:, -1:] ** 2
    first, last = x[:, 0], x[:, -1]
    kim = np.maximum.reduce(
        [
            (first[:, None] - first[None, :]) ** 2 + (last[:, None] - last[None, :]) ** 2,
            (x.max(1)[:, None] - x.max(1)[None, :]) ** 2,
            (x.min(1)[:, None] - x.min(1)[None, :]) ** 2,
        ]
    )
    if band is None:
        upper, lower = (
            np.repeat(x.max(1, keepdims=True), x.shape[1], 1),
            np.repeat(x.min(1, keepdims=True), x.shape[1], 1),
        )
    else:
        windows = np.lib.stride_tricks.sliding_window_view(
            np.pad(x, ((0, 0), (band, band)), mode="edge"), 2 * band + 1, 1
        )
        upper, lower = windows.max(-1), windows.min(-1)
    keogh = np.stack([(np.maximum(row - upper, 0) ** 2 + np.maximum(lower - row, 0) ** 2).sum(1) for row in x])
    layers = np.zeros((count, count))
    for a in (x, x[:, ::-1]):
        for step in range(ends):
            cells = [(a[:, None, step] - a[None, :, c]) ** 2 for c in range(step + 1)]
            cells += [(a[:, None, c] - a[None, :, step]) ** 2 for c in range(step)]
            layers += np.minimum.reduce(cells)
    others = ~np.eye(count, dtype=bool)
    both = np.maximum(kim, np.maximum(keogh, keogh.T))
    return tuple(float(((b <= kth) & others).sum() / others.sum()) for b in (kim, both, layers))


def weekly(count: int, seed: int = 7) -> np.ndarray:
    rng = np.random.default_rng(seed)
    weeks = np.arange(52)
    shapes = np.exp(0.4 * np.sin(2 * np.pi * (weeks[None, :] / 52 + rng.random((40, 1)))))
    volume = np.exp(rng.normal(3.0, 1.2, count))
    return rng.poisson(volume[:, None] * shapes[rng.integers(0, 40, count)]).astype(np.float64)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--items", type=int, default=1000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--big", type=int, default=20000)
    parser.add_argument("--pruning", action="store_true", help="only the shares of pairs left after the bounds")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        ids, sales = sample_sales(Path(folder))
    if args.pruning:
        print(f"the first {args.items} items, k = 5: pairs left after LB_Kim, after LB_Keogh both ways; the end bound")
        for normalize in (False, True):
            for band in (2, None):
                shares = ", ".join(f"{x:.1%}" for x in pruning(sales[: args.items], band, normalize))
                print(f"  normalize={normalize!s:<5} band={band!s:<4}: {shares}")
        return
    part = sales[: args.items]
    dtw_nearest(ids[:50], batch(part[:50]))  # compile or load the cache outside the timings
    print(f"machine load (1 min): {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    got = dtw_nearest(ids[: args.items], batch(part))
    order, distances = brute_force(part, 5)
    same = np.array_equal(got["neighbor"].reshape(-1, 5), order) and np.array_equal(
        got["distance"].reshape(-1, 5), distances
    )
    medians = side_by_side(
        {
            "dtw_nearest": lambda: dtw_nearest(ids[: args.items], batch(part)),
            "brute force": lambda: brute_force(part, 5),
        },
        args.repeat,
    )
    print(f"sample warehouse, {args.items} items x 72 months, k = 5: answers equal: {same}")
    for name, seconds in medians.items():
        print(f"  {name:<14} {seconds:8.3f} s")
    print(f"  brute force / dtw_nearest = {medians['brute force'] / medians['dtw_nearest']:.1f}x")
    in_sql(ids[: args.items], part, args.repeat)
    start = time.perf_counter()
    dtw_nearest(ids, batch(sales))
    print(f"sample warehouse, all {len(ids)} items, k = 5: {time.perf_counter() - start:.2f} s")
    for band in (2, None):  # shapes only: z-normalised series, with and without a band
        start = time.perf_counter()
        dtw_nearest(ids, batch(sales), band=band)
        plain = time.perf_counter() - start
        start = time.perf_counter()
        dtw_nearest(ids, batch(sales), band=band, normalize=True)
        shapes = time.perf_counter() - start
        print(f"  band {band}: not normalised {plain:.2f} s, normalize=True {shapes:.2f} s ({shapes / plain:.1f}x)")
    start = time.perf_counter()
    groups = dtw_clusters(ids, batch(sales))
    print(
        f"dtw_clusters, all {len(ids)} items: {time.perf_counter() - start:.2f} s, "
        f"k = {groups['cluster'].max()}, mean silhouette {np.nanmean(groups['silhouette']):.3f}"
    )
    if args.big:
        series = weekly(args.big)
        start = time.perf_counter()
        dtw_nearest(np.arange(args.big), batch(series))
        print(f"{args.big} synthetic weekly series x 52 points, k = 5: {time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main()
