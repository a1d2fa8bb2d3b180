"""`seriesql shell` driven in a pseudo-terminal as a person would, and its pieces: the renderer and the splitter."""

from __future__ import annotations

import datetime as dt
import fcntl
import os
import re
import select
import struct
import subprocess
import sys
import termios
import time
from pathlib import Path

import duckdb
import pytest

from tsql.render import format_table
from tsql.shell import history_path
from tsql.statements import split_statements

TIMEOUT = 120  # seconds; generous, the machine is slow and shared
# Makes the pseudo-terminal the controlling terminal of a new session, so that Ctrl-C there sends SIGINT.
LAUNCH = (
    "import fcntl, os, sys, termios; os.setsid(); fcntl.ioctl(0, termios.TIOCSCTTY, 0); "
    "os.execv(sys.argv[1], sys.argv[1:])"
)


class Session:
    """A `seriesql shell` process on a pseudo-terminal; ``expect`` waits for text in what it printed."""

    def __init__(self, tmp_path: Path, *args: str):
        self.history = tmp_path / "state" / "history"
        self.cwd = tmp_path / "project"
        self.cwd.mkdir(exist_ok=True)
        env = dict(os.environ, HOME=str(tmp_path), SERIESQL_HISTORY=str(self.history), TERM="dumb", COLUMNS="100")
        env.pop("XDG_STATE_HOME", None)
        master, slave = os.openpty()
        fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 40, 100, 0, 0))
        command = [sys.executable, "-c", LAUNCH, sys.executable, "-m", "tsql.cli", "shell", *args]
        self.process = subprocess.Popen(command, stdin=slave, stdout=slave, stderr=slave, cwd=self.cwd, env=env)
        os.close(slave)
        self.fd = master
        self.output = ""
        self.seen = 0

    def expect(self, pattern: str, timeout: float = TIMEOUT) -> str:
        """Wait until ``pattern`` (a regex) appears after the last match; return the text up to its end."""
        text = self.wait_for(pattern, timeout)
        assert text is not None, f"no {pattern!r} in:\n{self.output[self.seen :]}"
        return text

    def wait_for(self, pattern: str, timeout: float) -> str | None:
        deadline = time.monotonic() + timeout
        while True:
            found = re.search(pattern, self.output[self.seen :])
            if found:
                text = self.output[self.seen : self.seen + found.end()]
                self.seen += found.end()
                return text
            left = deadline - time.monotonic()
            if left <= 0 or not self._read(left):
                return None

    def interrupt_prompt(self) -> None:
        """Ctrl-C at the prompt. Python's readline misses a SIGINT that lands before it starts waiting for
        keys, which a test can be quick enough to hit: press again until the fresh prompt shows."""
        for _ in range(20):
            self.send(b"\x03")
            if self.wait_for(r"\nseriesql> ", 5) is not None:
                return
        raise AssertionError(f"Ctrl-C did not bring a fresh prompt:\n{self.output[self.seen :]}")

    def _read(self, timeout: float) -> bool:
        ready, _, _ = select.select([self.fd], [], [], timeout)
        if not ready:
            return True
        try:
            data = os.read(self.fd, 65536)
        except OSError:  # the shell has exited
            return False
        self.output += data.decode("utf-8", "replace").replace("\r", "")
        return bool(data)

    def send(self, text: str | bytes) -> None:
        os.write(self.fd, text.encode() if isinstance(text, str) else text)

    def run(self, line: str) -> str:
        """Type a line at the prompt; return what was printed up to the next prompt."""
        self.send(line + "\n")
        return self.expect(r"\nseriesql> ")

    def wait(self) -> int:
        deadline = time.monotonic() + TIMEOUT
        while self.process.poll() is None and time.monotonic() < deadline:
            self._read(1)
        return self.process.wait(timeout=1)

    def close(self) -> None:
        if self.process.poll() is None:
            self.process.kill()
            self.process.wait()
        os.close(self.fd)


@pytest.fixture
def shell(tmp_path):
    sessions = []

    def start(*args: str) -> Session:
        session = Session(tmp_path, *args)
        sessions.append(session)
        session.expect(r"Type :help for help\.\nseriesql> ")
        return session

    yield start
    for session in sessions:
        session.close()


