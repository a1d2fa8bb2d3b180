"""`seriesql run`: SQL files as a pipeline step."""

from __future__ import annotations

import subprocess
import sys

import duckdb
import pytest

from tsql.cli import main
from tsql.pipeline import write_result


@pytest.fixture
def scripts(tmp_path, monkeypatch):
    """Write SQL files into tmp_path (the working folder) by name; returns the names."""
    monkeypatch.chdir(tmp_path)

    def write(**files: str) -> list[str]:
        for name, text in files.items():
            (tmp_path / f"{name}.sql").write_text(text)
        return [f"{name}.sql" for name in files]

    return write


CREATE = "CREATE TABLE sales AS\nSELECT * FROM (VALUES ('bun', 5), ('loaf', 50), ('cake', 500)) AS v(item, units);\n"


def test_files_run_in_order_and_the_last_result_is_printed(scripts, capsys):
    files = scripts(a=CREATE, b="-- the report\nSELECT item, units * 2 AS doubled\nFROM sales ORDER BY units")
    assert main(["run", *files]) == 0
    assert capsys.readouterr().out.splitlines() == [
        "item  doubled",
        "----  -------",
        "bun        10",
        "loaf      100",
        "cake     1000",
        "3 rows",
    ]


def test_tsql_functions_are_registered(scripts, capsys):
    files = scripts(a="SELECT round(autocorrelation([1, 2, 1, 2, 1, 2]), 3) AS r1;")
    assert main(["run", *files]) == 0
    # lag-1 autocorrelation of an alternating series of six: sum of 5 products (-1/4) / (6 * 1/4) = -5/6
    assert capsys.readouterr().out.splitlines()[2] == "-0.833"


@pytest.mark.parametrize("extension", ["csv", "parquet", "json", "jsonl"])
def test_out_writes_the_last_result_with_copy(scripts, tmp_path, capsys, extension):
    files = scripts(a=CREATE, b="SELECT item, units FROM sales WHERE units > 10 ORDER BY units;")
    target = tmp_path / f"result.{extension}"
    assert main(["run", *files, "--out", str(target)]) == 0
    assert capsys.readouterr().out == ""
    assert duckdb.sql(f"SELECT item, units FROM '{target}' ORDER BY units").fetchall() == [("loaf", 50), ("cake", 500)]


def test_failure_reports_file_and_line_and_stops(scripts, tmp_path, capsys):
    files = scripts(
        a=CREATE,
        b="INSERT INTO sales VALUES ('roll', 7);\n-- the next statement fails\nSELECT *\nFROM no_such_table;\n"
        "INSERT INTO sales VALUES ('never', 0);\n",
    )
    db = tmp_path / "shop.duckdb"
    assert main(["run", *files, "--db", str(db), "--create"]) == 1
    err = capsys.readouterr().err
    assert err.startswith("b.sql:3: Catalog Error: ") and "no_such_table" in err and "Traceback" not in err
    with duckdb.connect(str(db)) as con:
        assert con.sql("SELECT list(item ORDER BY units) FROM sales").fetchall() == [(["bun", "roll", "loaf", "cake"],)]


def test_params_are_bound_as_values(scripts, capsys):
    files = scripts(a=CREATE, b="SELECT count(*) AS n FROM sales WHERE units > $least;")
    assert main(["run", *files, "--param", "least=100"]) == 0
    # compared as numbers (500 only); pasted as the text '100' it would also let '5' and '50' through
    assert capsys.readouterr().out.splitlines()[2] == "1"


def test_a_value_that_looks_like_sql_stays_a_value(scripts, tmp_path, capsys):
    files = scripts(a=CREATE, b="INSERT INTO sales VALUES ($item, 1);\nSELECT item FROM sales WHERE units = 1;")
    db = tmp_path / "shop.duckdb"
    hostile = "x'; DROP TABLE sales; --"
    assert main(["run", *files, "--db", str(db), "--create", "--param", f"item={hostile}"]) == 0
    assert capsys.readouterr().out.splitlines()[2] == hostile
    with duckdb.connect(str(db)) as con:
        assert con.sql("SELECT count(*) FROM sales").fetchall() == [(4,)]
        assert con.sql("SELECT item FROM sales WHERE units = 1").fetchall() == [(hostile,)]


