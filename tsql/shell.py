"""``seriesql shell``: an interactive SQL session with every tsql function registered.

Statements end with ``;`` and may span lines. Lines starting with ``:`` are the
shell's own commands (``:help`` lists them). Queries run in a worker thread
while a SIGINT handler turns Ctrl-C into :func:`tsql.interrupt`, so a cancelled
query ends (also in the middle of one long tsql function call) and the session
goes on.
"""

from __future__ import annotations

import os
import shutil
import signal
import sys
import threading
import time
from pathlib import Path
from types import ModuleType

import duckdb
import pyarrow as pa

from tsql import __version__
from tsql.binding import interrupt, was_interrupted
from tsql.pipeline import UsageError, is_query, open_database, out_options, write_result
from tsql.render import DIGITS, MAX_DIGITS, error_message, format_arrow
from tsql.statements import split_statements

PROMPT = "seriesql> "
MORE = "  ... "
MAX_ROWS = 40
HISTORY_LENGTH = 2000
HELP = """\
SQL statements end with ; and may span lines. Ctrl-C cancels a running query or clears
the input, Ctrl-D leaves. Every tsql function is available, e.g. SELECT acf([1, 3, 2, 4]);
  :functions        list the tsql functions
  :function NAME    describe one function, with an example query
  :tables           list the tables and views
  :timing           print the elapsed time after each statement (again: stop)
  :expand on|off    show each STRUCT column as one column per field (s.period, s.p_value)
  :digits N         significant digits of DOUBLE values shown (1 to 17; default 10)
  :save FILE        write the last result to FILE: .csv, .parquet, .json (an array) or .jsonl
  :help             this text
  :quit             leave the shell (so does Ctrl-D)"""

_TABLES = """
SELECT database_name AS database, schema_name AS schema, table_name AS name, 'table' AS kind,
       column_count AS columns, estimated_size AS rows
FROM duckdb_tables() WHERE NOT internal
UNION ALL
SELECT database_name, schema_name, view_name, 'view', column_count, NULL
FROM duckdb_views() WHERE NOT internal
ORDER BY ALL
"""


def history_path() -> Path | None:
    """Where the shell keeps its history: ``$SERIESQL_HISTORY`` (empty: keep none), else the XDG state folder."""
    chosen = os.environ.get("SERIESQL_HISTORY")
    if chosen is not None:
        return Path(chosen).expanduser() if chosen else None
    state = os.environ.get("XDG_STATE_HOME", "")
    base = Path(state) if os.path.isabs(state) else Path.home() / ".local" / "state"
    return base / "seriesql" / "history"


