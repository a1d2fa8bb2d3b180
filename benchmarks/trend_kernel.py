"""trend_test's kernel per row, on several kinds of series, beside another version of it.

    python -m benchmarks.trend_kernel [--rows 2000] [--points 1000] [--repeat 5] [--beside FILE]

``--rows`` series of ``--points`` each, one batch per kind: ``benchmarks.data.seasonal``, random
walks, white noise, the seasonal series rounded to whole numbers (many ties), Poisson counts
(mean 3) and the seasonal series with a fifth of the values missing. ``--beside`` names a copy of
``tsql/kernels/trend.py`` from another commit (kept outside the repository), loaded as a module of
its own and timed in turns with this one; its answers are compared bit for bit. Microseconds per
row are medians of interleaved runs, from this one run.
"""

from __future__ import annotations

import argparse

import numpy as np

from benchmarks import data
from benchmarks.harness import load_module, side_by_side
from tsql.kernels import trend
from tsql.kernels.ragged import Ragged


def kinds(rows: int, points: int) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(5)
    gaps = data.seasonal(rows, points, seed=12)
    gaps[rng.random(gaps.shape) < 0.2] = np.nan
    return {
        "seasonal": data.seasonal(rows, points),
        "walks": data.walks(rows, points),
        "noise": rng.standard_normal((rows, points)),
        "rounded": np.round(data.seasonal(rows, points, seed=13)),
        "counts": rng.poisson(3.0, (rows, points)).astype(np.float64),
        "gaps": gaps,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--rows", type=int, default=2000)
    parser.add_argument("--points", type=int, default=1000)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--beside", help="a copy of tsql/kernels/trend.py from another commit")
    args = parser.parse_args()
    versions = {"this": trend.trend_test}
    if args.beside:
        versions["beside"] = load_module(args.beside).trend_test
    print(f"trend_test: {args.rows} rows x {args.points} points, us per row (medians of {args.repeat})")
    for name, values in kinds(args.rows, args.points).items():
        batch = Ragged(values.ravel().copy(), np.arange(0, values.size + 1, args.points, dtype=np.int64))
        answers = {key: fn(batch) for key, fn in versions.items()}  # compiles or loads the cache
        times = side_by_side({key: (lambda fn=fn, batch=batch: fn(batch)) for key, fn in versions.items()}, args.repeat)
        line = f"    {name:9s}" + "".join(
            f"{key} {seconds / args.rows * 1e6:7.1f}   " for key, seconds in times.items()
        )
        if args.beside:
            same = all(
                np.array_equal(answers["this"][field].view(np.int64), answers["beside"][field].view(np.int64))
                for field in ("tau", "p_value", "slope")
            )
            line += f"beside / this {times['beside'] / times['this']:.2f}x, answers {'same' if same else 'DIFFER'}"
        print(line)


if __name__ == "__main__":
    main()
