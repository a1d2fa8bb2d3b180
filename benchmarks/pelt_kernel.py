"""The PELT kernel against ruptures' exact PELT and against the SQL list-building floor.

    python -m benchmarks.pelt_kernel [--n 3000] [--series 4000] [--points 500] [--long 1000000,3000000] [--repeat 5]
                                     [--calm 100000] [--calm-long 300000,1000000] [--old-repeat 3]
                                     [--parts 1,2,3,4,5,6] [--profile-rows 2000] [--profile-points 1000]
                                     [--search-rows 300]
                                     [--against FILE --against-lengths 100000,300000,1000000]

1. One series of ``--n`` points, model 'mean', BIC penalty: tsql's change_points against
   ``ruptures.Pelt(model="l2", min_size=2, jump=1).fit(x).predict(pen=beta * sigma^2)`` (ruptures'
   l2 cost is the plain RSS, ours is RSS / sigma^2), same answer checked, ratio of medians.
2. ``--series`` series of ``--points`` points in batches of 2,048 rows, as the SQL layer hands
   them: kernel time per model, beside DuckDB's ``list_sum(list(v ORDER BY t)) ... GROUP BY g`` on
   the same data (the floor every list function pays), as a ratio of medians (one thread: the
   batches of a query run in DuckDB's threads, see benchmarks.threads).
3. One series of each ``--long`` length with a single level shift in the middle, model 'mean', BIC
   penalty: where PELT keeps almost every candidate start of the two long segments and functional
   pruning (FPOP) keeps a few dozen; seconds per point should stay about flat as n grows.
4. One series of ``--calm`` points with a single level shift (1 sigma) in the middle, models
   'meanvar' and 'trend', BIC penalty: the search with geometric functional pruning (the kernel
   as shipped) against plain PELT on the same sums, in turns (same answer checked), medians; then
   each ``--calm-long`` length with the pruning alone (seconds per point should grow slowly).
5. The default path (model 'mean', 'bic', ``seasonal='auto'``) step by step on
   :func:`benchmarks.data.seasonal` (``--profile-rows`` x ``--profile-points``, every row with a
   cycle): the first segmentation, the periods (cycle_test with a level), the cycles'
   fit, the second segmentation, and the whole call, each in CPU seconds of this process (medians
   of the steps run in turns; the machine's other load counts less than in wall-clock time).
6. The 'mean' search alone on ``--search-rows`` rows of 1,000 points of white noise (no change, the
   default penalty: BIC times the row's long-run factor, min_size 2): FPOP as shipped against plain
   PELT on the same sums, in turns (same answer checked), microseconds per row and nanoseconds per
   step; the starts FPOP costs per step (counted on a few rows by the search's Python form); and
   the whole segmentation per row (``seasonal='none'``) for scale.
7. With ``--against FILE`` (a copy of ``tsql/kernels/changepoint.py`` from another revision, e.g.
   ``git show main:tsql/kernels/changepoint.py > FILE``): 'meanvar' and 'trend' on part 4's series at
   each ``--against-lengths`` length, that copy's change_points against this one's in turns (same
   answer checked), CPU seconds of this process, medians; first 'mean' (the defaults) on
   ``--profile-rows`` rows of 1,000 points of :func:`benchmarks.data.seasonal` and of white noise: one
   segmentation pass (``_run``, with residuals) in microseconds per row, and the whole change_points
   call, each copy in turns (same answers checked), CPU time, medians.

All figures are medians of wall-clock times measured in this one run.
"""

from __future__ import annotations

import argparse
import math
import statistics
import time

import numpy as np

from benchmarks.data import piecewise
from benchmarks.harness import interleaved, load_module, median_seconds, timed
from benchmarks.loops import mad_sigma as sigma_first
from tsql.kernels import changepoint
from tsql.kernels.ragged import Ragged

BATCH_ROWS = 2048


