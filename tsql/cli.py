"""The ``tsql`` command."""

from __future__ import annotations

import argparse
import sys

from tsql import __version__
from tsql.registry import BY_NAME, FUNCTIONS, Function, markdown_table


def describe(fn: Function) -> str:
    lines = [fn.signature, f"  {fn.doc}", f"  returns {fn.returns}; NULL for: {fn.null_rows}"]
    for p in fn.params:
        if p.help:
            lines.append(f"  {p.name}: {p.help}")
    if fn.aggregate:
        lines.append(f"  aggregate form: {fn.agg_signature}")
    lines.append(f"  example: {fn.example}")
    return "\n".join(lines)


def _functions(args: argparse.Namespace) -> int:
    if args.markdown:
        print(markdown_table())
        return 0
    if args.name:
        fn = BY_NAME.get(args.name.removesuffix("_agg"))
        if fn is None:
            print(f"tsql: no function named {args.name!r}; try `tsql functions`", file=sys.stderr)
            return 2
        print(describe(fn))
        return 0
    print(function_list())
    return 0


def function_list() -> str:
    """One line per function: its name and one-line doc."""
    width = max(len(f.name) for f in FUNCTIONS)
    return "\n".join(f"{fn.name:<{width}}  {fn.doc}" for fn in FUNCTIONS)


def _shell(args: argparse.Namespace) -> int:
    from tsql.shell import main as shell

    return shell(args.database, read_only=args.read_only)


def _run(args: argparse.Namespace) -> int:
    from tsql.pipeline import UsageError, parse_params, run

    try:
        return run(args.files, args.db, out=args.out, replace=args.replace, params=parse_params(args.param))
    except UsageError as error:
        print(f"tsql run: {error}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("tsql run: interrupted", file=sys.stderr)
        return 130


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="tsql", description="Time-series diagnostics as SQL functions over DuckDB.")
    parser.add_argument("--version", action="version", version=f"tsql {__version__}")
    commands = parser.add_subparsers(dest="command", required=True)
    listing = commands.add_parser("functions", help="list the functions, or describe one")
    listing.add_argument("name", nargs="?", help="a function name")
    listing.add_argument("--markdown", action="store_true", help="print the README's function table")
    listing.set_defaults(run=_functions)
    shell = commands.add_parser("shell", help="an interactive SQL session with every function registered")
    shell.add_argument("database", nargs="?", default=":memory:", help="a DuckDB file (default: in memory)")
    shell.add_argument("--read-only", action="store_true", help="open the database read-only")
    shell.set_defaults(run=_shell)
    script = commands.add_parser("run", help="run SQL files in order, as a pipeline step")
    script.add_argument("files", nargs="+", metavar="FILE.sql", help="SQL files, run in the order given")
    script.add_argument("--db", default=":memory:", metavar="DATABASE", help="a DuckDB file (default: in memory)")
    script.add_argument("--out", metavar="RESULT", help="write the last result to a .csv, .parquet, .json or .jsonl")
    script.add_argument("--replace", action="store_true", help="let --out overwrite an existing file")
    script.add_argument(
        "--param", action="append", default=[], metavar="NAME=VALUE", help="a value for $NAME in the SQL (repeatable)"
    )
    script.set_defaults(run=_run)
    args = parser.parse_args(argv)
    return args.run(args)


if __name__ == "__main__":
    sys.exit(main())
