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
    width = max(len(f.name) for f in FUNCTIONS)
    for fn in FUNCTIONS:
        print(f"{fn.name:<{width}}  {fn.doc}")
    return 0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="tsql", description="Time-series diagnostics as SQL functions over DuckDB.")
    parser.add_argument("--version", action="version", version=f"tsql {__version__}")
    commands = parser.add_subparsers(dest="command", required=True)
    listing = commands.add_parser("functions", help="list the functions, or describe one")
    listing.add_argument("name", nargs="?", help="a function name")
    listing.add_argument("--markdown", action="store_true", help="print the README's function table")
    listing.set_defaults(run=_functions)
    args = parser.parse_args(argv)
    return args.run(args)


if __name__ == "__main__":
    sys.exit(main())
