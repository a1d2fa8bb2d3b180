"""What the first run on a new machine costs: compiling the numba kernels, in fresh processes with an empty cache.

    python -m benchmarks.first_run [--source DIR] [--functions a,b] [--no-demo] [--write]

1. **Functions**: one fresh process with ``NUMBA_CACHE_DIR`` pointing to an empty folder connects and
   runs every public function's example query (or those of ``--functions``, in that order), timing
   each first call (wall clock, and the process's CPU time, which a loaded machine stretches less);
   a second process on the same (now full) cache does the same. The difference is what compiling
   costs; the cold process also lists every compiled kernel with its number of specialisations
   (argument type tuples) and the compile seconds numba recorded for each.
2. **Demo**: ``seriesql demo`` on an already built sample warehouse, once with an empty cache and
   once with the cache that run left: the difference is the demo's compile time.

``--source DIR`` runs another checkout of the package (for a before/after comparison in one run).
``--write`` puts the figures in benchmarks/RESULTS.md (section "First run").
"""

from __future__ import annotations

import argparse
import json
import os
import re
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from benchmarks.harness import markdown_table

HERE = Path(__file__).resolve().parents[1]

CHILD = r"""
import importlib, json, pkgutil, sys, time
from collections import Counter
from numba.core import codegen, event
# CPU seconds by phase of compiling, nested compiles apart: numba's typing and lowering (Python),
# LLVM's optimisation of each new function and of each library's module (its callees linked in),
# machine code for that module, the rest of numba's passes
phases, frames = Counter(), []
def enter(kind):
    frames.append([kind, time.process_time(), 0.0])
def leave():
    kind, start, inner = frames.pop()
    spent = time.process_time() - start
    if frames:
        frames[-1][2] += spent
    phases[kind] += spent - inner
class Phases(event.Listener):
    names = {"nopython_type_inference": "typing", "native_lowering": "lowering"}
    def on_start(self, ev):
        enter("other" if ev.kind == "numba:compile" else self.names.get(ev.data["name"].split(" [")[0], "other"))
    def on_end(self, ev):
        leave()
for kind in ("numba:compile", "numba:run_pass"):
    event.register(kind, Phases())
def timed(cls, name, kind):
    method = getattr(cls, name)
    def run(self, *args, **kwargs):
        enter(kind)
        try:
            return method(self, *args, **kwargs)
        finally:
            leave()
    setattr(cls, name, run)
timed(codegen.CPUCodeLibrary, "_optimize_functions", "llvm_functions")
timed(codegen.CPUCodeLibrary, "_optimize_final_module", "llvm_modules")
timed(codegen.JITCodeLibrary, "_finalize_specific", "machine_code")
started = time.perf_counter()
import tsql.registry as registry
from tsql.binding import connect
import tsql.kernels as kernels
from numba.core.registry import CPUDispatcher
con = connect()
setup = time.perf_counter() - started
wanted = json.loads(sys.argv[1])
by_name = {entry.name: entry for entry in registry.PUBLIC}
firsts, cpu = {}, {}
for name in wanted or list(by_name):
    start, start_cpu = time.perf_counter(), time.process_time()
    con.execute(by_name[name].example).fetchall()
    firsts[name] = time.perf_counter() - start
    cpu[name] = time.process_time() - start_cpu
compiled = []
for info in pkgutil.iter_modules(kernels.__path__):
    module = importlib.import_module("tsql.kernels." + info.name)
    for name, value in vars(module).items():
        if isinstance(value, CPUDispatcher) and value.signatures:
            seconds = [(value.overloads[s].metadata or {}).get("timers", {}).get("compiler_lock", 0.0)
                       for s in value.signatures]
            compiled.append([info.name + "." + name, len(seconds), sum(seconds)])
print(json.dumps({"setup": setup, "firsts": firsts, "cpu": cpu, "compiled": compiled, "phases": phases}))
"""


def child_env(cache: str, source: Path) -> dict[str, str]:
    env = dict(os.environ, NUMBA_CACHE_DIR=cache, PYTHONPATH=str(source))
    env.pop("NUMBA_DISABLE_JIT", None)
    return env


def functions(source: Path, wanted: list[str]) -> dict:
    """First calls of every function's example: cold (empty cache), then warm (the cache just filled)."""
    with tempfile.TemporaryDirectory() as cache:
        runs = []
        for _ in ("cold", "warm"):
            done = subprocess.run(
                [sys.executable, "-c", CHILD, json.dumps(wanted)],
                env=child_env(cache, source),
                cwd=source,
                capture_output=True,
                text=True,
                check=True,
            )
            runs.append(json.loads(done.stdout.strip().splitlines()[-1]))
    cold, warm = runs
    return {"cold": cold, "warm": warm}


def demo(source: Path) -> dict:
    """Seconds of ``seriesql demo`` with an empty cache and with the cache it left (the warehouse built before)."""
    with tempfile.TemporaryDirectory() as folder:
        database = str(Path(folder) / "warehouse.duckdb")
        cache = str(Path(folder) / "cache")
        env = child_env(cache, source)
        build = "import sys; from tsql import sample_db; sample_db.ensure(sys.argv[1])"
        subprocess.run([sys.executable, "-c", build, database], env=env, cwd=source, check=True)
        seconds = {}
        for run in ("cold", "warm"):
            start, start_cpu = time.perf_counter(), _children_cpu()
            done = subprocess.run(
                [sys.executable, "-m", "tsql", "demo", "--db", database],
                env=env,
                cwd=source,
                check=True,
                stdout=subprocess.PIPE,
                text=True,
            )
            seconds[run] = time.perf_counter() - start
            # the workers' CPU too (the demo waits for them)
            seconds[run + "_cpu"] = _children_cpu() - start_cpu
            # what the demo reports as its wait for compiled kernels
            waited = re.search(r"Compiling kernels .*? done in ([0-9.]+) s", done.stdout)
            seconds[run + "_wait"] = float(waited.group(1)) if waited else float("nan")
    return seconds


