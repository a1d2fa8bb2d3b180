"""change_points through GROUP BY against the list-building floor, side by side in one run.

    python -m benchmarks.change_points_sql [--groups 4000] [--points 500] [--repeat 5]

Each group is a noisy series with 0-4 level shifts (seeded). The floor is the
same GROUP BY that only builds each ordered list; the ratio is what PELT adds.
"""

from __future__ import annotations

import argparse

import numpy as np
import pyarrow as pa

import tsql
from benchmarks.data import shifted
from benchmarks.harness import side_by_side


def shifted_series(groups: int, points: int) -> pa.Table:
    values = shifted(groups, points)
    return pa.table(
        {"g": np.repeat(np.arange(groups), points), "t": np.tile(np.arange(points), groups), "v": values.ravel()}
    )


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--groups", type=int, default=4000)
    parser.add_argument("--points", type=int, default=500)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    con = tsql.connect()
    con.register("arrow_series", shifted_series(args.groups, args.points))
    con.execute("CREATE TABLE series AS SELECT * FROM arrow_series")
    floor = "floor: list_sum(list(v ORDER BY t))"
    queries = {floor: "SELECT g, list_sum(list(v ORDER BY t)) FROM series GROUP BY g"}
    for call in (
        "change_points(list(v ORDER BY t))",
        "change_points_agg(v, t)",
        "change_points_agg(v, t, model := 'trend')",
        "change_points_agg(v, t, model := 'meanvar')",
    ):
        queries[call] = f"SELECT g, {call} FROM series GROUP BY g"
    runs = {name: (lambda sql=sql: con.execute(sql).fetchall()) for name, sql in queries.items()}
    for run in runs.values():
        run()  # warm up (loads the compiled kernel)
    medians = side_by_side(runs, args.repeat)
    floor_seconds = medians[floor]
    print(f"{args.groups} groups x {args.points} points, median of {args.repeat}")
    for name, seconds in medians.items():
        print(f"  {name:<44} {seconds:7.3f} s  {seconds / floor_seconds:5.2f}x floor")


if __name__ == "__main__":
    main()
