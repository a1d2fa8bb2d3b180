"""All-pairs DTW through SQL against dtaidistance's compiled C, side by side in one run.

    python -m benchmarks.dtw_sql [--series 500] [--length 36] [--repeat 5]

The SQL query is the self-join an analyst writes (each unordered pair once);
the reference is ``dtaidistance.dtw.distance_matrix_fast`` on the same series
(its upper triangle: the same pairs). Both use no band. Prints the medians
and their ratio, and the largest difference between the two answers.
"""

from __future__ import annotations

import argparse

import numpy as np
import pyarrow as pa
from dtaidistance import dtw as reference

import tsql
from benchmarks.harness import side_by_side

QUERY = """
    SELECT a.item, b.item, dtw_distance(a.curve, b.curve) AS distance
    FROM series a JOIN series b ON a.item < b.item
"""


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--series", type=int, default=500)
    parser.add_argument("--length", type=int, default=36)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    rng = np.random.default_rng(3)
    walks = np.cumsum(rng.standard_normal((args.series, args.length)), axis=1)
    con = tsql.connect()
    con.register("walks", pa.table({"item": np.arange(args.series), "curve": list(walks)}))
    con.execute("CREATE TABLE series AS SELECT item, curve::DOUBLE[] AS curve FROM walks")
    result: dict = {}

    def run_sql() -> None:
        result["sql"] = con.execute(QUERY).fetchall()

    def run_reference() -> None:
        result["ref"] = reference.distance_matrix_fast(walks, compact=False)

    run_sql(), run_reference()  # warm up (and compile the kernel once)
    medians = side_by_side({"tsql SQL self-join": run_sql, "dtaidistance C matrix": run_reference}, args.repeat)
    matrix = result["ref"]
    worst = max(abs(d - matrix[i, j]) for i, j, d in result["sql"])
    pairs = len(result["sql"])
    print(f"{pairs} pairs of length {args.length}, median of {args.repeat}")
    for name, seconds in medians.items():
        print(f"  {name:<24} {seconds * 1000:8.1f} ms")
    ratio = medians["tsql SQL self-join"] / medians["dtaidistance C matrix"]
    print(f"  ratio SQL / C: {ratio:.2f}x (bar: <= 3x); largest difference {worst:.2e}")


if __name__ == "__main__":
    main()
