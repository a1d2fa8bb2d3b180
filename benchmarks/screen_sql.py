"""screen_agg through GROUP BY against the list-building floor and against its parts called one by one.

    python -m benchmarks.screen_sql [--groups 10000] [--points 1000] [--repeat 3] [--each]

The table is :func:`benchmarks.data.seasonal` (DATE times one day apart). Three queries take turns:
the floor (the GROUP BY that only builds each ordered list), ``screen_agg(v, t)``, and the same
diagnostics from each function's own ``*_agg`` form in one query. Ratios are taken within each
round and their medians printed. ``--each`` also times every part alone, once, to show where the
time goes, and the cores each query used (CPU time over wall time of a second run of it; 2.0 is both cores of
a two-core machine). Each query ends in ``count(result)``: results are computed in full, not converted.
"""

from __future__ import annotations

import argparse
import statistics
import time
from collections.abc import Callable

import tsql
from benchmarks import data
from benchmarks.harness import interleaved

FLOOR = "list_sum(list(v ORDER BY t))"
SCREEN = "screen_agg(v, t)"
PARTS = {
    "seasonality": "seasonality_agg(v, t).p_value",
    "trend_test": "trend_test_agg(v, t).p_value",
    "autocorrelation": "autocorrelation_agg(v, t)",
    "ljung_box": "ljung_box_agg(v, t).p_value",
    "adf_test": "adf_test_agg(v, t).p_value",
    "spectral_entropy": "spectral_entropy_agg(v, t)",
    "change_points": "len(change_points_agg(v, t))",
}
ONE_BY_ONE = " + ".join(PARTS.values())
"""The screen's diagnostics from their own functions, in one query: a sum, NULL when any is, so that
``count`` needs every one (DuckDB drops the aggregates of a ``struct_pack`` that ``count`` cannot see)."""


def query(expr: str, table: str = "series") -> str:
    return f"SELECT count(r) FROM (SELECT g, {expr} AS r FROM {table} GROUP BY g)"


def cpu_and_wall(run: Callable[[], object]) -> tuple[float, float]:
    """CPU seconds (all of this process's threads) and wall seconds of the second of two runs."""
    run()
    cpu, wall = time.process_time(), time.perf_counter()
    run()
    return time.process_time() - cpu, time.perf_counter() - wall


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--groups", type=int, default=10_000)
    parser.add_argument("--points", type=int, default=1_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--each", action="store_true")
    args = parser.parse_args()
    con = tsql.connect()
    data.store(con, "series", data.rows_table(data.seasonal(args.groups, args.points)))
    con.execute(query(SCREEN, "(FROM series WHERE g < 20)")).fetchall()  # load the compiled kernels
    runs = {
        "floor": lambda: con.execute(query(FLOOR)).fetchall(),
        "screen_agg": lambda: con.execute(query(SCREEN)).fetchall(),
        "one by one": lambda: con.execute(query(ONE_BY_ONE)).fetchall(),
    }
    times = interleaved(runs, args.repeat)
    print(f"{args.groups:,} groups x {args.points:,} points; {args.repeat} rounds, medians")
    for name, seconds in times.items():
        print(f"  {name:<12} {statistics.median(seconds):8.2f} s")

    def ratio(a: str, b: str) -> float:
        return statistics.median(x / y for x, y in zip(times[a], times[b], strict=True))

    print(f"  screen_agg / floor       {ratio('screen_agg', 'floor'):6.2f}x")
    print(f"  one by one / floor       {ratio('one by one', 'floor'):6.2f}x")
    print(f"  screen_agg / one by one  {ratio('screen_agg', 'one by one'):6.2f}x")
    if args.each:
        floor = statistics.median(times["floor"])
        print("  each query alone, its second run: wall, over the floor's median, cores used (CPU / wall)")
        for name, call in {"floor": FLOOR, "screen_agg": SCREEN, **PARTS}.items():
            cpu, wall = cpu_and_wall(lambda call=call: con.execute(query(call)).fetchall())
            print(f"  {name:<16} {wall:8.2f} s  {wall / floor:6.2f}x floor  {cpu / wall:5.2f} cores")


if __name__ == "__main__":
    main()
