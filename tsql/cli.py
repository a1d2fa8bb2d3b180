"""The ``seriesql`` command (``python -m tsql`` runs it too)."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from tsql import __version__
from tsql.reference import describe, find_function, function_list, markdown_table, unknown_function


def _functions(args: argparse.Namespace) -> int:
    if args.markdown:
        print(markdown_table())
        return 0
    if args.name:
        fn = find_function(args.name)
        if fn is None:
            print(f"seriesql functions: {unknown_function(args.name, '`seriesql functions`')}", file=sys.stderr)
            return 2
        print(describe(fn))
        return 0
    print(function_list())
    return 0


def _shell(args: argparse.Namespace) -> int:
    from tsql.shell import main as shell

    return shell(args.database, read_only=args.read_only, create=args.create)


def _run_scripts(args: argparse.Namespace) -> int:
    from tsql.pipeline import UsageError, parse_params, run

    try:
        return run(
            args.files,
            args.db,
            out=args.out,
            replace=args.replace,
            params=parse_params(args.param),
            read_only=args.read_only,
            create=args.create,
        )
    except UsageError as error:
        print(f"seriesql run: {error}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("seriesql run: interrupted", file=sys.stderr)
        return 130


def _demo(args: argparse.Namespace) -> int:
    from tsql.demo import main as demo

    try:
        return demo(args.db)
    except KeyboardInterrupt:
        print("seriesql demo: interrupted", file=sys.stderr)
        return 130


def _plot(args: argparse.Namespace) -> int:
    from tsql.plot import main as plot

    sql = args.sql
    if args.sql_file is not None:
        try:
            sql = Path(args.sql_file).expanduser().read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as error:
            reason = getattr(error, "strerror", None) or error
            print(f"seriesql plot: cannot read {args.sql_file}: {reason}", file=sys.stderr)
            return 2
    try:
        return plot(
            sql,
            args.out,
            db=args.db,
            marks=args.marks,
            smooth=args.smooth,
            harmonics=args.harmonics,
            period=args.period,
            title=args.title,
            replace=args.replace,
        )
    except KeyboardInterrupt:
        print("seriesql plot: interrupted", file=sys.stderr)
        return 130


def _report(args: argparse.Namespace) -> int:
    from tsql.reporting import main as report

    try:
        return report(
            args.database,
            args.table,
            args.query,
            series=args.series,
            time=args.time,
            value=args.value,
            out=args.out,
            level=args.level,
            model=args.model,
            details=args.details,
            replace=args.replace,
        )
    except KeyboardInterrupt:
        print("seriesql report: interrupted", file=sys.stderr)
        return 130


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="seriesql", description="Time-series diagnostics as SQL functions over DuckDB."
    )
    parser.add_argument("--version", action="version", version=f"seriesql {__version__}")
    commands = parser.add_subparsers(dest="command", required=True)
    listing = commands.add_parser("functions", help="list the functions, or describe one")
    listing.add_argument("name", nargs="?", help="a function name")
    listing.add_argument("--markdown", action="store_true", help="print the README's function table")
    listing.set_defaults(run=_functions)
    shell = commands.add_parser("shell", help="an interactive SQL session with every function registered")
    shell.add_argument("database", nargs="?", default=":memory:", help="a DuckDB file (default: in memory)")
    shell.add_argument("--read-only", action="store_true", help="open the database read-only")
    shell.add_argument("--create", action="store_true", help="make the database file if it does not exist")
    shell.set_defaults(run=_shell)
    script = commands.add_parser("run", help="run SQL files in order, as a pipeline step")
    script.add_argument("files", nargs="+", metavar="FILE.sql", help="SQL files, run in the order given")
    script.add_argument("--db", default=":memory:", metavar="DATABASE", help="a DuckDB file (default: in memory)")
    script.add_argument(
        "--read-only",
        action="store_true",
        help="open the database read-only: a run that only reads can share the file with other read-only processes",
    )
    script.add_argument("--create", action="store_true", help="make the database file if it does not exist")
    script.add_argument("--out", metavar="RESULT", help="write the last result to a .csv, .parquet, .json or .jsonl")
    script.add_argument("--replace", action="store_true", help="let --out overwrite an existing file")
    script.add_argument(
        "--param", action="append", default=[], metavar="NAME=VALUE", help="a value for $NAME in the SQL (repeatable)"
    )
    script.set_defaults(run=_run_scripts)
    demo = commands.add_parser("demo", help="five questions asked of the sample warehouse, with the planted answers")
    demo.add_argument(
        "--db", metavar="PATH", help="where to keep the sample warehouse (default: a file in your cache folder)"
    )
    demo.set_defaults(run=_demo)
    picture = commands.add_parser(
        "plot",
        help="draw a query's series as a PNG or SVG picture",
        description=(
            "Draw the series of a query, one line each. The query returns a time, a value and optionally a "
            "series column: named time, value and series, or told apart by type (the text column is the "
            "series, the DATE or TIMESTAMP column the time). Needs matplotlib: pip install 'seriesql[plot]'."
        ),
        epilog=(
            "example: seriesql plot --db shop.duckdb --out sales.png --smooth "
            "--sql \"SELECT item, month, units FROM monthly_sales WHERE item IN ('SKU-0006', 'SKU-2056')\""
        ),
    )
    query = picture.add_mutually_exclusive_group(required=True)
    query.add_argument("--sql", metavar="QUERY", help="rows of (time, value) or (time, value, series)")
    query.add_argument("--sql-file", metavar="FILE.sql", help="read the query from a file")
    picture.add_argument("--out", required=True, metavar="PICTURE", help="a .png or .svg file to write")
    picture.add_argument("--db", default=":memory:", metavar="DATABASE", help="a DuckDB file, opened read-only")
    picture.add_argument(
        "--marks", metavar="QUERY", help="times for dotted vertical lines: rows of (time) or (series, time)"
    )
    picture.add_argument("--smooth", action="store_true", help="overlay each series' harmonic_smooth_agg curve")
    picture.add_argument("--harmonics", type=int, default=3, metavar="N", help="harmonics of --smooth (default 3)")
    picture.add_argument(
        "--period",
        metavar="SPAN",
        help="period of --smooth: '1 day', '1 year' or a number of steps (default: each series' dominant period)",
    )
    picture.add_argument("--title", metavar="TEXT", help="a title above the picture")
    picture.add_argument("--replace", action="store_true", help="let --out overwrite an existing file")
    picture.set_defaults(run=_plot)
    page = commands.add_parser(
        "report",
        help="screen every series of a table and write one self-contained HTML page",
        description=(
            "Screen every series of a table (cycles, trends, change points, look-alike groups, expected load) "
            "and write one HTML file that opens offline: overview, a sortable table, charts of the flagged "
            "series, and the SQL of each section. Needs plotly: pip install 'seriesql[report]'."
        ),
        epilog=(
            "example: seriesql report shop.duckdb --table monthly_sales --series item --time month "
            "--value units --out sales.html"
        ),
    )
    page.add_argument("database", help="a DuckDB file, opened read-only")
    source = page.add_mutually_exclusive_group(required=True)
    source.add_argument("--table", metavar="T", help="the table (or view) to screen")
    source.add_argument("--query", metavar="SQL", help="a query to screen instead of a table")
    page.add_argument("--series", required=True, metavar="COL", help="the column naming each series")
    page.add_argument("--time", required=True, metavar="COL", help="the time column (DATE, TIMESTAMP or a number)")
    page.add_argument("--value", required=True, metavar="COL", help="the value column")
    page.add_argument("--out", default="report.html", metavar="PAGE", help="the .html file (default report.html)")
    page.add_argument("--level", type=float, default=0.05, help="false-discovery level of the q-values (default 0.05)")
    page.add_argument(
        "--model", default="mean", choices=("mean", "meanvar", "trend"), help="change-point model (default mean)"
    )
    page.add_argument("--details", type=int, default=24, metavar="N", help="flagged series drawn in full (default 24)")
    page.add_argument("--replace", action="store_true", help="let --out overwrite an existing file")
    page.set_defaults(run=_report)
    args = parser.parse_args(argv)
    return args.run(args)


if __name__ == "__main__":
    sys.exit(main())