def single_series(n: int, repeat: int, rupture_repeat: int) -> None:
    import ruptures

    rng = np.random.default_rng(2024)
    x = piecewise(rng, n, 8) * 5.0 + 50.0
    batch = Ragged.from_list([x])
    beta = 2.0 * math.log(n)
    ours = [int(v) for v in changepoint.change_points(batch).values]
    ends = ruptures.Pelt(model="l2", min_size=2, jump=1).fit(x).predict(pen=beta * sigma_first(x) ** 2)
    theirs = [e + 1 for e in ends[:-1]]
    ours_s = median_seconds(lambda: changepoint.change_points(batch), repeat)
    theirs_s = median_seconds(
        lambda: ruptures.Pelt(model="l2", min_size=2, jump=1).fit(x).predict(pen=beta * sigma_first(x) ** 2),
        rupture_repeat,
    )
    print(f"1. one series of {n} points, 'mean', BIC penalty {beta:.2f} ({len(ours)} changes)")
    print(f"   same change points as ruptures: {ours == theirs}")
    print(f"   tsql     {ours_s * 1e3:9.2f} ms   (median of {repeat})")
    print(f"   ruptures {theirs_s * 1e3:9.2f} ms   (median of {rupture_repeat})")
    print(f"   ruptures / tsql = {theirs_s / ours_s:,.0f}x")


def many_series(n_series: int, points: int, repeat: int) -> None:
    rng = np.random.default_rng(7)
    rows = np.empty((n_series, points))
    for i in range(n_series):
        rows[i] = piecewise(rng, points, int(rng.integers(0, 5)))
        if i % 10 == 0:
            rows[i, rng.integers(0, points, 5)] = np.nan
    batches = []
    for lo in range(0, n_series, BATCH_ROWS):
        block = rows[lo : lo + BATCH_ROWS]
        offsets = np.arange(0, block.size + 1, points, dtype=np.int64)
        batches.append(Ragged(block.ravel().copy(), offsets))
    print(f"2. {n_series} series x {points} points (0-4 level shifts each, 1 in 10 with gaps), batches of {BATCH_ROWS}")
    floor_s = None
    try:
        import duckdb

        con = duckdb.connect()
        g = np.repeat(np.arange(n_series, dtype=np.int32), points)
        t = np.tile(np.arange(points, dtype=np.int32), n_series)
        v = rows.ravel()
        con.register("source", {"g": g, "t": t, "v": v})
        con.execute("CREATE TABLE series AS SELECT g, t, CASE WHEN isnan(v) THEN NULL ELSE v END AS v FROM source")
        sql = "SELECT g, list_sum(list(v ORDER BY t)) FROM series GROUP BY g"
        con.execute(sql).fetchall()
        floor_s = median_seconds(lambda: con.execute(sql).fetchall(), repeat)
        print(f"   {'floor: DuckDB list_sum(list(v ORDER BY t)) GROUP BY g':<56} {floor_s:7.3f} s")
    except ImportError:
        print("   (duckdb not installed: no floor measured)")

    def kernel(label: str, data: list[Ragged], model: str) -> None:
        seconds = median_seconds(lambda: [changepoint.change_points(b, model) for b in data], repeat)
        found = sum(len(changepoint.change_points(b, model).values) for b in data)
        ratio = f"   {seconds / floor_s:5.2f}x floor" if floor_s else ""
        print(f"   {label:<56} {seconds:7.3f} s{ratio}   ({found} changes)")

    for model in ("mean", "trend", "meanvar"):
        kernel(f"kernel change_points(model='{model}')", batches, model)
    worst = [Ragged(np.random.default_rng(1).standard_normal(b.values.size), b.offsets) for b in batches]
    kernel("mean on pure noise (no change: PELT's worst case)", worst, "mean")


