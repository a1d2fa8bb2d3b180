"""``tsql run``: SQL scripts as a pipeline step, and the statement splitter the shell shares.

Statements run one at a time, in file order, on one connection with every
tsql function registered. The first failure stops the run with
``file:line: message``. Command-line parameters are bound as values of
DuckDB named parameters (``$name``), never pasted into the SQL text.
"""

from __future__ import annotations

import bisect
import re
import shutil
import sys
from dataclasses import dataclass
from pathlib import Path

import duckdb

from tsql.render import error_message, format_arrow

MAX_ROWS = 40
FORMATS = {
    ".csv": "FORMAT csv, HEADER true",
    ".parquet": "FORMAT parquet",
    ".json": "FORMAT json, ARRAY true",
    ".jsonl": "FORMAT json",
    ".ndjson": "FORMAT json",
}
"""COPY options by file extension, for ``tsql run --out`` and the shell's ``:save``."""

_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
_DOLLAR_TAG = re.compile(r"\$(?:[A-Za-z_][A-Za-z0-9_]*)?\$")


class UsageError(Exception):
    """A mistake in how the command was called (exit code 2), not in the SQL."""


@dataclass(frozen=True)
class Statement:
    """One SQL statement: its text from its first token up to (not including) the closing ``;``."""

    text: str
    line: int
    """1-based line of the statement's first token."""
    complete: bool
    """Closed by a ``;`` (only the last statement of a text can be open)."""


def split_statements(text: str) -> list[Statement]:
    """Split SQL text at the semicolons that end statements.

    A ``;`` inside a quoted string or identifier, a dollar-quoted string, a
    ``--`` comment or a (nested) ``/* */`` comment does not end a statement.
    Empty statements and comment-only stretches are dropped. A trailing
    statement without ``;``, or text ending inside a string or comment, is
    returned with ``complete=False``.
    """
    newlines = [i for i, c in enumerate(text) if c == "\n"]
    statements: list[Statement] = []
    start: int | None = None
    i, n = 0, len(text)
    while i < n:
        c = text[i]
        if c == ";":
            if start is not None:
                statements.append(Statement(text[start:i].rstrip(), bisect.bisect(newlines, start) + 1, True))
            start = None
            i += 1
        elif c.isspace():
            i += 1
        elif text.startswith("--", i):
            end = text.find("\n", i)
            i = n if end < 0 else end
        else:
            end = _end_of_block(text, i) if text.startswith("/*", i) else None
            if end is None:  # not a comment: code starts here
                start = i if start is None else start
                end = _end_of_token(text, i)
            elif end > n and start is None:  # an unterminated comment
                start = i
            i = end
    if start is not None:
        statements.append(Statement(text[start:].rstrip(), bisect.bisect(newlines, start) + 1, False))
    return statements


def _end_of_block(text: str, i: int) -> int:
    """Index after the ``*/`` closing the comment at ``i`` (nested comments count); past the end if unclosed."""
    depth = 0
    while i < len(text):
        if text.startswith("/*", i):
            depth, i = depth + 1, i + 2
        elif text.startswith("*/", i):
            depth, i = depth - 1, i + 2
            if depth == 0:
                return i
        else:
            i += 1
    return len(text) + 1


def _end_of_token(text: str, i: int) -> int:
    """Index after the quoted string or identifier starting at ``i``, or ``i + 1`` for any other character."""
    c = text[i]
    before = text[i - 1] if i else " "
    if c in "'\"":
        backslash = c == "'" and before in "eE" and (i < 2 or not _is_word(text[i - 2]))
        j = i + 1
        while j < len(text):
            if backslash and text[j] == "\\":
                j += 2
            elif text[j] == c:
                if not text.startswith(c, j + 1):  # a doubled quote stands for itself
                    return j + 1
                j += 2
            else:
                j += 1
        return len(text) + 1
    if c == "$" and not _is_word(before):
        tag = _DOLLAR_TAG.match(text, i)
        if tag:
            close = text.find(tag.group(), tag.end())
            return len(text) + 1 if close < 0 else close + len(tag.group())
    return i + 1


def _is_word(c: str) -> bool:
    return c.isalnum() or c in "_$"


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


def write_result(
    con: duckdb.DuckDBPyConnection, query: str, path: str | Path, params: dict[str, str] | None = None
) -> int:
    """Write the result of ``query`` to ``path`` with DuckDB's COPY; returns the number of rows written."""
    literal = "'" + str(path).replace("'", "''") + "'"
    # The newline ends a trailing -- comment in the query before the closing parenthesis.
    copy = f"COPY (\n{query}\n) TO {literal} ({out_options(path)})"
    return con.execute(copy, params or None).fetchall()[0][0]


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
        print(f"tsql run: warning: --param {name} is not used by any statement", file=sys.stderr)
    return steps


def run(
    files: list[str],
    database: str = ":memory:",
    out: str | None = None,
    replace: bool = False,
    params: dict[str, str] | None = None,
) -> int:
    """Run the statements of ``files`` in order; show or write the last one's result.

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
    from tsql.binding import connect

    try:
        con = connect(database)
    except duckdb.Error as error:
        raise UsageError(str(error)) from None
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
                    print(f"tsql run: wrote {rows:,} row{'' if rows == 1 else 's'} to {out}", file=sys.stderr)
                else:
                    relation = con.sql(text, params=values)
                    table = relation.to_arrow_table() if relation is not None else None
                    if table is not None and (table.num_rows or is_query(text)):
                        print(format_arrow(table, shutil.get_terminal_size().columns, MAX_ROWS))
            except Exception as error:  # a DuckDB error, or one raised inside a tsql function
                print(f"{step.path}:{step.statement.line}: {error_message(error)}", file=sys.stderr)
                return 1
    return 0