def test_multi_line_query_and_an_error_that_leaves_the_session_alive(shell):
    s = shell()
    s.send("SELECT 'multi' || '-line' AS joined,\n")
    s.expect(r"\n  \.\.\. ")  # the continuation prompt
    s.send("  round(autocorrelation([1, 2, 1, 2, 1, 2]), 3) AS r1;\n")
    out = s.expect(r"\nseriesql> ")
    # lag-1 autocorrelation of an alternating series of six: sum of 5 products (-1/4) / (6 * 1/4) = -5/6
    assert re.search(r"joined\s+r1\n-+\s+-+\nmulti-line\s+-0\.833\n1 row\n", out), out
    out = s.run("SELECT * FROM no_such_table;")
    assert "Catalog Error" in out and "no_such_table" in out and "Traceback" not in out
    out = s.run("SELECT 40 + 2 AS after_error;")
    assert re.search(r"after_error\n-+\n\s*42\n1 row", out), out


def test_ctrl_c_cancels_a_running_query_and_the_session_goes_on(shell):
    s = shell()
    s.send("SELECT count(*) FROM range(1_000_000_000_000) AS r(i) WHERE i % 7 = 3;\n")
    s.expect(r"\d+%")  # DuckDB's progress bar: the query is running
    s.send(b"\x03")
    s.expect(r"query cancelled\n")
    s.expect(r"seriesql> ")
    out = s.run("SELECT 'still' || ' here' AS alive;")
    assert "still here" in out and "Traceback" not in s.output


def test_ctrl_c_at_the_prompt_clears_the_input_and_quit_leaves(shell, tmp_path):
    s = shell()
    s.send("SELECT 'abandoned',\n")
    s.expect(r"\n  \.\.\. ")
    s.interrupt_prompt()
    s.send("SELECT 'fresh' || '!' AS f;\n")
    assert "Error" not in s.expect(r"\nfresh!\n1 row\n")  # the abandoned line is not part of it
    s.send(":quit\n")
    assert s.wait() == 0


def test_functions_and_function_describe_the_registry(shell):
    s = shell()
    out = s.run(":functions")
    assert re.search(r"\nacf\s+Sample autocorrelations at lags 1\.\.max_lag\.", out), out
    assert "dominant_period" in out and "sparkline" in out
    out = s.run(":function acf")
    assert "acf(values, max_lag := 10)" in out and "example: SELECT acf([" in out
    out = s.run(":function no_such")
    assert "no function named 'no_such'" in out


def test_tables_timing_and_save(shell, tmp_path):
    s = shell()
    s.run("CREATE TABLE sales AS SELECT range AS week, range * 3 AS units FROM range(5);")
    out = s.run(":tables")
    assert re.search(r"\nmemory\s+main\s+sales\s+table\s+2\s+5\n", out), out
    assert "timing on" in s.run(":timing")
    out = s.run("SELECT sum(units) AS total FROM sales;")
    assert re.search(r"\n\s*30\n1 row\nelapsed \d+\.\d+ s\n", out), out
    assert "timing off" in s.run(":timing")
    target = tmp_path / "total.parquet"
    assert "wrote 1 row to" in s.run(f":save {target}")
    assert duckdb.sql(f"SELECT total FROM '{target}'").fetchall() == [(30,)]
    before = target.read_bytes()
    s.run("SELECT 1 AS other;")
    assert "exists; not overwritten" in s.run(f":save {target}")
    assert target.read_bytes() == before
    assert "unknown command :nope" in s.run(":nope")


def test_ctrl_d_quits_and_history_is_kept_between_sessions(shell, tmp_path):
    s = shell()
    s.run("SELECT 'from' || ' history' AS remembered;")
    s.send(b"\x04")
    assert s.wait() == 0
    assert "SELECT 'from' || ' history' AS remembered;" in s.history.read_text()
    assert list(s.cwd.iterdir()) == []  # nothing written to the working folder
    again = shell()
    again.send(b"\x10\n")  # Ctrl-P: the previous line, from the last session
    assert "from history" in again.expect(r"1 row\n")
    again.send(":quit\n")
    assert again.wait() == 0


