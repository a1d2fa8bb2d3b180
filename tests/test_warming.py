"""tsql.warming: worker processes fill numba's cache before a first query needs it."""

import os
import subprocess
import sys
import time
from pathlib import Path

from tsql import warming
from tsql.demo import WARM_UP_JOBS

ROOT = Path(__file__).resolve().parents[1]
SPARKLINE = warming.Job("SELECT sparkline([0.0, 2, 1])", ("tsql.kernels.sparkline:_row_levels",), 0.5)


def test_a_worker_fills_the_cache_this_process_reads(tmp_path):
    # a process of its own on an empty cache, so that the worker must compile (its workers inherit the folder)
    script = (
        "from tsql import warming; from tests.test_warming import SPARKLINE\n"
        "assert warming.cold([SPARKLINE]) == [SPARKLINE]\n"
        "compiling = warming.start([SPARKLINE], processes=1); compiling.wait()\n"
        "assert len(compiling.cpu) == 1 and compiling.cpu[0] is not None and compiling.cpu[0] > 0, compiling.cpu\n"
        "assert warming.cold([SPARKLINE]) == []\n"
    )
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path)}
    done = subprocess.run([sys.executable, "-c", script], env=env, cwd=ROOT, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr


def test_an_entry_point_that_is_not_compiled_code_counts_as_cold():
    job = warming.Job("SELECT 1", ("tsql.kernels.trend:trend_test",), 1.0)
    assert warming.cold([job]) == [job]
    assert warming.cold([warming.Job("SELECT 1", ("tsql.kernels.nothing:here",), 1.0)]) != []


def test_a_failing_worker_costs_only_time():
    job = warming.Job("SELECT no_such_function(1)", ("tsql.kernels.trend:trend_test",), 1.0)
    compiling = warming.start([job], processes=1)
    assert compiling.jobs == 1
    compiling.wait()
    assert compiling.cpu == [None]


def test_stop_ends_the_workers():
    job = warming.Job("SELECT count(*) FROM range(100000000000)", ("tsql.kernels.trend:trend_test",), 1.0)
    compiling = warming.start([job, job], processes=2)
    time.sleep(0.2)
    compiling.stop()
    assert len(compiling.workers) == 2 and all(worker.poll() is not None for worker in compiling.workers)


def test_jobs_go_longest_first_to_the_least_loaded_worker():
    shares = warming._shares(list(WARM_UP_JOBS), 2)
    assert [[job.seconds for job in share] for share in shares] == [[28.0], [15.0, 11.0, 2.5]]
    assert [len(share) for share in warming._shares(list(WARM_UP_JOBS), 4)] == [1, 1, 1, 1]
