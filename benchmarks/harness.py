"""Measuring side by side: medians of interleaved runs, peak memory in a fresh process, sized loops.

The machines are noisy and have two cores, so every figure is a median, runs of the things
compared alternate (a, b, c, a, b, c, ...), and only figures from the same run are compared.
"""

from __future__ import annotations

import importlib.util
import math
import multiprocessing
import resource
import statistics
import sys
import time
from collections.abc import Callable
from pathlib import Path


def load_module(path: str, name: str | None = None):
    """A copy of a module from another revision, loaded from the file at ``path`` as ``name`` (default: the
    file's stem); registered in ``sys.modules``, where numba's cache and dataclasses look their module up."""
    name = name or Path(path).stem
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    spec.loader.exec_module(module)
    return module


def timed(fn: Callable[[], object]) -> float:
    """Wall-clock seconds of one call."""
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


def interleaved(runs: dict[str, Callable[[], object]], repeat: int) -> dict[str, list[float]]:
    """Every run ``repeat`` times, in turns; the seconds of each call."""
    times: dict[str, list[float]] = {name: [] for name in runs}
    for _ in range(repeat):
        for name, fn in runs.items():
            times[name].append(timed(fn))
    return times


def side_by_side(runs: dict[str, Callable[[], object]], repeat: int) -> dict[str, float]:
    """The median seconds of each run, measured in turns."""
    return {name: statistics.median(values) for name, values in interleaved(runs, repeat).items()}


def median_seconds(fn: Callable[[], object], repeat: int) -> float:
    return statistics.median(timed(fn) for _ in range(repeat))


def reference_seconds(fn: Callable[[], object], repeat: int, slow: float = 5.0) -> list[float]:
    """Seconds of up to ``repeat`` calls of a reference; one call only when it takes longer than ``slow``."""
    times = [timed(fn)]
    while len(times) < repeat and times[0] <= slow:
        times.append(timed(fn))
    return times


def sized_loop(
    run: Callable[[int], int],
    most: int,
    budget: float,
    repeat: int,
    pairs: bool = False,
    beside: Callable[[], object] | None = None,
) -> tuple[int, int, list[float], list[float]]:
    """Time ``run(k)`` (which returns how many units it did) at a ``k`` that takes about ``budget`` seconds.

    ``k`` doubles until a call takes a quarter of the budget (or ``k`` reaches ``most``), then is scaled
    to the budget; the units grow like ``k``, or like ``k^2`` with ``pairs``. The timed calls take turns
    with ``beside`` (what the loop is compared with), so that both see the same load. Returns
    ``(k, units, seconds of each of the repeat calls, seconds of each call of beside)``.
    """
    lowest = k = 2 if pairs else 1
    while True:
        seconds = timed(lambda k=k: run(k))
        if k >= most or seconds >= budget / 4:
            break
        k = min(most, 2 * k)
    k = max(lowest, min(most, int(k * (budget / max(seconds, 1e-9)) ** (0.5 if pairs else 1.0))))
    units = 0
    times, beside_times = [], []
    for _ in range(repeat):
        if beside is not None:
            beside_times.append(timed(beside))
        start = time.perf_counter()
        units = run(k)
        times.append(time.perf_counter() - start)
    return k, units, times, beside_times


# modules a memory probe imports before it is forked, so that each probe starts quickly
PROBE_PRELOAD = [
    "pandas",  # DuckDB's first Python UDF call imports pandas and pyarrow.compute
    "pyarrow.compute",
    "tsql",
    "tsql.binding",
    *(
        f"tsql.kernels.{m}"
        for m in ("changepoint", "correlation", "dtw", "grid", "sparkline", "periodicity", "smoothing")
    ),
    "tsql.kernels.trend",
]


def _status_kb(field: str) -> int:
    try:
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith(field + ":"):
                    return int(line.split()[1])
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # kB on Linux; bytes on macOS


def _probe(database: str, sql: str) -> dict[str, int]:
    """In a fresh process: open the database, load every kernel, run ``sql``; the peak memory."""
    import tsql
    from tsql.registry import FUNCTIONS

    con = tsql.connect(database, read_only=True)
    con.execute("SET enable_progress_bar = false")
    # each function's tiny example first, so that every kernel (and numba's compiled code) is loaded:
    # two probes then differ by the memory of their queries, not of the code
    for fn in FUNCTIONS:
        con.execute(fn.example).fetchall()
    before = _status_kb("VmRSS")
    con.execute(sql).fetchall()
    return {"before_kb": before, "peak_kb": _status_kb("VmHWM")}


def peak_rss_all(database: str, queries: dict[str, str], jobs: int = 2) -> dict[str, dict[str, int]]:
    """Peak resident memory (kB) of each query, each in a fresh process, ``jobs`` processes at a time.

    The processes are forked from a server that has only imported the modules (multiprocessing's
    forkserver): each one starts clean, runs one query and exits.
    """
    context = multiprocessing.get_context("forkserver")
    context.set_forkserver_preload(PROBE_PRELOAD)
    pool = context.Pool(processes=jobs, maxtasksperchild=1)
    try:
        pending = {name: pool.apply_async(_probe, (database, sql)) for name, sql in queries.items()}
        return {name: result.get() for name, result in pending.items()}
    finally:
        pool.close()
        pool.join()


def log_slope(sizes: list[float], seconds: list[float]) -> float:
    """Least-squares slope of log(seconds) on log(size): 1 means time grows in proportion."""
    x = [math.log(s) for s in sizes]
    y = [math.log(t) for t in seconds]
    mx, my = statistics.fmean(x), statistics.fmean(y)
    return sum((a - mx) * (b - my) for a, b in zip(x, y)) / sum((a - mx) ** 2 for a in x)


def markdown_table(header: list[str], rows: list[list[str]]) -> str:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(cell.replace("|", "\\|") for cell in row) + " |" for row in rows]
    return "\n".join(lines)


def seconds_text(seconds: float) -> str:
    if seconds >= 10:
        return f"{seconds:.1f} s"
    if seconds >= 0.1:
        return f"{seconds:.2f} s"
    if seconds >= 1e-3:
        return f"{seconds * 1e3:.1f} ms"
    return f"{seconds * 1e6:.0f} µs"


def ratio_text(ratio: float) -> str:
    return f"{ratio:.2f}×" if ratio < 10 else f"{ratio:,.0f}×"
