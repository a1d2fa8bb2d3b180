"""Periods, smoothing and the time grid through GROUP BY, against the list-building floor, in one run.

    python -m benchmarks.time_grid_sql [--groups 4000] [--points 500] [--repeat 5]

Each group is a monthly series (DATE times) with a seeded 3-, 6- or 12-month cycle and
noise. The list forms run on complete series; the *_agg forms on the same series with
about 2 % of the months deleted, which their grid puts back. The floor is the GROUP BY
that only builds each ordered list; every ratio is what tsql adds. Each query ends in
``count(result)``, so results are computed in full but not converted to Python objects.
"""

from __future__ import annotations

import argparse

import numpy as np
import pyarrow as pa

import tsql
from benchmarks.harness import side_by_side


def monthly_series(groups: int, points: int, deleted: float = 0.02) -> pa.Table:
    rng = np.random.default_rng(11)
    k = np.arange(points)
    period = rng.choice([3.0, 6.0, 12.0], groups)[:, None]
    values = 100 + 20 * np.sin(2 * np.pi * k / period) + rng.normal(0, 5, (groups, points))
    months = (np.datetime64("1980-01", "M") + k).astype("datetime64[D]")
    keep = rng.random((groups, points)) >= deleted
    keep[:, [0, -1]] = True
    g = np.repeat(np.arange(groups), points).reshape(groups, points)
    return pa.table(
        {
            "g": g[keep],
            "month": pa.array(np.tile(months, (groups, 1))[keep]).cast(pa.date32()),
            "v": values[keep],
        }
    )


FLOOR = "list_sum(list(v ORDER BY month))"
LIST_FORMS = (
    "dominant_period(list(v ORDER BY month))",
    "seasonality(list(v ORDER BY month))",
    "harmonic_smooth(list(v ORDER BY month))",
    "acf(list(v ORDER BY month))",
    "on_grid(list(v), list(month))",
)
AGG_FORMS = (
    "dominant_period_agg(v, month)",
    "seasonality_agg(v, month)",
    "harmonic_smooth_agg(v, month)",
    "harmonic_profile_agg(v, month, INTERVAL 1 YEAR)",
    "acf_agg(v, month)",
    "on_grid(list(v), list(month))",
)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--groups", type=int, default=4000)
    parser.add_argument("--points", type=int, default=500)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    con = tsql.connect()
    for name, deleted in (("complete", 0.0), ("gapped", 0.02)):
        con.register("arrow_series", monthly_series(args.groups, args.points, deleted))
        con.execute(f"CREATE TABLE {name} AS SELECT * FROM arrow_series")
        con.unregister("arrow_series")

    def query(call: str, table: str) -> str:
        return f"SELECT count(r) FROM (SELECT g, {call} AS r FROM {table} GROUP BY g)"

    for table, calls in (("complete", LIST_FORMS), ("gapped", AGG_FORMS)):
        floor = f"floor: {FLOOR}"
        queries = {floor: query(FLOOR, table)} | {call: query(call, table) for call in calls}
        runs = {name: (lambda sql=sql: con.execute(sql).fetchall()) for name, sql in queries.items()}
        for run in runs.values():
            run()  # warm up
        medians = side_by_side(runs, args.repeat)
        (rows,) = con.execute(f"SELECT count(*) FROM {table}").fetchall()[0]
        print(f"{table}: {args.groups} groups x {args.points} months, {rows:,} rows; median of {args.repeat}")
        for name, seconds in medians.items():
            print(f"  {name:<50} {seconds:7.3f} s  {seconds / medians[floor]:5.2f}x floor")


if __name__ == "__main__":
    main()
