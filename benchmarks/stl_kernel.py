"""The STL kernel against a loop of statsmodels' STL over the same series exported to pandas.

    python -m benchmarks.stl_kernel [--series 1000] [--points 144] [--period 12] [--repeat 5]

``--series`` monthly-like series (trend, yearly cycle, noise) of ``--points`` points: tsql's
``stl_decompose`` on the whole batch (as the SQL layer hands it over) against
``STL(pandas.Series, period).fit()`` called once per series, non-robust and robust, the same
answers checked (largest absolute difference). Medians of interleaved runs; per-series times and
their ratio, all from this one run.
"""

from __future__ import annotations

import argparse

import numpy as np

from benchmarks.harness import side_by_side
from tsql.kernels.ragged import Ragged
from tsql.kernels.stl import stl_decompose


def series(n_series: int, points: int, period: int) -> np.ndarray:
    rng = np.random.default_rng(12)
    t = np.arange(points)
    level = rng.uniform(50, 500, (n_series, 1))
    slope = rng.normal(0, 0.5, (n_series, 1))
    phase = rng.uniform(0, 2 * np.pi, (n_series, 1))
    cycle = rng.uniform(0, 40, (n_series, 1)) * np.sin(2 * np.pi * t / period + phase)
    return level + slope * t + cycle + rng.normal(0, 5, (n_series, points))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--series", type=int, default=1000)
    parser.add_argument("--points", type=int, default=144)
    parser.add_argument("--period", type=int, default=12)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    import pandas as pd
    from statsmodels.tsa.seasonal import STL

    rows = series(args.series, args.points, args.period)
    batch = Ragged(rows.ravel().copy(), np.arange(0, rows.size + 1, args.points, dtype=np.int64))
    index = pd.date_range("2000-01-01", periods=args.points, freq="MS")
    frames = [pd.Series(row, index=index) for row in rows]
    stl_decompose(Ragged.from_list([rows[0]]), args.period)  # compile or load the numba cache
    print(f"{args.series} series x {args.points} points, period {args.period}")
    for robust in (False, True):

        def ours(robust=robust):
            return stl_decompose(batch, args.period, robust=robust)

        def theirs(robust=robust):
            return [STL(s, period=args.period, robust=robust).fit() for s in frames]

        mine, ref = ours(), theirs()
        gap = max(
            float(np.abs(mine[name].row(i) - getattr(r, name).to_numpy()).max())
            for i, r in enumerate(ref)
            for name in ("trend", "seasonal")
        )
        times = side_by_side({"tsql": ours, "statsmodels": theirs}, args.repeat)
        per_ours = times["tsql"] / args.series
        per_theirs = times["statsmodels"] / args.series
        print(f"  robust={robust}: largest |difference| {gap:.1e}")
        print(f"    tsql        {per_ours * 1e6:9.1f} us per series   (median of {args.repeat})")
        print(f"    statsmodels {per_theirs * 1e6:9.1f} us per series")
        print(f"    statsmodels / tsql = {per_theirs / per_ours:.1f}x")


if __name__ == "__main__":
    main()
