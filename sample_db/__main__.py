"""``python -m tsql.sample_db [PATH]``: build the sample warehouse and print its row counts."""

from __future__ import annotations

import argparse
import sys

import duckdb

from . import TABLES, NotASampleWarehouse, build, default_path


def main(argv: list[str] | None = None) -> int:
    """Build the warehouse at PATH (default: the user's cache folder); print the path and row counts."""
    parser = argparse.ArgumentParser(prog="python -m tsql.sample_db", description="Build the tsql sample warehouse.")
    parser.add_argument("path", nargs="?", help=f"where to write it (default: {default_path()})")
    args = parser.parse_args(argv)
    try:
        path = build(args.path or default_path())
    except NotASampleWarehouse as error:
        print(error, file=sys.stderr)
        return 2
    except (OSError, duckdb.Error) as error:
        print(f"tsql.sample_db: {error}", file=sys.stderr)
        return 2
    print(path)
    with duckdb.connect(str(path), read_only=True) as con:
        for name in TABLES:
            (count,) = con.execute(f"SELECT count(*) FROM {name}").fetchall()[0]
            print(f"  {name:<16} {count:>9,} rows")
    return 0


if __name__ == "__main__":
    sys.exit(main())
