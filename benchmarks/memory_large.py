"""Peak memory at the larger sizes: each O(n) function's query in a fresh process, against the floor's.

    python -m benchmarks.memory_large                        # 100,000 groups x 1,000 points (100M rows)
    python -m benchmarks.memory_large --groups 20000 --out benchmarks/memory_large.md

The table is made in SQL (no copy of it in this process): ``g`` INTEGER, ``t`` DATE one day apart,
``v`` a level per group, a 7-, 12- or 24-day cycle and hashed noise (deterministic). Each query, and
the floor ``list_sum(list(v ORDER BY t))``, runs alone in a fresh process (one at a time, so that two
big queries never share the machine's memory) after every function's example has loaded its code;
the figure is the process's peak resident memory (VmHWM, as ``ru_maxrss``).
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

import duckdb

from benchmarks import cases as bench
from benchmarks import harness

#: The functions whose work grows in proportion to the data (an FFT's log factor aside), and trend_test.
LINEAR = (
    "autocorrelation",
    "dominant_period",
    "seasonality",
    "acf",
    "ljung_box",
    "harmonic_smooth",
    "harmonic_profile",
    "sparkline",
    "on_grid",
    "trend_test",
)
BAR = 1.3


def make_table(database: str, groups: int, points: int) -> None:
    with duckdb.connect(database) as con:
        con.execute(
            f"""
            CREATE TABLE series AS
            SELECT g::INTEGER AS g, DATE '2000-01-01' + t::INTEGER AS t,
                   100 + (hash(g) % 2000)::DOUBLE / 100
                   + 2 * sin(2 * pi() * t / [7, 12, 24][1 + g % 3] + g)
                   + (hash(g, t) % 2000001)::DOUBLE / 1e6 - 1 AS v
            FROM range({points}) AS a(t), range({groups}) AS b(g)
            """
        )


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.memory_large", description=__doc__.splitlines()[0])
    parser.add_argument("--groups", type=int, default=100_000)
    parser.add_argument("--points", type=int, default=1_000)
    parser.add_argument("--only", help="comma-separated function names (default: every O(n) function)")
    parser.add_argument("--out", type=Path, help="write the table as markdown to this file")
    args = parser.parse_args(argv)
    wanted = set(args.only.split(",")) if args.only else set(LINEAR)
    chosen = [c for c in bench.cases() if c.table == "series" and c.function in wanted]
    started = time.perf_counter()
    with tempfile.TemporaryDirectory() as folder:
        database = str(Path(folder) / "large.duckdb")
        make_table(database, args.groups, args.points)
        print(f"table made in {time.perf_counter() - started:.0f} s", file=sys.stderr, flush=True)
        queries = {"floor": bench.floor_query("series")} | {c.name: bench.query("series", c.expr) for c in chosen}
        harness.peak_rss_all(database, {"warm-up": "SELECT 1"}, jobs=1)  # numba's caches checked and written once
        peaks = {}
        for name, sql in queries.items():  # one at a time: the peaks are gigabytes
            began = time.perf_counter()
            peaks[name] = harness.peak_rss_all(database, {name: sql}, jobs=1)[name]
            peaks[name]["seconds"] = time.perf_counter() - began
            mb = peaks[name]["peak_kb"] / 1024
            print(f"  {name}: {mb:,.0f} MB ({peaks[name]['seconds']:.0f} s)", file=sys.stderr, flush=True)
    floor = peaks["floor"]["peak_kb"]
    rows = [
        [
            f"`{c.function}`",
            c.form,
            f"{peaks[c.name]['peak_kb'] / 1024:,.0f} MB",
            f"{peaks[c.name]['peak_kb'] / floor:.2f}×",
            f"≤ {BAR:g}× floor {'✓' if peaks[c.name]['peak_kb'] / floor <= BAR else '✗ MISSED'}",
        ]
        for c in chosen
    ]
    rows.insert(0, ["floor `list_sum(list(v ORDER BY t))`", "—", f"{floor / 1024:,.0f} MB", "1.00×", "—"])
    load = os.getloadavg()[0]
    text = (
        f"Peak resident memory at {args.groups:,} groups × {args.points:,} points "
        f"({args.groups * args.points / 1e6:,.0f}M rows), written by `python -m benchmarks.memory_large` on "
        f"{time.strftime('%Y-%m-%d')} ({os.cpu_count()} CPUs, {_memory_gb():.0f} GB of memory, DuckDB "
        f"{duckdb.__version__}; load average {load:.2f} at the end; {time.perf_counter() - started:.0f} s). "
        "Each query alone in a fresh process after every function's example loaded its code; the figure is the "
        "process's peak (VmHWM).\n\n"
        + harness.markdown_table(["function", "form", "peak RSS", "÷ floor", "bar"], rows)
        + "\n"
    )
    print(text)
    if args.out:
        args.out.write_text(text, encoding="utf-8")
    return 0


def _memory_gb() -> float:
    return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 2**30


if __name__ == "__main__":
    sys.exit(main())