def test_each_statement_gets_only_the_params_it_uses(scripts, capsys):
    # DuckDB refuses a value for a parameter a statement does not have
    files = scripts(a="CREATE TABLE t AS SELECT $first AS a;\nSELECT a, $second AS b FROM t;")
    assert main(["run", *files, "--param", "first=1", "--param", "second=2"]) == 0
    assert capsys.readouterr().out.splitlines()[2].split() == ["1", "2"]


def test_a_param_with_no_value_stops_before_anything_runs(scripts, tmp_path, capsys):
    files = scripts(a=CREATE, b="SELECT * FROM sales\nWHERE units > 1;\nSELECT $least;")
    db = tmp_path / "shop.duckdb"
    assert main(["run", *files, "--db", str(db), "--create"]) == 2
    assert capsys.readouterr().err == "seriesql run: b.sql:3: no value for $least; give it with --param least=VALUE\n"
    assert not db.exists()


def test_an_unused_param_is_a_warning(scripts, capsys):
    files = scripts(a="SELECT 1 AS one;")
    assert main(["run", *files, "--param", "region=north"]) == 0
    assert "warning: --param region is not used by any statement" in capsys.readouterr().err


def test_a_query_that_fails_while_writing_leaves_no_out_file(scripts, tmp_path, capsys):
    # the rows stream to a hidden file beside --out, renamed only once the query has finished
    files = scripts(
        a="SELECT i, CASE WHEN i = 150000 THEN error('stopped half way') ELSE i END AS v FROM range(200000) t(i);"
    )
    target = tmp_path / "result.csv"
    assert main(["run", *files, "--out", str(target)]) == 1
    assert "stopped half way" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.sql"]


def test_the_out_file_appears_only_once_complete(tmp_path):
    # a run killed while writing must not leave a partial --out file: while the rows are being
    # written, the target does not exist yet (each row records what a function saw at that moment)
    target = tmp_path / "result.csv"
    con = duckdb.connect()
    con.create_function("target_exists", lambda: target.exists(), [], "BOOLEAN", side_effects=True)
    assert write_result(con, "SELECT i, target_exists() AS seen FROM range(300000) t(i)", target) == 300000
    assert duckdb.sql(f"SELECT count(*), bool_or(seen) FROM '{target}'").fetchall() == [(300000, False)]


def test_out_refuses_to_overwrite_unless_replace(scripts, tmp_path, capsys):
    files = scripts(a="SELECT 42 AS answer;")
    target = tmp_path / "result.csv"
    target.write_text("keep me\n")
    assert main(["run", *files, "--out", str(target)]) == 2
    assert "result.csv exists; pass --replace to overwrite it" in capsys.readouterr().err
    assert target.read_text() == "keep me\n"
    assert main(["run", *files, "--out", str(target), "--replace"]) == 0
    assert target.read_text().split() == ["answer", "42"]


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["missing.sql"], "seriesql run: cannot read missing.sql: No such file or directory\n"),
        (["a.sql", "--param", "no_equals"], "seriesql run: --param wants NAME=VALUE with NAME a plain identifier"),
        (["a.sql", "--param", "x=1", "--param", "x=2"], "seriesql run: --param x is given twice\n"),
        (["a.sql", "--out", "result.xlsx"], "seriesql run: cannot tell the format of 'result.xlsx'"),
        (["b.sql", "--out", "result.csv"], "seriesql run: b.sql:1: --out needs the last statement to be a query\n"),
        (["empty.sql"], "seriesql run: no SQL statements in empty.sql\n"),
    ],
)
def test_mistakes_in_the_command_are_one_line_and_exit_2(scripts, capsys, args, message):
    scripts(a="SELECT 1;", b="CREATE TABLE t (x INTEGER);", empty="-- nothing yet\n")
    assert main(["run", *args]) == 2
    err = capsys.readouterr().err
    assert err.startswith(message) and err.count("\n") == 1


def test_exit_codes_of_the_command(scripts, tmp_path):
    files = scripts(a="SELECT 1;\n\nSELECT 1 / 'x';")
    done = subprocess.run([sys.executable, "-m", "tsql.cli", "run", *files], capture_output=True, text=True)
    assert done.returncode == 1 and done.stderr.startswith("a.sql:3: ") and done.stdout == ""