class Shell:
    """One session on one connection; :meth:`loop` reads from the terminal until the user leaves."""

    def __init__(self, con: duckdb.DuckDBPyConnection, label: str, interactive: bool = True):
        self.con = con
        self.label = label
        self.interactive = interactive
        self.timing = False
        self.expand = False
        self.digits = DIGITS
        self.last: pa.Table | None = None

    def loop(self) -> int:
        """Read, run and show statements until Ctrl-D or ``:quit``; returns the exit code."""
        print(f"seriesql {__version__} on {self.label}. Statements end with ;  Type :help for help.")
        buffer = ""
        while True:
            try:
                line = input((MORE if buffer else PROMPT) if self.interactive else "")
                if not buffer and line.lstrip().startswith(":"):
                    if not self.command(line.strip()):
                        return 0
                    continue
                statements = split_statements(f"{buffer}\n{line}" if buffer else line)
                buffer = statements.pop().text if statements and not statements[-1].complete else ""
                for statement in statements:
                    if not self.execute(statement.text):
                        break
            except KeyboardInterrupt:  # at the prompt: drop the statement being typed
                print()
                buffer = ""
            except EOFError:
                if self.interactive:
                    print()
                elif buffer:  # piped input may end without a final ;
                    self.execute(buffer)
                return 0

    def execute(self, sql: str) -> bool:
        """Run one statement and show its result; False when it failed or was cancelled."""
        outcome: dict[str, object] = {}

        def work() -> None:
            try:
                relation = self.con.sql(sql)
                outcome["table"] = relation.to_arrow_table() if relation is not None else None
            except Exception as error:  # shown to the user by the main thread
                outcome["error"] = error

        worker = threading.Thread(target=work, name="tsql-query", daemon=True)
        # While the query runs, Ctrl-C asks DuckDB and tsql's functions to stop it (a KeyboardInterrupt here would
        # lose the worker).
        previous = signal.signal(signal.SIGINT, lambda signum, frame: interrupt(self.con))
        started = time.perf_counter()
        try:
            worker.start()
            worker.join()
        finally:
            signal.signal(signal.SIGINT, previous)
        elapsed = time.perf_counter() - started
        error = outcome.get("error")
        if error is not None and was_interrupted(error):
            print("\nquery cancelled", file=sys.stderr)
        elif error is not None:
            print(error_message(error), file=sys.stderr)
        else:
            table = outcome.get("table")
            if isinstance(table, pa.Table) and (table.num_rows or is_query(sql)):
                self.last = table
                print(self._table(table))
        if self.timing:
            print(f"elapsed {elapsed:.3f} s")
        return error is None

    def command(self, line: str) -> bool:
        """Run a ``:`` command; False means leave the shell."""
        name, _, argument = line[1:].strip().partition(" ")
        argument = argument.strip()
        if name == "quit":
            return False
        try:
            self._command(name, argument)
        except Exception as error:  # e.g. a DuckDB error while writing a file
            print(error_message(error), file=sys.stderr)
        return True

    def _command(self, name: str, argument: str) -> None:
        if name == "help":
            print(HELP)
        elif name == "functions":
            from tsql.reference import function_list

            print(function_list())
        elif name == "function":
            self._describe(argument)
        elif name == "tables":
            table = self.con.sql(_TABLES).to_arrow_table()
            print(self._table(table) if table.num_rows else "no tables")
        elif name == "timing":
            self.timing = not self.timing
            print(f"timing {'on' if self.timing else 'off'}")
        elif name == "expand":
            self._expand(argument)
        elif name == "digits":
            self._digits(argument)
        elif name == "save":
            self._save(argument)
        else:
            print(f"unknown command :{name}; :help lists the commands", file=sys.stderr)

    def _table(self, table: pa.Table) -> str:
        width = shutil.get_terminal_size().columns
        return format_arrow(table, width, MAX_ROWS, digits=self.digits, expand=self.expand)

    def _expand(self, argument: str) -> None:
        if argument not in ("", "on", "off"):
            print("usage: :expand on|off (without a word: switch)", file=sys.stderr)
            return
        self.expand = not self.expand if not argument else argument == "on"
        print(f"expand {'on' if self.expand else 'off'}")

    def _digits(self, argument: str) -> None:
        if argument:
            if not argument.isdigit() or not 1 <= int(argument) <= MAX_DIGITS:
                print(f"usage: :digits N, a whole number from 1 to {MAX_DIGITS}; got {argument!r}", file=sys.stderr)
                return
            self.digits = int(argument)
        print(f"digits {self.digits}")

    def _describe(self, name: str) -> None:
        from tsql.reference import describe, find_function, unknown_function

        if not name:
            print("usage: :function NAME", file=sys.stderr)
            return
        fn = find_function(name)
        if fn is not None:
            print(describe(fn))
            return
        print(unknown_function(name, ":functions"), file=sys.stderr)

    def _save(self, argument: str) -> None:
        if not argument:
            print("usage: :save FILE (.csv, .parquet, .json or .jsonl)", file=sys.stderr)
            return
        if self.last is None:
            print("no result to save yet", file=sys.stderr)
            return
        path = Path(argument).expanduser()
        try:
            out_options(path)
        except UsageError as error:
            print(error_message(error), file=sys.stderr)
            return
        if path.exists():
            print(f"{path} exists; not overwritten (remove it or choose another name)", file=sys.stderr)
            return
        self.con.register("__tsql_last_result", self.last)
        try:
            rows = write_result(self.con, "SELECT * FROM __tsql_last_result", path)
            print(f"wrote {rows:,} row{'' if rows == 1 else 's'} to {path}")
        finally:
            self.con.unregister("__tsql_last_result")


def main(database: str = ":memory:", read_only: bool = False, create: bool = False) -> int:
    """Open the database and run the session; returns the exit code.

    A database file that does not exist is made only with ``create`` (see :func:`tsql.pipeline.open_database`).
    """
    try:
        con = open_database(database, read_only=read_only, create=create)
    except UsageError as error:
        print(f"seriesql shell: {error}", file=sys.stderr)
        return 2
    interactive = sys.stdin.isatty()
    if sys.stdout.isatty():
        con.execute("SET enable_progress_bar = true")
    label = "an in-memory database" if database == ":memory:" else database + (" (read-only)" if read_only else "")
    readline = _line_editing() if interactive else None
    history = history_path() if readline is not None else None
    if history is not None:
        readline.set_history_length(HISTORY_LENGTH)
        try:
            readline.read_history_file(history)
        except OSError:  # no history yet
            pass
    try:
        with con:
            return Shell(con, label, interactive).loop()
    finally:
        if history is not None:
            try:
                history.parent.mkdir(parents=True, exist_ok=True)
                readline.write_history_file(history)
            except OSError as error:
                print(f"seriesql shell: history not saved to {history}: {error.strerror}", file=sys.stderr)


def _line_editing() -> ModuleType | None:
    """The readline module (line editing and history for ``input``), where the platform has it."""
    try:
        import readline
    except ImportError:
        return None
    return readline