def one_change(lengths: list[int], repeat: int) -> None:
    print("3. one series with one level shift (1 sigma) in the middle, 'mean', BIC penalty")
    for n in lengths:
        rng = np.random.default_rng(1)
        x = rng.standard_normal(n) + 1.0 * (np.arange(n) >= n // 2)
        batch = Ragged.from_list([x])
        found = [int(v) for v in changepoint.change_points(batch).values]
        seconds = median_seconds(lambda b=batch: changepoint.change_points(b), repeat)
        print(f"   {n:>10,} points   {seconds:7.3f} s   {seconds / n * 1e9:6.0f} ns/point   changes at {found}")


def pelt_search(x: np.ndarray, model: str, functional: bool) -> np.ndarray:
    """The kernel's sums and search for one series without gaps, BIC penalty; the last-segment starts."""
    spec = changepoint.MODELS[model]
    m = len(x)
    stats = np.empty((changepoint.MAX_STATS, m + 1))
    lowest, highest, total = changepoint._present(x, 0, m)[4:]
    changepoint._prepare(spec.code, x, np.arange(m, dtype=np.int64), m, lowest, highest, total, stats)
    last = np.empty(m + 1, dtype=np.int64)
    changepoint._pelt(
        spec.code,
        spec.n_stats,
        stats,
        m,
        spec.params_per_change * math.log(m),
        np.empty(m + 1),
        False,
        2,
        np.empty(m + 1),
        last,
        np.empty(m + 1),
        np.empty((changepoint.MAX_STATS, m + 1)),
        np.empty(m + 1),
        np.empty(m + 1),
        np.empty(m + 1),
        np.empty((changepoint._BOX_ROWS, m + 1)),
        functional,
    )
    return last


def calm(n: int, longer: list[int], repeat: int, old_repeat: int) -> None:
    print("4. one series with one level shift (1 sigma) in the middle, BIC penalty: pruning vs plain PELT")
    for model in ("meanvar", "trend"):
        rng = np.random.default_rng(1)
        x = rng.standard_normal(n) + 1.0 * (np.arange(n) >= n // 2)
        same = np.array_equal(pelt_search(x, model, True), pelt_search(x, model, False))
        runs = {
            "pruned": lambda x=x, model=model: pelt_search(x, model, True),
            "plain": lambda x=x, model=model: pelt_search(x, model, False),
        }
        times = interleaved(runs, old_repeat)
        pruned = statistics.median(times["pruned"] + [timed(runs["pruned"]) for _ in range(repeat - old_repeat)])
        plain = statistics.median(times["plain"])
        found = [int(v) for v in changepoint.change_points(Ragged.from_list([x]), model).values]
        print(f"   '{model}' {n:,} points: same search result {same}; changes at {found}")
        print(f"      geometric pruning {pruned:8.3f} s   plain PELT {plain:8.3f} s   ratio {plain / pruned:,.0f}x")
        for n_long in longer:
            batch = Ragged.from_list([rng.standard_normal(n_long) + 1.0 * (np.arange(n_long) >= n_long // 2)])
            seconds = median_seconds(lambda b=batch, model=model: changepoint.change_points(b, model), repeat)
            found = [int(v) for v in changepoint.change_points(batch, model).values]
            print(
                f"      {n_long:,} points: {seconds:.3f} s ({seconds / n_long * 1e9:.0f} ns/point), changes at {found}"
            )


def against_mean(other, rows: int, repeat: int) -> None:
    from benchmarks.data import seasonal

    print(f"7. 'mean', BIC, {rows:,} rows of 1,000 points, the copy against this tree (CPU time, medians of {repeat})")
    noise = np.random.default_rng(9).standard_normal((rows, 1000))
    for label, values in (("seasonal", seasonal(rows, 1000)), ("white noise", noise)):
        batch = Ragged.from_list(list(values))
        modules = {"other": other, "this": changepoint}
        same = np.array_equal(other.change_points(batch).values, changepoint.change_points(batch).values)
        for step in ("_run", "change_points"):
            cpu = {name: [] for name in modules}
            for _ in range(repeat):
                for name, module in modules.items():
                    spec = module.MODELS["mean"]
                    start = time.process_time()
                    if step == "_run":
                        module._run(batch, spec, module._BIC, 0.0, 2, None, True)
                    else:
                        module.change_points(batch)
                    cpu[name].append(time.process_time() - start)
            before, after = statistics.median(cpu["other"]), statistics.median(cpu["this"])
            scale, unit = (1e6 / rows, "us/row") if step == "_run" else (1.0, "s")
            print(
                f"   {label:<12} {step:<14} other {before * scale:8.3f} {unit}   this {after * scale:8.3f} {unit}"
                f"   ratio {before / after:5.2f}   same answers {same}"
            )


def against(path: str, lengths: list[int], repeat: int, rows: int) -> None:
    other = load_module(path, "changepoint_against")
    against_mean(other, rows, repeat)
    print(f"7. 'meanvar' and 'trend', one level shift (1 sigma) in the middle, BIC: {path} against this tree")
    for n in lengths:
        rng = np.random.default_rng(1)
        batch = Ragged.from_list([rng.standard_normal(n) + 1.0 * (np.arange(n) >= n // 2)])
        for model in ("meanvar", "trend"):
            for module in (other, changepoint):  # compile or load before timing
                module.change_points(Ragged.from_list([np.arange(50.0) % 7]), model)
            cpu = {"other": [], "this": []}
            answers = {}
            for _ in range(repeat):
                for name, module in (("other", other), ("this", changepoint)):
                    start = time.process_time()
                    answers[name] = module.change_points(batch, model).values
                    cpu[name].append(time.process_time() - start)
            same = np.array_equal(answers["other"], answers["this"])
            before, after = statistics.median(cpu["other"]), statistics.median(cpu["this"])
            print(
                f"   '{model}' {n:>10,} points   other {before:7.3f} s   this {after:7.3f} s   "
                f"ratio {before / after:5.2f}   same answer {same}"
            )


def profile(rows: int, points: int, repeat: int) -> None:
    from benchmarks.data import seasonal

    batch = Ragged.from_list(list(seasonal(rows, points)))
    spec = changepoint.MODELS["mean"]

    def first():
        return changepoint._run(batch, spec, changepoint._BIC, 0.0, 2, None, True)

    _, _, _, row_ok, residual = first()
    periods = changepoint._periods(batch, residual, row_ok, "auto")
    cyclic, adjusted = changepoint._remove_cycles(batch, residual, periods)
    steps = {
        "first segmentation (with residuals)": first,
        "periods (cycle_test below the level)": lambda: changepoint._periods(batch, residual, row_ok, "auto"),
        "cycles' fit": lambda: changepoint._remove_cycles(batch, residual, periods),
        "the spread that follows a cycle": lambda: changepoint._steady_spread(adjusted, periods[cyclic], spec.code),
        "the penalty's factor for the cycle": lambda: changepoint._cycle_factor(adjusted, periods[cyclic], spec.code),
        "second segmentation (rows with a cycle)": lambda: changepoint._run(
            adjusted, spec, changepoint._BIC, 0.0, 2, None
        ),
        "the whole change_points call": lambda: changepoint.change_points(batch),
        "change_points(seasonal='none')": lambda: changepoint.change_points(batch, seasonal="none"),
    }
    cpu = {name: [] for name in steps}
    for _ in range(repeat):
        for name, fn in steps.items():
            start = time.process_time()
            fn()
            cpu[name].append(time.process_time() - start)
    whole = statistics.median(cpu["the whole change_points call"])
    cyclic = int(np.isfinite(periods).sum())
    print(f"5. change_points' default path on {rows:,} x {points:,} seasonal rows ({cyclic:,} with a cycle)")
    for name, seconds in cpu.items():
        s = statistics.median(seconds)
        print(f"   {name:<44} {s:7.3f} s CPU  {s / whole:6.1%}  ({s / rows * 1e6:6.1f} us/row)")


def mean_search(rows: int, repeat: int) -> None:
    from unittest import mock

    m = 1000
    noise = np.random.default_rng(6).standard_normal((rows, m))
    spec = changepoint.MODELS["mean"]

    def search_args(x: np.ndarray) -> tuple:
        stats = np.empty((changepoint.MAX_STATS, m + 1))
        work = np.empty(2 * m)
        index = np.empty(2 * m, dtype=np.int64)
        p = np.arange(m, dtype=np.int64)
        scale = changepoint._prepare(spec.code, x, p, m, *changepoint._present(x, 0, m)[4:], stats)
        factor = changepoint._noise_factor(spec.code, x, m, scale, work, index)
        beta = spec.params_per_change * math.log(m) * factor
        sums = (stats, m, beta, np.zeros(m + 1), False, 2)
        # F, last, starts, candidates' sums, F of the starts, until, values, bounds
        buffers = (np.empty(m + 1), np.empty(m + 1, dtype=np.int64), np.empty(m + 1))
        buffers += (np.empty((changepoint.MAX_STATS, m + 1)), np.empty(m + 1), np.empty(m + 1), np.empty(m + 1))
        return (spec.code, spec.n_stats, *sums, *buffers, np.empty((changepoint._BOX_ROWS, m + 1)))

    searches = [search_args(x) for x in noise]

    def run(functional: bool) -> list[np.ndarray]:
        for a in searches:
            changepoint._pelt(*a, functional)
        return [a[9].copy() for a in searches]

    same = all(np.array_equal(a, b) for a, b in zip(run(True), run(False)))
    times = interleaved({"fpop": lambda: run(True), "pelt": lambda: run(False)}, repeat)
    fpop, pelt = (statistics.median(times[k]) / rows for k in ("fpop", "pelt"))
    costed = 0
    count_rows = 3
    cost = changepoint._cost_mean_one

    def counting(*args):
        nonlocal costed
        costed += 1
        return cost(*args)

    for a in searches[:count_rows]:
        code, n_stats, stats, m_, beta, length_term, use, min_size, F, last = a[:10]
        with mock.patch.object(changepoint, "_cost_mean_one", counting):
            F[0] = -beta
            changepoint._fpop.py_func(stats, m_, beta, length_term, use, min_size, F, last, *a[10:12], a[12], a[15])
    batch = Ragged.from_list(list(noise))
    whole = median_seconds(lambda: changepoint.change_points(batch, seasonal="none"), repeat) / rows
    print(f"6. the 'mean' search on {rows} rows of {m:,} points of white noise, default penalty, min_size 2")
    print(f"   same starts as plain PELT: {same}")
    print(f"   FPOP       {fpop * 1e6:7.1f} us/row  {fpop / m * 1e9:5.0f} ns/step")
    print(f"   plain PELT {pelt * 1e6:7.1f} us/row  {pelt / m * 1e9:5.0f} ns/step   ({pelt / fpop:.1f}x FPOP)")
    print(f"   FPOP costs {costed / (count_rows * (m - 1)):.2f} starts per step (the kept ones and the newest)")
    print(f"   change_points(seasonal='none') {whole * 1e6:7.1f} us/row")


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--n", type=int, default=3000)
    parser.add_argument("--series", type=int, default=4000)
    parser.add_argument("--points", type=int, default=500)
    parser.add_argument("--long", default="1000000,3000000", help="comma-separated lengths for part 3")
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--calm", type=int, default=100000, help="length for part 4 (0: skip)")
    parser.add_argument("--calm-long", default="300000,1000000", help="longer lengths for part 4, pruning only")
    parser.add_argument("--old-repeat", type=int, default=3, help="runs of plain PELT in part 4")
    parser.add_argument("--parts", default="1,2,3,4,5,6")
    parser.add_argument("--against", default="", help="part 7: a copy of changepoint.py to time against")
    parser.add_argument("--against-lengths", default="100000,300000,1000000", help="lengths for part 7")
    parser.add_argument("--ruptures-repeat", type=int, default=3)
    parser.add_argument("--profile-rows", type=int, default=2000, help="rows for part 5")
    parser.add_argument("--profile-points", type=int, default=1000, help="points per row for part 5")
    parser.add_argument("--search-rows", type=int, default=300, help="rows for part 6")
    args = parser.parse_args()
    start = time.perf_counter()
    changepoint.change_points(Ragged.from_list([np.arange(10.0) % 3]))
    print(f"first call (numba: load from cache, or compile): {time.perf_counter() - start:.2f} s")
    parts = set(args.parts.split(","))
    if "1" in parts:
        single_series(args.n, max(args.repeat, 21), args.ruptures_repeat)
    if "2" in parts:
        many_series(args.series, args.points, args.repeat)
    if "3" in parts:
        one_change([int(v) for v in args.long.split(",") if v], args.repeat)
    if "4" in parts and args.calm:
        calm(args.calm, [int(v) for v in args.calm_long.split(",") if v], args.repeat, args.old_repeat)
    if "5" in parts:
        profile(args.profile_rows, args.profile_points, args.repeat)
    if "6" in parts:
        mean_search(args.search_rows, args.repeat)
    if args.against:
        against(args.against, [int(v) for v in args.against_lengths.split(",") if v], args.repeat, args.profile_rows)


if __name__ == "__main__":
    main()