def test_an_argument_error_reads_plainly(tmp_path, capsys):
    from tsql.cli import main

    script = tmp_path / "bad.sql"
    script.write_text("SELECT 1;\nSELECT acf([1, 2, 3], max_lag := 0);\n")
    assert main(["run", str(script)]) == 1
    err = capsys.readouterr().err
    assert f"{script}:2: Invalid Input Error: acf: max_lag must be >= 1, got 0" in err
    assert "Python exception" not in err


# The database file: never made by a typo, shared with other readers under --read-only.


def test_a_database_that_does_not_exist_is_made_only_with_create(scripts, tmp_path, capsys):
    files = scripts(a=CREATE, b="SELECT count(*) AS n FROM sales;")
    typo = tmp_path / "shpo.duckdb"
    assert main(["run", *files, "--db", str(typo)]) == 2
    err = capsys.readouterr().err
    assert err == f"seriesql run: no database at {typo}; check the path, or pass --create to make a new one\n"
    assert not typo.exists()
    assert main(["run", *files, "--db", str(typo), "--read-only"]) == 2
    assert "no database at" in capsys.readouterr().err and not typo.exists()
    assert main(["run", *files, "--db", str(typo), "--create"]) == 0
    assert capsys.readouterr().out.splitlines()[2].strip() == "3"
    assert main(["run", *scripts(c="SELECT count(*) AS n FROM sales;"), "--db", str(typo)]) == 0  # it exists now
    assert capsys.readouterr().out.splitlines()[2].strip() == "3"
    assert main(["run", *scripts(d="SELECT 6 * 7 AS answer;")]) == 0  # in memory: nothing to create
    assert capsys.readouterr().out.splitlines()[2].strip() == "42"


class Holder:
    """A `seriesql shell` in another process with the database open, fed by a pipe (kept open)."""

    def __init__(self, db, *args):
        command = [sys.executable, "-u", "-m", "tsql", "shell", str(db), *args]
        self.process = subprocess.Popen(command, stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
        banner = self.process.stdout.readline()  # printed once the database is open
        assert f"on {db}" in banner, banner

    def close(self):
        self.process.stdin.close()
        assert self.process.wait(timeout=60) == 0


@pytest.fixture
def warehouse(tmp_path):
    db = tmp_path / "shop.duckdb"
    with duckdb.connect(str(db)) as con:
        con.execute(CREATE)
    return db


def test_read_only_runs_beside_a_read_only_shell(scripts, warehouse, capsys):
    # DuckDB's rule: any number of processes may open a file read-only together; one that writes has it alone
    files = scripts(report="SELECT sum(units) AS total FROM sales;")
    holder = Holder(warehouse, "--read-only")
    try:
        assert main(["run", *files, "--db", str(warehouse), "--read-only"]) == 0
        assert capsys.readouterr().out.splitlines()[2].strip() == "555"
        assert main(["run", *files, "--db", str(warehouse)]) == 2
        err = capsys.readouterr().err
        pid = holder.process.pid
        assert err.startswith(f"seriesql run: {warehouse} is open read-only in another process (PID {pid}); ")
        assert "pass --read-only if this only reads" in err and err.count("\n") == 1
    finally:
        holder.close()


def test_a_shell_that_writes_has_the_file_alone(scripts, warehouse, capsys):
    files = scripts(report="SELECT sum(units) AS total FROM sales;")
    holder = Holder(warehouse)
    try:
        assert main(["run", *files, "--db", str(warehouse), "--read-only"]) == 2
        err = capsys.readouterr().err
        assert err.startswith(f"seriesql run: {warehouse} is open for writing in another process (PID ")
        assert "close it there first" in err and err.count("\n") == 1 and "Traceback" not in err
    finally:
        holder.close()


def test_read_only_refuses_to_write(scripts, warehouse, capsys):
    files = scripts(a="SELECT 1;\nINSERT INTO sales VALUES ('roll', 7);")
    assert main(["run", *files, "--db", str(warehouse), "--read-only"]) == 1
    err = capsys.readouterr().err
    assert err.startswith("a.sql:2: ") and "read-only" in err
    with duckdb.connect(str(warehouse), read_only=True) as con:
        assert con.sql("SELECT count(*) FROM sales").fetchall() == [(3,)]
