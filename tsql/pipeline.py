"""``seriesql run``: SQL scripts as a pipeline step.

Statements run one at a time, in file order, on one connection with every
tsql function registered. The first failure stops the run with
``file:line: message``. Command-line parameters are bound as values of
DuckDB named parameters (``$name``), never pasted into the SQL text.
"""

from __future__ import annotations

import os
import re
import shutil
import sys
from dataclasses import dataclass
from pathlib import Path

import duckdb

from tsql.render import error_message, format_arrow
from tsql.statements import Statement, split_statements

MAX_ROWS = 40
FORMATS = {
    ".csv": "FORMAT csv, HEADER true",
    ".parquet": "FORMAT parquet",
    ".json": "FORMAT json, ARRAY true",
    ".jsonl": "FORMAT json",
    ".ndjson": "FORMAT json",
}
"""COPY options by file extension, for ``seriesql run --out`` and the shell's ``:save``."""

_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


class UsageError(Exception):
    """A mistake in how the command was called (exit code 2), not in the SQL."""


def open_database(database: str, read_only: bool = False, create: bool = False) -> duckdb.DuckDBPyConnection:
    """Open ``database`` (a DuckDB file, or ``:memory:``) with every tsql function registered.

    A file that does not exist is made only when ``create`` is set, so a mistyped path stops with an
    error instead of becoming an empty database. DuckDB lets several processes open a file read-only
    at once, but a process that opens it for writing has it alone; a lock held elsewhere is explained
    with what to do. Raises :class:`UsageError` with a message for the user.
    """
    from tsql.binding import connect

    if database != ":memory:":
        path = Path(database).expanduser()
        if path.is_dir():
            raise UsageError(f"{database} is a folder, not a database file")
        if not path.exists():
            if read_only:
                raise UsageError(f"no database at {database}; --read-only opens an existing file (check the path)")
            if not create:
                raise UsageError(f"no database at {database}; check the path, or pass --create to make a new one")
        database = str(path)
    try:
        return connect(database, read_only=read_only)
    except duckdb.Error as error:
        message = str(error).strip()
        if "Could not set lock" not in message:
            raise UsageError(f"cannot open {database}: {message.splitlines()[0]}") from None
        pid = re.search(r"\(PID (\d+)\)", message)
        who = f"another process (PID {pid[1]})" if pid else "another process"
        if not read_only and "read-only mode" in message:  # the other process reads only
            raise UsageError(
                f"{database} is open read-only in {who}; pass --read-only if this only reads "
                "(read-only processes can share a file), or close that process first"
            ) from None
        raise UsageError(
            f"{database} is open for writing in {who}; close it there first (a file one process writes "
            "cannot be opened by another, not even read-only), or open both with --read-only"
        ) from None


def parse_params(pairs: list[str]) -> dict[str, str]:
    """``name=value`` strings from the command line as a dict; the value is everything after the first ``=``."""
    params: dict[str, str] = {}
    for pair in pairs:
        name, equals, value = pair.partition("=")
        if not equals or not _NAME.fullmatch(name):
            raise UsageError(f"--param wants NAME=VALUE with NAME a plain identifier, got {pair!r}")
        if name in params:
            raise UsageError(f"--param {name} is given twice")
        params[name] = value
    return params


def out_options(path: str | Path) -> str:
    """The COPY options for a result file, chosen by its extension."""
    options = FORMATS.get(Path(path).suffix.lower())
    if options is None:
        raise UsageError(f"cannot tell the format of {str(path)!r}: use one of {', '.join(FORMATS)}")
    return options


def quote_name(name: str) -> str:
    """A column or table name as a quoted SQL identifier."""
    return '"' + name.replace('"', '""') + '"'


def output_path(out: str | os.PathLike, replace: bool, suffixes: tuple[str, ...], name: str = "--out") -> Path:
    """The file a command writes; ``ValueError`` (the user's message, the argument called ``name``) for another
    extension, a missing folder, a folder, or an existing file unless ``replace``."""
    path = Path(out).expanduser()
    if path.suffix.lower() not in suffixes:
        raise ValueError(f"{name} must end in {' or '.join(suffixes)}, got {str(path)!r}")
    if not path.parent.is_dir():
        raise ValueError(f"folder {str(path.parent)!r} does not exist")
    if path.is_dir():
        raise ValueError(f"{path} is a folder")
    if path.exists() and not replace:
        raise ValueError(f"{path} exists; pass --replace to overwrite it")
    return path


def partial_path(path: Path) -> Path:
    """A hidden file beside ``path`` to write into, renamed to ``path`` once complete."""
    return path.with_name(f".{path.name}.{os.getpid()}.partial{path.suffix}")


