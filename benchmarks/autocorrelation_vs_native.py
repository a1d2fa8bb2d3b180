"""autocorrelation_agg against DuckDB's own lag()+corr() and the list-building floor.

    python -m benchmarks.autocorrelation_vs_native [--groups 10000] [--points 1000] [--repeat 5]

Prints the median of each query and the ratios, measured in one run.
"""

from __future__ import annotations

import argparse

import tsql
from benchmarks.harness import median_seconds

QUERIES = {
    "floor: list_sum(list(v ORDER BY t))": "SELECT g, list_sum(list(v ORDER BY t)) FROM series GROUP BY g",
    "native: corr(v, lag(v))": """
        SELECT g, corr(v, v_prev) FROM (
            SELECT g, v, lag(v) OVER (PARTITION BY g ORDER BY t) AS v_prev FROM series
        ) GROUP BY g""",
    "tsql: autocorrelation_agg(v, t)": "SELECT g, autocorrelation_agg(v, t) FROM series GROUP BY g",
}


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--groups", type=int, default=10_000)
    parser.add_argument("--points", type=int, default=1_000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    con = tsql.connect()
    con.execute(
        f"""CREATE TABLE series AS
            SELECT (i % {args.groups})::INTEGER AS g,
                   (i // {args.groups})::INTEGER AS t,
                   sin(i * 0.001) + ((i * 7919) % 1000) / 1000.0 AS v
            FROM range({args.groups * args.points}) r(i)"""
    )
    results = {}
    for name, sql in QUERIES.items():
        con.execute(sql).fetchall()  # warm up
        results[name] = median_seconds(lambda sql=sql: con.execute(sql).fetchall(), args.repeat)
    floor = results["floor: list_sum(list(v ORDER BY t))"]
    native = results["native: corr(v, lag(v))"]
    print(f"{args.groups} groups x {args.points} points, median of {args.repeat}")
    for name, seconds in results.items():
        print(f"  {name:<36} {seconds:7.3f} s   {seconds / floor:5.2f}x floor   {seconds / native:5.2f}x native")


if __name__ == "__main__":
    main()
