"""Compiling the numba kernels before a first query, in worker processes, one per core.

numba compiles under one lock per process, so threads do not help; processes do, and each
writes what it compiles to numba's on-disk cache, where the process that runs the queries then
finds it. A :class:`Job` is a small query whose first run compiles one kernel file's code;
:func:`start` shares the jobs whose cache is empty among worker processes (longest first,
each to the least loaded worker) and returns at once, so the caller can do other work
meanwhile; :meth:`Warming.wait` waits for them. A worker that fails costs nothing but time:
the query then compiles what it needs itself.
"""

from __future__ import annotations

import importlib
import json
import os
import subprocess
import sys
import time
from dataclasses import dataclass

__all__ = ["Job", "Warming", "cold", "start"]


@dataclass(frozen=True)
class Job:
    """One query that compiles a kernel file's code on its first run."""

    sql: str
    #: the compiled entry points it fills, as ``module:function`` (``tsql.kernels.trend:_rows``): the job is
    #: needed while the cache holds none of one of them for this machine
    fills: tuple[str, ...]
    #: about what compiling costs in CPU seconds (a quiet 2-core machine), to share the jobs out
    seconds: float


def cold(jobs: tuple[Job, ...] | list[Job]) -> list[Job]:
    """The jobs some of whose entry points have nothing in numba's cache for this machine and this source."""
    return [job for job in jobs if not all(_cached(name) for name in job.fills)]


def _cached(name: str) -> bool:
    """Whether numba's cache index of the compiled function ``module:function`` holds an entry for this CPU."""
    module, function = name.split(":")
    try:
        dispatcher = getattr(importlib.import_module(module), function)
        from numba.core.registry import cpu_target

        magic = cpu_target.target_context.codegen().magic_tuple()
        # an index for other source (a changed file) or another numba version loads as empty
        index = dispatcher._cache._cache_file._load_index()
        return any(key[1] == magic for key in index)
    except Exception:  # noqa: BLE001 (numba's cache internals vary by version: then compile, as without this module)
        return False


class Warming:
    """Worker processes filling numba's cache; :meth:`wait` for them (or :meth:`stop` them)."""

    def __init__(self, workers: list[subprocess.Popen], jobs: int) -> None:
        self.workers = workers
        self.jobs = jobs
        self.started = time.perf_counter()
        #: each worker's CPU seconds once :meth:`wait` returned (None for one that failed)
        self.cpu: list[float | None] = []

    def wait(self) -> float:
        """Wait for every worker; returns the seconds since :func:`start`. Stops them if interrupted."""
        try:
            for worker in self.workers:
                out, _ = worker.communicate()
                self.cpu.append(float(out) if worker.returncode == 0 and out.strip() else None)
        except BaseException:
            self.stop()
            raise
        return time.perf_counter() - self.started

    def stop(self) -> None:
        """End the workers still running."""
        for worker in self.workers:
            if worker.poll() is None:
                worker.kill()
                worker.wait()


def start(jobs: tuple[Job, ...] | list[Job], processes: int | None = None) -> Warming:
    """Run the cold ``jobs`` in at most ``processes`` (default: one per core) worker processes.

    Jobs go longest first to the worker with the least work so far. Returns at once; with no
    cold job no process starts.
    """
    todo = cold(jobs)
    shares = _shares(todo, min(len(todo), processes or os.cpu_count() or 1))
    workers = [
        subprocess.Popen(
            [sys.executable, "-m", "tsql.warming", json.dumps([job.sql for job in share])],
            stdin=subprocess.DEVNULL,
            stdout=subprocess.PIPE,
            stderr=subprocess.DEVNULL,
            text=True,
        )
        for share in shares
    ]
    return Warming(workers, len(todo))


def _shares(jobs: list[Job], count: int) -> list[list[Job]]:
    """The jobs shared among ``count`` workers: longest first, each to the least loaded (ties: the first)."""
    shares: list[list[Job]] = [[] for _ in range(count)]
    for job in sorted(jobs, key=lambda job: -job.seconds):
        min(shares, key=lambda share: sum(j.seconds for j in share)).append(job)
    return shares


def _work(queries: list[str]) -> None:
    """A worker: run each query once on an in-memory database; print the CPU seconds it took."""
    from tsql.binding import connect

    with connect() as con:
        con.execute("SET threads = 1")
        for sql in queries:
            con.execute(sql).fetchall()
    print(time.process_time())


if __name__ == "__main__":
    _work(json.loads(sys.argv[1]))