def test_read_only_database_and_welcome_line(shell, tmp_path):
    db = tmp_path / "shop.duckdb"
    with duckdb.connect(str(db)) as con:
        con.execute("CREATE TABLE items AS SELECT 'bun' AS name")
    s = shell(str(db), "--read-only")
    assert f"on {db} (read-only)" in s.output
    assert "bun" in s.run("SELECT name FROM items;")
    assert "read-only" in s.run("CREATE TABLE more (x INTEGER);")
    assert s.run("SELECT acf([1, 3, 2, 4], max_lag := 1) AS r;").count("1 row") == 1


SCREEN = (
    "SELECT 'sine' AS item, seasonality(list(sin(2 * pi() * i / 12) + (i * 7 % 5) / 4 ORDER BY i)) AS s "
    "FROM range(240) t(i);"
)


def test_expand_and_digits_for_screening(shell):
    import tsql

    with tsql.connect() as con:  # the same query in Python: what the columns must show
        period, strength, p_value = con.sql(SCREEN.rstrip(";")).fetchall()[0][1].values()
    # a clear cycle: the p-value is tiny (about 1e-24: the red background is fitted to the cycle too),
    # and must not show as 0
    assert 0 < p_value < 1e-20
    s = shell()
    out = s.run(SCREEN)
    assert re.search(r"\nitem\s+s\n", out) and "{period: " in out
    assert "expand on" in s.run(":expand on")
    assert "digits 3" in s.run(":digits 3")
    out = s.run(SCREEN)
    header, rule, row = out.splitlines()[1:4]
    assert header.split() == ["item", "s.period", "s.strength", "s.p_value"], out
    assert row.split() == ["sine", f"{period:.3g}", f"{strength:.3g}", f"{p_value:.3g}"]
    assert "e-" in row.split()[-1]
    assert "digits 10" in s.run(":digits 10")
    assert row.split()[1:] != s.run(SCREEN).splitlines()[3].split()[1:]  # more digits again
    assert "expand off" in s.run(":expand off")
    assert re.search(r"\nitem\s+s\n", s.run(SCREEN))
    assert "expand on" in s.run(":expand")  # without a word: switch
    assert "usage: :digits N, a whole number from 1 to 17; got '0'" in s.run(":digits 0")
    assert "usage: :expand on|off" in s.run(":expand sideways")
    assert "digits 10" in s.run(":digits")  # unchanged by the mistake
    help_text = s.run(":help")
    assert ":expand on|off" in help_text and ":digits N" in help_text


def test_function_suggests_close_names(shell):
    s = shell()
    out = s.run(":function seasonalty")
    assert "no function named 'seasonalty'; did you mean seasonality or seasonality_agg? :functions lists them" in out
    assert "seasonality(values, min_period" in s.run(":function SEASONALITY_AGG")
    assert "no function named 'xyzzy'; :functions lists them" in s.run(":function xyzzy")


# The history file's place.


def test_history_path(monkeypatch, tmp_path):
    monkeypatch.delenv("SERIESQL_HISTORY", raising=False)
    monkeypatch.setenv("HOME", str(tmp_path))
    monkeypatch.delenv("XDG_STATE_HOME", raising=False)
    assert history_path() == tmp_path / ".local" / "state" / "seriesql" / "history"
    monkeypatch.setenv("XDG_STATE_HOME", str(tmp_path / "xdg"))
    assert history_path() == tmp_path / "xdg" / "seriesql" / "history"
    monkeypatch.setenv("XDG_STATE_HOME", "relative/ignored")
    assert history_path() == tmp_path / ".local" / "state" / "seriesql" / "history"
    monkeypatch.setenv("SERIESQL_HISTORY", str(tmp_path / "h"))
    assert history_path() == tmp_path / "h"
    monkeypatch.setenv("SERIESQL_HISTORY", "")
    assert history_path() is None


# The renderer.


