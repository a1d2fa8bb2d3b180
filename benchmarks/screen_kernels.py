"""The unit-root and several-cycle kernels against loops of their statsmodels counterparts.

    python -m benchmarks.screen_kernels [--series 500] [--points 500] [--repeat 3]

``--series`` random walks and AR(1) series with a 12-step cycle, ``--points`` each, handed over as
one batch: tsql's ``adf_test`` and ``kpss_test`` against ``adfuller`` / ``kpss`` called once per
series (same settings, answers checked), and ``periods(k=3)`` beside ``seasonality`` (the one-cycle
search it repeats). Per-series medians of interleaved runs and their ratios, from this one run.
"""

from __future__ import annotations

import argparse
import warnings

import numpy as np

from benchmarks.harness import side_by_side
from tsql.kernels.cycles import periods
from tsql.kernels.periodicity import seasonality
from tsql.kernels.ragged import Ragged
from tsql.kernels.unitroot import adf_test, kpss_test


def series(n_series: int, points: int) -> np.ndarray:
    rng = np.random.default_rng(21)
    walks = np.cumsum(rng.standard_normal((n_series // 2, points)), axis=1)
    noise = rng.standard_normal((n_series - n_series // 2, points))
    ar = np.zeros_like(noise)
    for t in range(1, points):
        ar[:, t] = 0.6 * ar[:, t - 1] + noise[:, t]
    ar += 2 * np.sin(2 * np.pi * np.arange(points) / 12)
    return np.vstack([walks, ar])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--series", type=int, default=500)
    parser.add_argument("--points", type=int, default=500)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    from statsmodels.tsa.stattools import adfuller, kpss

    warnings.simplefilter("ignore")
    rows = series(args.series, args.points)
    batch = Ragged(rows.ravel().copy(), np.arange(0, rows.size + 1, args.points, dtype=np.int64))
    adf_test(Ragged.from_list([rows[0]]))  # compile or load the numba cache
    print(f"{args.series} series x {args.points} points")

    ours = adf_test(batch)
    theirs = [adfuller(x, result_object=False) for x in rows]
    gap = np.abs(ours["statistic"] - [t[0] for t in theirs]).max()
    same_lag = bool((ours["used_lag"] == [t[2] for t in theirs]).all())
    times = side_by_side(
        {"tsql": lambda: adf_test(batch), "statsmodels": lambda: [adfuller(x, result_object=False) for x in rows]},
        args.repeat,
    )
    report(
        "adf_test vs adfuller", times, args.series, f"largest |statistic difference| {gap:.1e}, same lags {same_lag}"
    )

    ours = kpss_test(batch)
    gap = np.abs(ours["statistic"] - [kpss(x, nlags="auto", result_object=False)[0] for x in rows]).max()
    times = side_by_side(
        {"tsql": lambda: kpss_test(batch), "statsmodels": lambda: [kpss(x, nlags="auto") for x in rows]},
        args.repeat,
    )
    report("kpss_test vs kpss", times, args.series, f"largest |statistic difference| {gap:.1e}")

    times = side_by_side(
        {"periods": lambda: periods(batch, k=3), "seasonality": lambda: seasonality(batch)}, args.repeat
    )
    per = {name: seconds / args.series for name, seconds in times.items()}
    print("periods(k=3) beside seasonality")
    for name, seconds in per.items():
        print(f"    {name:12s}{seconds * 1e6:9.1f} us per series")
    print(f"    periods / seasonality = {per['periods'] / per['seasonality']:.1f}x")


def report(title: str, times: dict, n_series: int, note: str) -> None:
    ours, theirs = times["tsql"] / n_series, times["statsmodels"] / n_series
    print(f"{title}: {note}")
    print(f"    tsql        {ours * 1e6:9.1f} us per series")
    print(f"    statsmodels {theirs * 1e6:9.1f} us per series")
    print(f"    statsmodels / tsql = {theirs / ours:.1f}x")


if __name__ == "__main__":
    main()
