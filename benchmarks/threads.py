"""What a second core gives: every function's time over the floor at DuckDB ``threads = 1`` and ``threads = 2``.

    python -m benchmarks.threads [--groups 8192] [--points 500] [--repeat 3] [--functions a,b] [--few] [--write]

For each case of :func:`benchmarks.cases.cases` on the tables ``series``, ``shifts`` and ``walks`` (their
sizes from ``--groups``/``--points``), four queries take turns: the floor and ours, each at 1 and at
2 threads. The gain is (ours - floor at 1 thread) / (ours - floor at 2 threads), medians: what the
function adds over building the lists, which is the part the kernels' ``nogil`` calls can spread.
``--few`` also times ``seasonality_agg`` and ``change_points`` on 512 to 8,192 groups: DuckDB hands a
UDF up to 2,048 groups per call, so a query needs a few calls' worth of groups before a second
thread has one to take. ``--write`` puts the tables in benchmarks/RESULTS.md (section "Threads").
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

import duckdb

import tsql
from benchmarks import cases as bench
from benchmarks import data
from benchmarks.first_run import write_section
from benchmarks.harness import interleaved, markdown_table, seconds_text

FEW_CALLS = ("seasonality_agg(v, t)", "change_points(list(v ORDER BY t))")

NOTES = """Where a second thread helps and where it cannot:

- **Groups.** DuckDB hands a function up to 2,048 groups per call and runs each call on one of its threads; our
  compiled kernels release the GIL, so two calls run at once. A query needs more than 2,048 groups before a
  second thread has a call to take (4,096 give each thread one; 8,192 keep both busy). With fewer groups
  than that, or fewer calls than threads, the calls run one after another (`change_points` at 512 and 2,048
  groups gained about 1.0× before it cut its calls; see the table above for now). `change_points` and
  `segments`, whose compiled searches dominate, now cut a call into one
  piece per thread themselves: the list forms from 512 groups, the `*_agg` forms from 524,288 observations
  (pieces of 262,144; about 1,050 groups of 500 points).
- **Pairs (DuckDB's limit, worked around).** A self-join of a small table reaches the pair functions from one
  DuckDB thread whatever `threads` says: recording the thread of each call at `threads = 2`, all 22 calls of
  `dtw_distance` over the 44,850 pairs of 300 curves came from one thread (the join's source is the 300-row
  table). So the pair macros pass `current_setting('threads')` and the UDF cuts a call of at least 512 pairs into
  one piece per thread (`forms.list_form`, on `kernels.parallel.run_pieces`; rows are independent, answers
  the same bit for bit). What stays on one thread is DuckDB's copy of the inputs (next point) and the numpy
  around the kernels; `lb_keogh`'s kernel is a small part of its time, so it gains least.
- **DuckDB copies each call's input into Arrow holding the GIL** (its Python package's Arrow UDF wrapper
  acquires the GIL before converting the vector and lets go only to read the answer back). That copy is
  serial across threads: 16 bytes an observation for the `*_agg` forms (tick and value), 8 for the list
  forms. For the light kernels it is a large share of the time over the floor: `harmonic_smooth_agg` with
  its UDF replaced by one returning a stored answer of the same shape kept about half of it (0.39 of 0.75 s at
  one thread, 8,192 groups, measured under load). This is DuckDB's, not ours.