def test_table_layout_numbers_right_nulls_and_nested_values():
    text = format_table(
        ["item", "units", "acf", "fit"],
        [["bun", 120, [0.5, None], {"period": 12.0, "p_value": None}], [None, 7, [], None]],
    )
    assert text.splitlines() == [
        "item  units  acf          fit",
        "----  -----  -----------  ---------------------------",
        "bun     120  [0.5, NULL]  {period: 12, p_value: NULL}",
        "NULL      7  []           NULL",
        "2 rows",
    ]


def test_values_render_compactly_on_one_line():
    row = ["a\nb", True, float("nan"), dt.timedelta(days=3, hours=2), b"ab\x00", ["x", None], 0.1 + 0.2]
    line = format_table([str(i) for i in range(len(row))], [row], width=200).splitlines()[2]
    assert line.split("  ") == ["a\\nb", "true", "NaN", "3 days 02:00:00", "ab\\x00", "['x', NULL]", "0.3"]


def test_expanded_structs_are_columns_at_every_depth():
    import pyarrow as pa

    from tsql.render import expanded, format_arrow

    fit = pa.array(
        [{"period": 12.0, "p_value": 1.2e-38, "band": {"low": 11.5, "high": 12.5}}, None],
        pa.struct(
            [
                ("period", pa.float64()),
                ("p_value", pa.float64()),
                ("band", pa.struct([("low", pa.float64()), ("high", pa.float64())])),
            ]
        ),
    )
    table = pa.table({"item": ["a", "b"], "fit": fit, "n": [1, 2]})
    assert expanded(table).column_names == ["item", "fit.period", "fit.p_value", "fit.band.low", "fit.band.high", "n"]
    assert format_arrow(table, width=100, expand=True).splitlines() == [
        "item  fit.period  fit.p_value  fit.band.low  fit.band.high  n",
        "----  ----------  -----------  ------------  -------------  -",
        "a             12      1.2e-38          11.5           12.5  1",
        "b           NULL         NULL          NULL           NULL  2",
        "2 rows",
    ]
    assert format_arrow(table, width=100).splitlines()[0].split() == ["item", "fit", "n"]  # off by default


def test_digits_are_significant_digits_and_small_numbers_keep_theirs():
    row = [0.123456789012, 1.2e-38, 3.2969563881562585e-80, 123456.789, -0.0004567, [2.0 / 3.0], {"p": 1e-300}]
    names = [str(i) for i in range(len(row))]
    assert format_table(names, [row], width=200).splitlines()[2].split("  ") == [
        "0.123456789", "1.2e-38", "3.296956388e-80", "123456.789", "-0.0004567", "[0.6666666667]", "{p: 1e-300}"
    ]  # fmt: skip
    assert format_table(names, [row], width=200, digits=3).splitlines()[2].split("  ") == [
        "0.123", "1.2e-38", "3.3e-80", "1.23e+05", "-0.000457", "[0.667]", "{p: 1e-300}"
    ]  # fmt: skip
    assert (
        format_table(["n"], [[12345678901234567]], digits=2).splitlines()[2] == "12345678901234567"
    )  # whole numbers stay


def test_long_results_show_the_first_rows_and_the_total():
    text = format_table(["n"], [[i] for i in range(10)], max_rows=3)
    assert text.splitlines()[2:] == ["0", "1", "2", "10 rows (first 3 shown)"]
    assert format_table(["n"], [[1], [2]], max_rows=2, total_rows=5_000).endswith("5,000 rows (first 2 shown)")
    assert format_table(["n"], []).splitlines() == ["n", "-", "0 rows"]


def test_columns_that_do_not_fit_are_left_out_with_a_note():
    names = [f"column_{i}" for i in range(10)]
    text = format_table(names, [list(range(10))], width=40)
    lines = text.splitlines()
    assert all(len(line) <= 40 for line in lines)
    assert lines[0].split() == names[:4]  # 4 * 8 characters and 3 gaps of 2
    assert lines[-1].startswith("1 row; 6 columns not shown: column_4, ")


def test_wide_columns_are_narrowed_before_any_is_left_out():
    text = format_table(["id", "series", "n"], [[1, "x" * 200, 5]], width=50)
    header, _, row, _ = text.splitlines()
    assert header.split() == ["id", "series", "n"] and len(row) == 50
    assert row.endswith("…  5")