def _children_cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def report(label: str, result: dict) -> list[str]:
    cold, warm = result["functions"]["cold"], result["functions"]["warm"]
    lines = [f"### {label}", ""]
    rows = []
    for name, seconds in cold["firsts"].items():
        cells = [seconds, cold["cpu"][name], warm["firsts"][name], warm["cpu"][name]]
        rows.append([f"`{name}`"] + [f"{x:.2f} s" for x in cells])
    totals = [sum(run[key].values()) for run in (cold, warm) for key in ("firsts", "cpu")]
    rows.append(["**in all**"] + [f"**{x:.1f} s**" for x in totals])
    header = ["function (first call, in this order)", "empty cache", "its CPU", "cache filled", "its CPU"]
    lines += [markdown_table(header, rows), ""]
    kernels = sorted(cold["compiled"], key=lambda k: -k[2])
    shown = [[f"`{name}`", str(count), f"{seconds:.1f} s"] for name, count, seconds in kernels[:12]]
    phases = cold.get("phases", {})
    if phases:
        order = ["typing", "lowering", "llvm_functions", "llvm_modules", "machine_code", "other"]
        lines += [
            "CPU seconds of compiling by phase (each compile's own, its callees' apart): "
            + ", ".join(f"{name.replace('_', ' ')} {phases.get(name, 0.0):.1f}" for name in order)
            + f"; {sum(phases.values()):.1f} in all.",
            "",
        ]
    lines += [
        "The costliest compiled functions (numba's compile seconds, callees included):",
        "",
        markdown_table(["kernel", "specialisations", "compile"], shown),
        "",
        f"{len(kernels)} compiled functions, {sum(k[1] for k in kernels)} specialisations; "
        f"import and connect {cold['setup']:.1f} s cold, {warm['setup']:.1f} s warm.",
        "",
    ]
    if "demo" in result:
        nan = float("nan")
        cold_demo, warm_demo = result["demo"]["cold"], result["demo"]["warm"]
        lines += [
            f"`seriesql demo` (warehouse already built): {cold_demo:.1f} s with an empty cache, {warm_demo:.1f} s "
            f"with the cache filled: compiling costs {cold_demo - warm_demo:.1f} s (CPU: "
            f"{result['demo']['cold_cpu']:.1f} s and {result['demo']['warm_cpu']:.1f} s, worker processes "
            f'included); the demo\'s own line "Compiling kernels ... done in" said '
            f"{result['demo'].get('cold_wait', nan):.1f} s and {result['demo'].get('warm_wait', nan):.1f} s.",
            "",
        ]
    return lines


def write_section(text: str, path: Path = HERE / "benchmarks" / "RESULTS.md", title: str = "First run") -> None:
    """Put ``text`` under ``## {title}`` in RESULTS.md, replacing that section if it is there."""
    old = path.read_text(encoding="utf-8") if path.exists() else "# Benchmark results\n"
    head = f"## {title}\n"
    if head in old:
        before, rest = old.split(head, 1)
        after = rest[rest.find("\n## ") + 1 :] if "\n## " in rest else ""
    else:
        before, after = old.rstrip("\n") + "\n\n", ""
    path.write_text(before + head + "\n" + text.rstrip("\n") + "\n" + ("\n" + after if after else ""), encoding="utf-8")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.first_run", description=__doc__.splitlines()[0])
    parser.add_argument("--source", type=Path, action="append", help="another checkout to measure too (repeatable)")
    parser.add_argument("--functions", default="", help="comma-separated function names (default: all)")
    parser.add_argument("--no-demo", action="store_true", help="skip the demo")
    parser.add_argument("--write", action="store_true", help="write the figures into benchmarks/RESULTS.md")
    args = parser.parse_args(argv)
    wanted = [w for w in args.functions.split(",") if w]
    sources = [(f"before ({path.name})", path.resolve()) for path in args.source or []] + [("this tree", HERE)]
    lines = [
        f"Written by `python -m benchmarks.first_run` on {time.strftime('%Y-%m-%d')}: {os.cpu_count()} CPUs, "
        f"load average (1 min) {os.getloadavg()[0]:.2f} at the start. Each run is a fresh process whose "
        "`NUMBA_CACHE_DIR` is an empty folder, then one on the cache it filled; the difference is compile time.",
        "",
    ]
    for label, source in sources:
        print(f"measuring {label}: functions", file=sys.stderr, flush=True)
        result = {"functions": functions(source, wanted)}
        if not args.no_demo:
            print(f"measuring {label}: demo", file=sys.stderr, flush=True)
            result["demo"] = demo(source)
        lines += report(label, result)
        print("\n".join(report(label, result)), flush=True)
    lines.append(f"Load average (1 min) {os.getloadavg()[0]:.2f} at the end.")
    if args.write:
        write_section("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main())
