"""The DTW kernel against dtaidistance's C implementation, side by side in one run.

    python -m benchmarks.dtw_kernel [--series 500] [--length 36] [--long 10000] [--band 100] [--repeat 7]

1. All pairs of ``--series`` random walks of ``--length`` points, handed to the kernel
   in batches of 2,048 pairs as an SQL self-join would, against
   ``dtaidistance.dtw.distance_matrix_fast`` on the same series. The batches are built
   before timing (the SQL layer builds them); the time to build them is printed apart.
2. Two random walks of ``--long`` points with a Sakoe–Chiba band of ``--band``, against
   ``dtaidistance.dtw.distance_fast(..., window=band + 1)``.

The runs alternate (kernel, reference, kernel, ...) and the script prints the median
of each and the ratio of the medians, plus the largest difference of the answers.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from dtaidistance import dtw as reference

from benchmarks.harness import side_by_side, timed
from tsql.kernels import dtw
from tsql.kernels.ragged import Ragged

BATCH = 2048


def report(title: str, medians: dict[str, float], baseline: str) -> None:
    print(title)
    for name, seconds in medians.items():
        print(f"  {name:<58} {seconds * 1e3:9.2f} ms   {seconds / medians[baseline]:5.2f}x reference")


def all_pairs(series: np.ndarray, repeat: int) -> None:
    count, length = series.shape
    first, second = np.triu_indices(count, 1)
    build_start = time.perf_counter()
    batches = []
    for start in range(0, len(first), BATCH):
        left, right = first[start : start + BATCH], second[start : start + BATCH]
        offsets = np.arange(len(left) + 1, dtype=np.int64) * length
        batches.append((Ragged(series[left].ravel(), offsets), Ragged(series[right].ravel(), offsets)))

    build = time.perf_counter() - build_start

    def kernel() -> np.ndarray:
        return np.concatenate([dtw.dtw_distance(a, b) for a, b in batches])

    def kernel_cutoff() -> np.ndarray:
        return np.concatenate([dtw.dtw_distance(a, b, cutoff=cutoff) for a, b in batches])

    got = kernel()
    expected = reference.distance_matrix_fast(series)[first, second]
    cutoff = float(np.quantile(expected, 0.05))
    print(
        f"all pairs: {count} series x {length} points = {len(first):,} pairs in {len(batches)} batches; "
        f"max |kernel - reference| = {np.max(np.abs(got - expected)):.3g}; building the batches: {build * 1e3:.1f} ms"
    )
    runs = {
        "reference: distance_matrix_fast (parallel, default)": lambda: reference.distance_matrix_fast(series),
        "reference: distance_matrix_fast(parallel=False)": lambda: reference.distance_matrix_fast(
            series, parallel=False
        ),
        "tsql: dtw_distance, batches of 2,048 pairs": kernel,
        "tsql: dtw_distance, cutoff at the 5% quantile (for scale)": kernel_cutoff,
        "tsql: lb_keogh band 3, batches of 2,048 pairs (for scale)": lambda: [
            dtw.lb_keogh(a, b, 3) for a, b in batches
        ],
    }
    report(
        f"  median of {repeat}",
        side_by_side(runs, repeat),
        "reference: distance_matrix_fast (parallel, default)",
    )


def long_pair(x: np.ndarray, y: np.ndarray, band: int, repeat: int) -> None:
    a, b = Ragged.from_list([x]), Ragged.from_list([y])
    got = dtw.dtw_distance(a, b, band=band)[0]
    expected = reference.distance_fast(x, y, window=band + 1)
    print(f"long pair: 2 x {len(x):,} points, band {band}; |kernel - reference| = {abs(got - expected):.3g}")
    runs = {
        f"reference: distance_fast(window={band + 1})": lambda: reference.distance_fast(x, y, window=band + 1),
        f"reference: distance_fast(window={band + 1}, use_pruning=False)": lambda: reference.distance_fast(
            x, y, window=band + 1, use_pruning=False
        ),
        f"tsql: dtw_distance(band={band})": lambda: dtw.dtw_distance(a, b, band=band),
        f"tsql: dtw_path(band={band}) (for scale)": lambda: dtw.dtw_path(a, b, band=band),
    }
    report(f"  median of {repeat}", side_by_side(runs, repeat), f"reference: distance_fast(window={band + 1})")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--series", type=int, default=500)
    parser.add_argument("--length", type=int, default=36)
    parser.add_argument("--long", type=int, default=10_000)
    parser.add_argument("--band", type=int, default=100)
    parser.add_argument("--repeat", type=int, default=7)
    args = parser.parse_args()
    rng = np.random.default_rng(20240601)

    tiny = Ragged.from_list([[0.0, 1.0, 2.0]])
    first_call = timed(lambda: (dtw.dtw_distance(tiny, tiny), dtw.dtw_path(tiny, tiny), dtw.lb_keogh(tiny, tiny, 1)))
    print(f"first calls (compile, or load from numba's cache): {first_call:.2f} s")

    all_pairs(np.cumsum(rng.standard_normal((args.series, args.length)), axis=1), args.repeat)
    x = np.cumsum(rng.standard_normal(args.long))
    y = np.cumsum(rng.standard_normal(args.long))
    long_pair(x, y, args.band, args.repeat)


if __name__ == "__main__":
    main()