- **`seasonality_agg`, `dominant_period_agg`** (fixed in part): their kernels are many small numpy steps over
  all rows, each holding the GIL between calls; in pieces of 131 groups the steps were tiny, so two threads
  mostly waited for each other (0.84× at 8,192 groups). The agg path also built one Python interval per group
  for the period (a fifth of `seasonality_agg`'s profile) and every UDF one Python tuple per row for its
  constant settings. Now: intervals from buffers, constant settings found by one Arrow comparison, and
  pieces of 524 groups (one thread, 4,096 groups: CPU time over the floor 0.25 s to 0.15 s for
  `seasonality_agg`, 0.17 s to 0.12 s for `dominant_period_agg`, medians of 2 × 5 runs).
  The numpy steps that remain hold the GIL between calls; compiling them is the next step.
- **`kpss_test`** (fixed): its long-run variance made two 2,048 × 500 temporaries per lag, bound by memory
  bandwidth, which two threads share; now one compiled `nogil` pass per row, in cache (CPU time over the floor,
  one thread, 4,096 groups: 0.27 s to 0.05 s).
- **`periods`** (not met): a piece's fits hold up to 2 + 6k vectors per row, and its refinement
  (`cycles._extend`) re-orthogonalises them in numpy steps that hold the GIL between calls. Pieces of 65
  rows instead of 131 were tried and measured worse at two threads (gain 1.01-1.31× against 1.31-1.59×
  with 131, `--functions periods`, quiet, in turns), so pieces stay at 131; compiling the refinement is
  the next step.
- **`segments`, `screen`**: the change-point search dominates; `screen` also runs `kpss_test` and
  `periods`, and gains with them.
"""


def gains(con, cases: list[bench.Case], repeat: int) -> list[list[str]]:
    rows = []
    for case in cases:
        sqls = {"floor": bench.floor_query(case.table), "ours": bench.query(case.table, case.expr)}
        runs = {}
        for threads in (1, 2):
            for name, sql in sqls.items():
                runs[f"{name} {threads}"] = lambda s=sql, n=threads: (
                    con.execute(f"SET threads = {n}"),
                    con.execute(s).fetchall(),
                )
        runs["ours 1"]()  # loads the code and the table
        times = {k: statistics.median(v) for k, v in interleaved(runs, repeat).items()}
        over = {n: times[f"ours {n}"] - times[f"floor {n}"] for n in (1, 2)}
        gain = over[1] / over[2] if over[2] > 0 else float("inf")
        whole = times["ours 1"] / times["ours 2"]
        print(
            f"{case.function:20s} {case.form:5s} over floor {over[1]:.3f} s -> {over[2]:.3f} s: {gain:.2f}x", flush=True
        )
        rows.append(
            [
                f"`{case.function}`",
                case.form,
                case.table,
                seconds_text(times["floor 1"]),
                seconds_text(times["ours 1"]),
                seconds_text(times["floor 2"]),
                seconds_text(times["ours 2"]),
                f"{gain:.2f}×",
                f"{whole:.2f}×",
            ]
        )
    return rows


def few_groups(con, points: int, repeat: int) -> list[list[str]]:
    rows = []
    for groups in (512, 2048, 4096, 8192):
        table = f"few_{groups}"
        data.store(con, table, data.rows_table(data.seasonal(groups, points, seed=groups)))
        for call in FEW_CALLS:
            sqls = {"floor": bench.query(table, bench.FLOOR), "ours": bench.query(table, call)}
            runs = {
                f"{name} {n}": lambda s=sql, n=n: (con.execute(f"SET threads = {n}"), con.execute(s).fetchall())
                for n in (1, 2)
                for name, sql in sqls.items()
            }
            times = {k: statistics.median(v) for k, v in interleaved(runs, repeat).items()}
            over = {n: times[f"ours {n}"] - times[f"floor {n}"] for n in (1, 2)}
            gain = over[1] / over[2] if over[2] > 0 else float("inf")
            print(f"{groups:6d} groups {call}: {gain:.2f}x", flush=True)
            rows.append([f"{groups:,}", f"`{call}`", seconds_text(over[1]), seconds_text(over[2]), f"{gain:.2f}×"])
    return rows


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.threads", description=__doc__.splitlines()[0])
    parser.add_argument("--groups", type=int, default=8192)
    parser.add_argument("--points", type=int, default=500)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--functions", default="", help="comma-separated function names (default: all)")
    parser.add_argument("--few", action="store_true", help="also the gain against the number of groups")
    parser.add_argument("--write", action="store_true", help="write the tables into benchmarks/RESULTS.md")
    args = parser.parse_args(argv)
    wanted = {w for w in args.functions.split(",") if w}
    load_before = os.getloadavg()[0]
    started = time.perf_counter()
    with tempfile.TemporaryDirectory() as folder:
        database = str(Path(folder) / "threads.duckdb")
        with duckdb.connect(database) as con:
            data.store(con, "series", data.rows_table(data.seasonal(args.groups, args.points)))
            data.store(con, "shifts", data.rows_table(data.shifted(args.groups, args.points)))
            data.store_walks(con, "walks", data.walks(300, 36))
            con.execute("CHECKPOINT")
        con = tsql.connect(database)
        con.execute("SET enable_progress_bar = false")
        chosen = [
            c
            for c in bench.cases()
            if c.table in ("series", "shifts", "walks") and (not wanted or c.function in wanted)
        ]
        rows = gains(con, chosen, args.repeat)
        few = few_groups(con, args.points, args.repeat) if args.few else []
        con.close()
    header = ["function", "form", "table", "floor 1", "ours 1", "floor 2", "ours 2", "gain over floor", "whole query"]
    text = [
        f"Written by `python -m benchmarks.threads` on {time.strftime('%Y-%m-%d')}: {os.cpu_count()} CPUs, load "
        f"average (1 min) {load_before:.2f} before and {os.getloadavg()[0]:.2f} after; "
        f"{time.perf_counter() - started:.0f} s. `series` and `shifts`: {args.groups:,} groups × {args.points} "
        f"points; `walks`: 300 curves × 36 (all pairs). Medians of {args.repeat} runs taken in turns. "
        "*gain over floor* = (ours − floor at 1 thread) ÷ (ours − floor at 2 threads).",
        "",
        markdown_table(header, rows),
        "",
    ]
    if few:
        text += [
            "Gain over the floor against the number of groups (same points per group):",
            "",
            markdown_table(["groups", "call", "over floor, 1 thread", "over floor, 2 threads", "gain"], few),
            "",
        ]
    text += [NOTES]
    print("\n".join(text))
    if args.write:
        write_section("\n".join(text), title="Threads")
    return 0


if __name__ == "__main__":
    sys.exit(main())
