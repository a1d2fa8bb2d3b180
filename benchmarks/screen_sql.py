"""screen_agg through GROUP BY against the list-building floor and against its parts called one by one.

    python -m benchmarks.screen_sql [--groups 10000] [--points 1000] [--repeat 3] [--each]

The table is :func:`benchmarks.data.seasonal` (DATE times one day apart). Three queries take turns:
the floor (the GROUP BY that only builds each ordered list), ``screen_agg(v, t)``, and the same
diagnostics from each function's own ``*_agg`` form in one query. Ratios are taken within each
round and their medians printed. ``--each`` also times every part alone, once, to show where the
time goes, and the cores each query used (CPU time over wall time of a second run of it; 2.0 is both cores of
a two-core machine) and wanted (its threads running or ready to run, at most two at a time: the cores it would use
on an idle machine, see :func:`wanted_cores`). Each query ends in ``count(result)``: results are computed in
full, not converted.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

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


_SAMPLER = """
import json, os, select, sys, time
tasks = f"/proc/{sys.argv[1]}/task"
samples = []
def sample():
    seen = {}
    for tid in os.listdir(tasks):
        try:
            with open(f"{tasks}/{tid}/schedstat") as f:
                on_core, waiting, _ = f.read().split()
        except (OSError, ValueError):  # a thread that ended
            continue
        seen[tid] = int(on_core) + int(waiting)
    samples.append((time.perf_counter(), seen))
sample()
print("ready", flush=True)
while not select.select([sys.stdin], [], [], float(sys.argv[2]))[0]:  # until a line after the run
    sample()
sample()
print(json.dumps(samples))
"""


def wanted_cores(run: Callable[[], object], cap: int = 2, every: float = 0.01) -> float:
    """How many cores ``run`` could use, up to ``cap``, whatever else the machine runs (Linux; NaN elsewhere).

    Another process reads each thread's time on a core and waiting for one (``/proc/<pid>/task/*/schedstat``)
    every ``every`` seconds: its growth over an interval, summed over the threads, counts those that were
    running or ready to run (not waiting for the GIL, a lock or work); at most ``cap`` of them count. The
    average over the run is the cores used on an otherwise idle machine of ``cap`` cores. (A thread holding
    the GIL that the machine sets aside for another process's still makes the others wait: under load the
    figure is somewhat low.)
    """
    if not Path(f"/proc/{os.getpid()}/task").exists():
        return float("nan")
    sampler = subprocess.Popen(
        [sys.executable, "-c", _SAMPLER, str(os.getpid()), str(every)],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        text=True,
    )
    sampler.stdout.readline()  # "ready"
    run()
    out, _ = sampler.communicate("done\n")
    samples = json.loads(out)
    used = 0.0
    for (t0, before), (t1, after) in zip(samples, samples[1:]):
        busy = sum(ns - before.get(tid, 0) for tid, ns in after.items())  # a new thread: all its time is new
        used += min(cap * (t1 - t0), busy / 1e9)
    return used / (samples[-1][0] - samples[0][0])


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
        print(
            "  each query alone, its second run: wall, over the floor's median, cores used (CPU / wall), and a third"
            " run's cores wanted (of 2; see wanted_cores)"
        )
        for name, call in {"floor": FLOOR, "screen_agg": SCREEN, **PARTS}.items():
            cpu, wall = cpu_and_wall(lambda call=call: con.execute(query(call)).fetchall())
            wanted = wanted_cores(lambda call=call: con.execute(query(call)).fetchall())
            used = f"{cpu / wall:5.2f} cores  {wanted:4.2f} wanted"
            print(f"  {name:<16} {wall:8.2f} s  {wall / floor:6.2f}x floor  {used}")


if __name__ == "__main__":
    main()
