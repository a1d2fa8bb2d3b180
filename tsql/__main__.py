"""``python -m tsql``: the ``seriesql`` command, for when the console script is not on PATH."""

from tsql.cli import main

if __name__ == "__main__":
    raise SystemExit(main())