# The statement splitter (shared by the shell and `seriesql run`).


def test_split_at_semicolons_with_the_starting_line():
    text = "SELECT 1;\n\n-- a note; not a statement\nSELECT\n  2;  SELECT 3"
    assert [(s.text, s.line, s.complete) for s in split_statements(text)] == [
        ("SELECT 1", 1, True),
        ("SELECT\n  2", 4, True),
        ("SELECT 3", 5, False),
    ]


@pytest.mark.parametrize(
    "sql",
    [
        "SELECT 'a;b', 'it''s;'",
        'SELECT 1 AS "odd;name"',
        "SELECT 1 -- trailing; comment\n + 1",
        "SELECT /* one; /* nested; */ still; */ 1",
        "SELECT $$dollar; quoted$$, $tag$ more; $tag$",
        "SELECT E'escaped \\' quote;'",
    ],
)
def test_semicolons_in_strings_and_comments_do_not_split(sql):
    assert [(s.text, s.complete) for s in split_statements(sql + ";")] == [(sql, True)]
    # and the same text is what DuckDB runs
    assert len(duckdb.execute(sql).fetchall()) == 1


@pytest.mark.parametrize("sql", ["SELECT 'open; string", "SELECT 1 /* open; comment", "/* only a comment; "])
def test_text_ending_inside_a_string_or_comment_is_incomplete(sql):
    assert [s.complete for s in split_statements(sql)] == [False]


def test_blank_and_comment_only_text_has_no_statements():
    assert split_statements("  ;\n -- nothing here;\n /* nor; here */ ;") == []


# Without a terminal.


def test_piped_input_runs_without_prompts(tmp_path):
    script = "SELECT 6 * 7 AS answer;\nSELECT * FROM no_such_table;\n:tables\nSELECT 'last' || ' one' AS tail\n"
    env = dict(os.environ, HOME=str(tmp_path), SERIESQL_HISTORY=str(tmp_path / "history"))
    done = subprocess.run(
        [sys.executable, "-m", "tsql.cli", "shell"], input=script, capture_output=True, text=True, env=env, cwd=tmp_path
    )
    assert done.returncode == 0 and "seriesql> " not in done.stdout
    assert re.search(r"answer\n-+\n\s*42\n1 row\nno tables\n", done.stdout), done.stdout
    assert "last one" in done.stdout and "no_such_table" in done.stderr
    assert not (tmp_path / "history").exists()  # history is for typed sessions


def test_a_database_that_cannot_be_opened_is_one_line_and_exit_2(tmp_path):
    missing = tmp_path / "absent.duckdb"
    done = subprocess.run(
        [sys.executable, "-m", "tsql.cli", "shell", str(missing), "--read-only"], capture_output=True, text=True
    )
    assert done.returncode == 2 and done.stderr.startswith("seriesql shell: ") and done.stderr.count("\n") == 1
    assert not missing.exists()


def test_negative_zero_prints_as_zero():
    from tsql.render import format_table

    assert "-0" not in format_table(["r"], [(round(-0.001, 2),)], width=40, max_rows=5)


def test_a_database_path_that_does_not_exist_needs_create(tmp_path):
    typo = tmp_path / "shpo.duckdb"
    env = dict(os.environ, HOME=str(tmp_path), SERIESQL_HISTORY="")
    command = [sys.executable, "-m", "tsql", "shell", str(typo)]
    done = subprocess.run(command, input="SELECT 1;\n", capture_output=True, text=True, env=env)
    assert done.returncode == 2 and done.stdout == ""
    assert done.stderr == f"seriesql shell: no database at {typo}; check the path, or pass --create to make a new one\n"
    assert not typo.exists()
    script = "CREATE TABLE kept AS SELECT 42 AS answer;\n"
    done = subprocess.run([*command, "--create"], input=script, capture_output=True, text=True, env=env)
    assert done.returncode == 0 and done.stderr == ""
    with duckdb.connect(str(typo), read_only=True) as con:
        assert con.sql("SELECT answer FROM kept").fetchall() == [(42,)]