def write_result(
    con: duckdb.DuckDBPyConnection, query: str, path: str | Path, params: dict[str, str] | None = None
) -> int:
    """Write the result of ``query`` to ``path`` with DuckDB's COPY; returns the number of rows written.

    The rows go to a hidden file beside ``path`` first, renamed to ``path`` once complete, so a query
    that fails (or a run that is stopped) leaves no partial ``path`` behind.
    """
    path = Path(path)
    partial = partial_path(path)
    literal = "'" + str(partial).replace("'", "''") + "'"
    # The newline ends a trailing -- comment in the query before the closing parenthesis.
    copy = f"COPY (\n{query}\n) TO {literal} ({out_options(path)})"
    try:
        rows = con.execute(copy, params or None).fetchall()[0][0]
        os.replace(partial, path)
    except BaseException:
        partial.unlink(missing_ok=True)
        raise
    return rows


def _statement_info(text: str) -> tuple[set[str], duckdb.StatementType | None]:
    """The named parameters a statement uses and its kind, as DuckDB's parser sees them."""
    try:
        parsed = duckdb.extract_statements(text)
    except duckdb.Error:  # a syntax error shows when the statement runs, with its line
        return set(), None
    names = set().union(*(s.named_parameters for s in parsed))
    return names, parsed[0].type if len(parsed) == 1 else None


def is_query(text: str) -> bool:
    """Whether a statement is a query (its result is worth showing even when empty)."""
    return _statement_info(text)[1] == duckdb.StatementType.SELECT


@dataclass(frozen=True)
class _Step:
    path: str
    statement: Statement
    params: dict[str, str]


def _plan(files: list[str], params: dict[str, str]) -> list[_Step]:
    steps, used = [], set()
    for path in files:
        try:
            text = Path(path).read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as error:
            reason = error.strerror if isinstance(error, OSError) and error.strerror else str(error)
            raise UsageError(f"cannot read {path}: {reason}") from None
        for statement in split_statements(text):
            names, _ = _statement_info(statement.text)
            missing = sorted(names - params.keys())
            if missing:
                raise UsageError(
                    f"{path}:{statement.line}: no value for ${missing[0]}; give it with --param {missing[0]}=VALUE"
                )
            used |= names
            steps.append(_Step(path, statement, {k: params[k] for k in sorted(names)}))
    if not steps:
        raise UsageError(f"no SQL statements in {', '.join(files)}")
    for name in params.keys() - used:
        print(f"seriesql run: warning: --param {name} is not used by any statement", file=sys.stderr)
    return steps


def run(
    files: list[str],
    database: str = ":memory:",
    out: str | None = None,
    replace: bool = False,
    params: dict[str, str] | None = None,
    read_only: bool = False,
    create: bool = False,
) -> int:
    """Run the statements of ``files`` in order; show or write the last one's result.

    ``read_only`` opens the database read-only (the run may then share the file with other
    read-only processes, such as ``seriesql shell PATH --read-only``); ``create`` lets a
    database file that does not exist be made.

    Returns 0 on success and 1 when a statement fails; raises :class:`UsageError`
    for mistakes found before any SQL runs (unreadable file, a parameter with
    no value, an ``--out`` file that exists or has an unknown extension).
    """
    steps = _plan(files, params or {})
    last = steps[-1]
    if out is not None:
        out_options(out)
        if Path(out).exists() and not replace:
            raise UsageError(f"{out} exists; pass --replace to overwrite it")
        if _statement_info(last.statement.text)[1] not in (duckdb.StatementType.SELECT, None):
            raise UsageError(f"{last.path}:{last.statement.line}: --out needs the last statement to be a query")
    con = open_database(database, read_only=read_only, create=create)
    if sys.stdout.isatty():
        con.execute("SET enable_progress_bar = true")
    with con:
        for step in steps:
            text, values = step.statement.text, step.params or None
            try:
                if step is not last:
                    con.execute(text, values)
                    con.complete()  # run it to the end without fetching its rows
                elif out is not None:
                    rows = write_result(con, text, out, values)
                    print(f"seriesql run: wrote {rows:,} row{'' if rows == 1 else 's'} to {out}", file=sys.stderr)
                else:
                    relation = con.sql(text, params=values)
                    table = relation.to_arrow_table() if relation is not None else None
                    if table is not None and (table.num_rows or is_query(text)):
                        print(format_arrow(table, shutil.get_terminal_size().columns, MAX_ROWS))
            except Exception as error:  # a DuckDB error, or one raised inside a tsql function
                print(f"{step.path}:{step.statement.line}: {error_message(error)}", file=sys.stderr)
                return 1
    return 0
