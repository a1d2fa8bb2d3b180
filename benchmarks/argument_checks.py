"""What the macros' argument and type checks cost: each public macro against its bare UDF call, side by side.

    python -m benchmarks.argument_checks [--groups 20000] [--points 50] [--repeat 7]

The public macro checks its arguments (a check UDF whose answer DuckDB folds when the arguments are
constants; for an ``*_agg`` form it runs once per vector of groups, since it needs the time type) and the
type of the time column; the bare call skips all of it. Prints medians and the ratio, measured in one run.
"""

from __future__ import annotations

import argparse

import tsql
from benchmarks.harness import side_by_side

QUERIES = {
    "list form": (
        "SELECT g, acf(x, max_lag := 3) FROM lists",
        "SELECT g, __tsql_acf(x, 3) FROM lists",
    ),
    "agg form": (
        "SELECT g, acf_agg(v, t, max_lag := 3) FROM series GROUP BY g",
        "SELECT g, __tsql_acf_on_grid(list((__tsql_bits(__tsql_tick(t)) << 64) | __tsql_bits(v)), "
        "__tsql_time_type(t), __tsql_span(NULL), 'null', 'mean', 3) FROM series GROUP BY g",
    ),
}


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--groups", type=int, default=20_000)
    parser.add_argument("--points", type=int, default=50)
    parser.add_argument("--repeat", type=int, default=7)
    args = parser.parse_args()
    con = tsql.connect()
    con.execute(
        f"""CREATE TABLE series AS
            SELECT (i % {args.groups})::INTEGER AS g, (i // {args.groups})::INTEGER AS t,
                   sin(i * 0.001) + ((i * 7919) % 1000) / 1000.0 AS v
            FROM range({args.groups * args.points}) r(i)"""
    )
    con.execute("CREATE TABLE lists AS SELECT g, list(v ORDER BY t) AS x FROM series GROUP BY g")
    print(f"{args.groups} groups x {args.points} points, median of {args.repeat}")
    for form, (public, bare) in QUERIES.items():
        runs = {q: (lambda q=q: con.execute(q).fetchall()) for q in (public, bare)}
        for run in runs.values():
            run()  # warm up
        got = side_by_side(runs, args.repeat)
        ratio = got[public] / got[bare]
        print(f"  {form:<10} macro {got[public]:7.3f} s   bare UDF {got[bare]:7.3f} s   {ratio:5.2f}x")


if __name__ == "__main__":
    main()
