"""Every public function side by side with the floor, native SQL, compiled references and export-and-loop.

    python -m benchmarks            # the full run: a few minutes on 2 cores; writes RESULTS.md and results.json
    python -m benchmarks --quick    # small tables, under a minute, for development

One run, one machine: each table's queries run in turns (floor, native, ours, ...) and every
figure is a median; references run on the same data in the same run. See cases.py for the cases.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import duckdb
import numpy as np

import tsql
from benchmarks import cases as bench
from benchmarks import harness, loops
from tsql.registry import FUNCTIONS

HERE = Path(__file__).parent


STARTED = time.perf_counter()


def say(message: str) -> None:
    print(f"[{time.perf_counter() - STARTED:6.1f} s] {message}", file=sys.stderr, flush=True)


def run_queries(con: duckdb.DuckDBPyConnection, queries: dict[str, str], repeat: int) -> dict[str, list[float]]:
    """Time the queries in turns, after one run of the first (which reads the table into DuckDB's buffers)."""

    def runner(sql: str) -> Callable[[], object]:
        return lambda: con.execute(sql).fetchall()

    runs = {name: runner(sql) for name, sql in queries.items()}
    next(iter(runs.values()))()
    return harness.interleaved(runs, repeat)


def warm_up(con: duckdb.DuckDBPyConnection) -> None:
    """Every function's example once: imports, and numba's compiled code loaded from its cache."""
    for fn in FUNCTIONS:
        con.execute(fn.example).fetchall()


def measure_table(con, table: str, table_cases: list[bench.Case], sizes: bench.Sizes, arrays: dict) -> list[dict]:
    values = arrays[table]
    queries = {"floor": bench.floor_query(table)}
    for case in table_cases:
        if case.native:
            queries[case.native.label] = case.native.sql.format(table=table)
        queries[case.name] = bench.query(table, case.expr)
    say(f"{table}: {len(queries)} queries x {sizes.repeat} in turns")
    times = run_queries(con, queries, sizes.repeat)
    floor = statistics.median(times["floor"])
    rows = []
    for case in table_cases:
        ours = statistics.median(times[case.name])
        row = {
            "function": case.function,
            "form": case.form,
            "table": table,
            "expr": case.expr,
            "sql": queries[case.name],
            "work": bench.work(table, values),
            "ours_s": ours,
            "ours_runs": times[case.name],
            "floor_s": floor,
            "floor_ratio": ours / floor,
            "native": None,
            "compiled": None,
            "loop": None,
            "note": case.note,
            "check": None,
        }
        if case.native:
            native = statistics.median(times[case.native.label])
            row["native"] = {"label": case.native.label, "s": native, "ratio": ours / native}
        reference_output = None
        if case.compiled:
            row["compiled"], reference_output = measure_compiled(case.compiled, values, ours, sizes.repeat)
        if case.loop:
            row["loop"] = measure_loop(con, case, table, values, sizes)
        if case.check:
            agrees, text = case.check(con, arrays, reference_output)
            row["check"] = {"agrees": agrees, "text": text}
        rows.append(row)
        say(f"  {case.name}: {harness.seconds_text(ours)} ({ours / floor:.2f}x floor)")
    return rows


def measure_compiled(reference: bench.Reference, values: np.ndarray, ours: float, repeat: int) -> tuple[dict, object]:
    outputs: list = []
    runs = harness.reference_seconds(lambda: outputs.append(reference.run(values)), repeat)
    theirs = statistics.median(runs)
    figures = {"label": reference.label, "s": theirs, "runs": runs, "ratio": ours / theirs, "faster": theirs / ours}
    return figures, outputs[0]


def measure_loop(con, case: bench.Case, table: str, values: np.ndarray, sizes: bench.Sizes) -> dict:
    """The loop at a size that fits the budget, its runs taking turns with runs of our query."""
    count = len(values)
    if case.loop.per_pair:
        total = count * (count - 1) // 2

        def run(k: int) -> int:
            return loops.export_and_loop_pairs(con, table, k, case.loop.per_pair)

    else:
        total = count

        def run(k: int) -> int:
            return loops.export_and_loop_groups(con, table, k, case.loop.per_series)

    sql = bench.query(table, case.expr)
    k, units, runs, ours_runs = harness.sized_loop(
        run,
        count,
        sizes.loop_budget,
        sizes.loop_repeat,
        pairs=case.loop.per_pair is not None,
        beside=lambda: con.execute(sql).fetchall(),
    )
    ours = statistics.median(ours_runs)
    per_unit = statistics.median(runs) / units
    return {
        "label": case.loop.label,
        "k": k,
        "of": count,
        "units": units,
        "units_total": total,
        "unit": "pairs" if case.loop.per_pair else "series",
        "s": statistics.median(runs),
        "runs": runs,
        "per_unit_s": per_unit,
        "ours_s": ours,
        "ours_runs": ours_runs,
        "speedup": per_unit / (ours / total),
    }


def measure_memory(database: str, rows: list[dict]) -> None:
    """Peak RSS of each row's query and of its table's floor query, each in a fresh process."""
    queries = {f"floor {t}": bench.floor_query(t) for t in dict.fromkeys(r["table"] for r in rows)}
    queries |= {f"row {i}": r["sql"] for i, r in enumerate(rows)}
    say(f"peak memory: {len(queries)} fresh processes")
    peaks = harness.peak_rss_all(database, queries, jobs=min(2, os.cpu_count() or 1))
    for i, row in enumerate(rows):
        ours, floor = peaks[f"row {i}"], peaks[f"floor {row['table']}"]
        row["rss"] = {
            "ours_kb": ours["peak_kb"],
            "floor_kb": floor["peak_kb"],
            "ours_before_kb": ours["before_kb"],
            "floor_before_kb": floor["before_kb"],
            "ratio": ours["peak_kb"] / floor["peak_kb"],
        }


def judge(rows: list[dict], table_cases: list[bench.Case]) -> None:
    for row, case in zip(rows, table_cases):
        values = {
            "floor": row["floor_ratio"],
            "native": (row["native"] or {}).get("ratio"),
            "compiled": (row["compiled"] or {}).get("ratio"),
            "faster": (row["compiled"] or {}).get("faster"),
            "loop": (row["loop"] or {}).get("speedup"),
            "rss": row["rss"]["ratio"],
            "seconds": row["ours_s"],
        }
        row["bars"] = [
            {"bar": bar.text(), "kind": bar.kind, "limit": bar.limit, "value": values[bar.kind],
             "met": bar.met(values[bar.kind])}
            for bar in (*case.bars, case.rss_bar)
        ]  # fmt: skip


def measure_scaling(con, sizes: bench.Sizes) -> dict:
    """Time against series length and number of series; DuckDB threads 1 vs 2 on the most series."""
    result: dict = {"calls": list(bench.SCALING), "lengths": {}, "counts": {}, "threads": {}}
    for axis, sizes_on_axis, prefix in (
        ("lengths", sizes.scale_lengths, "length"),
        ("counts", sizes.scale_counts, "count"),
    ):
        for size in sizes_on_axis:
            table = f"{prefix}_{size}"
            say(f"scaling: {table}")
            times = run_queries(con, {c: bench.query(table, c) for c in bench.SCALING}, sizes.repeat)
            result[axis][size] = {c: statistics.median(t) for c, t in times.items()}
    (default_threads,) = con.execute("SELECT current_setting('threads')").fetchone()
    table = f"count_{max(sizes.scale_counts)}"
    runs = {}
    for call in bench.SCALING:
        for threads in (1, 2):
            sql = bench.query(table, call)
            runs[f"{threads} {call}"] = lambda s=sql, n=threads: (
                con.execute(f"SET threads = {n}"),
                con.execute(s).fetchall(),
            )
    say(f"threads 1 vs 2: {table}")
    medians = harness.side_by_side(runs, sizes.repeat)
    con.execute(f"SET threads = {default_threads}")
    result["threads_table"] = table
    result["threads"] = {c: {"1": medians[f"1 {c}"], "2": medians[f"2 {c}"]} for c in bench.SCALING}
    for axis, points_of in (
        ("lengths", lambda size: sizes.scale_groups * size),
        ("counts", lambda size: sizes.scale_points * size),
    ):
        keys = sorted(result[axis])
        result[f"{axis}_exponent"] = {
            c: harness.log_slope([float(k) for k in keys], [result[axis][k][c] for k in keys]) for c in bench.SCALING
        }
        result[f"{axis}_ns_per_value"] = {
            c: {k: result[axis][k][c] / points_of(k) * 1e9 for k in keys} for c in bench.SCALING
        }
    return result


# --------------------------------------------------------------------------- #
# the report
# --------------------------------------------------------------------------- #


def work_text(work: dict) -> str:
    if "pairs" in work:
        return f"{work['series']:,} × {work['points']} ({work['pairs']:,} pairs)"
    if work["groups"] == 1:
        return f"1 × {work['points']:,}"
    rows = f"{work['rows'] / 1e6:.3g}M" if work["rows"] >= 1e6 else f"{work['rows']:,}"
    return f"{work['groups']:,} × {work['points']:,} ({rows} rows)"


def row_cells(row: dict) -> list[str]:
    native = row["native"]
    compiled = row["compiled"]
    loop = row["loop"]
    if compiled:
        compiled_text = (
            f"{harness.ratio_text(compiled['ratio'])} ({harness.seconds_text(compiled['s'])})"
            if compiled["ratio"] >= 1 / 3
            else f"{harness.ratio_text(compiled['faster'])} faster ({harness.seconds_text(compiled['s'])})"
        )
    else:
        compiled_text = "—"
    if loop:
        part = "" if loop["k"] == loop["of"] else f"; {loop['k']:,} of {loop['of']:,}"
        loop_text = f"{harness.ratio_text(loop['speedup'])} faster ({harness.seconds_text(loop['s'])}{part})"
    else:
        loop_text = "—"
    rss = row["rss"]
    bars = "; ".join(f"{b['bar']} {'✓' if b['met'] else '✗ MISSED'}" for b in row["bars"])
    return [
        f"`{row['function']}`",
        row["form"],
        work_text(row["work"]),
        harness.seconds_text(row["ours_s"]),
        harness.ratio_text(row["floor_ratio"]),
        f"{harness.ratio_text(native['ratio'])} {native['label']}" if native else "—",
        compiled_text,
        loop_text,
        f"{rss['ratio']:.2f}× ({rss['ours_kb'] / 1024:,.0f} / {rss['floor_kb'] / 1024:,.0f} MB)",
        bars,
    ]


HEADER = [
    "function",
    "form",
    "work",
    "ours (median)",
    "÷ floor",
    "÷ native SQL",
    "compiled reference",
    "export & loop",
    "peak RSS ÷ floor",
    "bars",
]


def scaling_tables(scaling: dict, sizes: bench.Sizes) -> str:
    lengths, counts = sorted(scaling["lengths"]), sorted(scaling["counts"])
    header = (
        ["call"]
        + [f"{n:,} pts" for n in lengths]
        + ["exponent"]
        + [f"{g:,} series" for g in counts]
        + ["exponent", "1 thread", "2 threads", "gain"]
    )
    rows = []
    for call in scaling["calls"]:
        t1, t2 = scaling["threads"][call]["1"], scaling["threads"][call]["2"]
        rows.append(
            [f"`{call}`"]
            + [f"{scaling['lengths_ns_per_value'][call][n]:.0f}" for n in lengths]
            + [f"{scaling['lengths_exponent'][call]:.2f}"]
            + [f"{scaling['counts_ns_per_value'][call][g]:.0f}" for g in counts]
            + [f"{scaling['counts_exponent'][call]:.2f}"]
            + [harness.seconds_text(t1), harness.seconds_text(t2), f"{t1 / t2:.2f}×"]
        )
    return (
        f"Nanoseconds per value: series length at {sizes.scale_groups:,} series, then number of series at "
        f"{sizes.scale_points:,} points. The exponent is the slope of log(time) on log(size): 1.00 means time in "
        f"proportion to the data. Threads: DuckDB's `threads` setting on `{scaling['threads_table']}` "
        "(benchmarks/threads.py measures every function).\n\n" + harness.markdown_table(header, rows)
    )


def bar_lines(rows: list[dict]) -> list[str]:
    bars = [bar for row in rows for bar in row["bars"]]
    lines = [f"{sum(bar['met'] for bar in bars)} of {len(bars)} bars met in this run.", ""]
    for row in rows:
        for bar in row["bars"]:
            if not bar["met"]:
                value = bar["value"]
                lines.append(
                    f"- **missed**: `{row['function']}` ({row['form']}, {work_text(row['work'])}): {bar['bar']}, "
                    f"measured {value:.2f}"
                )
    return lines


METHOD = """How it was measured:

- **ours**: the median of {repeat} runs; each table's queries take turns (floor, native SQL, ours, ...),
  after every function's example has run once to load the code. Every query ends in `count(result)`:
  the result is computed in full but not converted to Python.
- **floor**: the same GROUP BY that only builds each group's ordered list, `list_sum(list(v ORDER BY t))`
  (for pairs: the self-join touching both lists). No per-series function can be faster.
- **export & loop**: fetch the rows with `.df()`, `groupby` in pandas and call the library per series
  (or pair), compared per series (or pair), export included; its runs take turns with runs of our
  query. Where a loop over every series would take more than about {budget:g} s it runs on the first
  k of them (shown as "k of n").
- **compiled reference**: on the numpy array already in memory. References slower than 5 s run once.
- **peak RSS**: each query in a fresh process on the same database file, against the floor query in its
  own fresh process; both first load every function's code (the figure is the process's peak, VmHWM).
- **tables**: `series` daily values with a 7-, 12- or 24-day cycle, a weak trend and noise; `shifts`
  0-4 level shifts per series; `walks` random walks. The list forms and the `*_agg` forms both run on
  complete series (DATE times one day apart), so the `*_agg` figures include putting each group on its grid."""


def markdown(result: dict) -> str:
    sizes = bench.PRESETS[result["sizes"]["name"]]
    machine = result["machine"]
    rows = result["rows"]
    lines = [
        "# Benchmark results",
        "",
        f"Written by `python -m benchmarks{'' if sizes.name == 'full' else ' --' + sizes.name}` on "
        f"{machine['date']}: {machine['cpus']} CPUs, {machine['system']}, Python {machine['python']}, "
        f"DuckDB {machine['duckdb']}, numpy {machine['numpy']}. Load average (1 min) {machine['load_before'][0]:.2f} "
        f"before and {machine['load_after'][0]:.2f} after the run; the run took {result['seconds'] / 60:.1f} min.",
        "",
        METHOD.format(repeat=sizes.repeat, budget=sizes.loop_budget),
        "",
        harness.markdown_table(HEADER, [row_cells(r) for r in rows]),
        "",
    ]
    checks = [f"- `{r['function']}` on `{r['table']}`: {r['check']['text']}" for r in rows if r["check"]]
    notes = [f"- `{r['function']}` ({r['form']}) on `{r['table']}`: {r['note']}" for r in rows if r["note"]]
    lines += ["## Bars", "", *bar_lines(rows), "", "## Answers checked", "", *checks, "", "## Notes", "", *notes]
    if result["scaling"]:
        lines += ["", "## Scaling", "", scaling_tables(result["scaling"], sizes), ""]
    large = HERE / "memory_large.md"  # written by python -m benchmarks.memory_large (a run of its own)
    if sizes is bench.FULL and large.exists():
        lines += ["", "## Memory at the larger sizes", "", large.read_text(encoding="utf-8").strip(), ""]
    return "\n".join(lines)


def console(result: dict) -> str:
    """The main table as plain aligned text."""
    cells = [HEADER] + [row_cells(r) for r in result["rows"]]
    widths = [max(len(c[i].strip("`")) for c in cells) for i in range(len(HEADER) - 1)]
    out = []
    for c in cells:
        out.append("  ".join(c[i].strip("`").ljust(widths[i]) for i in range(len(widths))) + "  " + c[-1])
    return "\n".join(out + [""] + bar_lines(result["rows"]))


def finite(value: object) -> object:
    """Plain JSON values: numpy scalars as Python ones, NaN and infinity as ``null``."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {str(k): finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [finite(v) for v in value]
    return value


def run(sizes: bench.Sizes, out: Path | None, only: set[str] | None = None) -> dict:
    """Measure every case (or only those of the functions named in ``only``, without the scaling)."""
    started = time.perf_counter()
    load_before = os.getloadavg()
    all_cases = [c for c in bench.cases() if only is None or c.function in only]
    with tempfile.TemporaryDirectory() as folder:
        database = str(Path(folder) / "bench.duckdb")
        say(f"building the tables ({sizes.name})")
        with duckdb.connect(database) as writer:
            arrays = bench.build(writer, sizes)
        con = tsql.connect(database, read_only=True)
        con.execute("SET enable_progress_bar = false")
        warm_up(con)
        rows = []
        all_cases = [c for table in dict.fromkeys(c.table for c in all_cases) for c in all_cases if c.table == table]
        for table in dict.fromkeys(c.table for c in all_cases):  # the rows come table by table, as all_cases now
            rows += measure_table(con, table, [c for c in all_cases if c.table == table], sizes, arrays)
        scaling = measure_scaling(con, sizes) if only is None else None
        con.close()
        measure_memory(database, rows)
    judge(rows, all_cases)
    result = {
        "machine": {
            "date": time.strftime("%Y-%m-%d"),
            "cpus": os.cpu_count(),
            "system": platform.platform(terse=True),
            "python": platform.python_version(),
            "duckdb": duckdb.__version__,
            "numpy": np.__version__,
            "load_before": list(load_before),
            "load_after": list(os.getloadavg()),
        },
        "sizes": {k: v for k, v in vars(sizes).items()},
        "seconds": time.perf_counter() - started,
        "rows": rows,
        "scaling": scaling,
    }
    if out is None:
        return result
    out.mkdir(parents=True, exist_ok=True)
    (out / "results.json").write_text(json.dumps(finite(result), indent=1) + "\n", encoding="utf-8")
    (out / "RESULTS.md").write_text(markdown(result) + kept_sections(out / "RESULTS.md"), encoding="utf-8")
    return result


#: Sections of RESULTS.md written by other scripts (benchmarks.first_run, benchmarks.threads), and every
#: section whose heading says it was measured by hand: kept as they are, in their order.
KEPT = ("## First run\n", "## Threads\n")
BY_HAND = "measured by hand"


def kept_sections(path: Path) -> str:
    """The sections of RESULTS.md at ``path`` that this run does not write (see ``KEPT``), ready to append."""
    old = path.read_text(encoding="utf-8") if path.exists() else ""
    sections = ["## " + part for part in ("\n" + old).split("\n## ")[1:]]
    parts = [part for part in sections if part.startswith(KEPT) or BY_HAND in part.split("\n", 1)[0]]
    return "".join("\n" + part.rstrip("\n") + "\n" for part in parts)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks", description=__doc__.splitlines()[0])
    size = parser.add_mutually_exclusive_group()
    size.add_argument("--quick", action="store_true", help="small tables: under a minute, for development")
    size.add_argument("--tiny", action="store_true", help="smoke-test sizes (seconds; the figures mean nothing)")
    parser.add_argument(
        "--out", type=Path, default=None, help="folder for RESULTS.md and results.json (full run: benchmarks/)"
    )
    parser.add_argument(
        "--only", help="comma-separated function names: measure just their rows (no scaling; files only with --out)"
    )
    args = parser.parse_args(argv)
    only = {name.strip() for name in args.only.split(",")} if args.only else None
    unknown = (only or set()) - {fn.name for fn in FUNCTIONS}
    if unknown:
        parser.error(f"--only: unknown function(s) {', '.join(sorted(unknown))}")
    sizes = bench.TINY if args.tiny else bench.QUICK if args.quick else bench.FULL
    out = args.out or (HERE if sizes is bench.FULL and only is None else None)
    result = run(sizes, out, only)
    print(console(result))
    written = f"written to {out}" if out else "not written (--out DIR writes RESULTS.md and results.json)"
    print(f"\n{result['seconds']:.0f} s; {written}")
    return 0
