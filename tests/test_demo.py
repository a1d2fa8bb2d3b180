"""`seriesql demo`: five questions on the sample warehouse, each answered in SQL and checked against the truth."""

import contextlib
import io
import re
import shlex

import duckdb
import pytest

from tsql import demo, sample_db
from tsql.cli import main


def run(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def first_run(tmp_path_factory):
    """The whole demo, once, into a warehouse that does not exist yet."""
    path = tmp_path_factory.mktemp("demo") / "warehouse.duckdb"
    code, out, err = run(["demo", "--db", str(path)])
    return path, code, out, err


@pytest.fixture(scope="module")
def out(first_run):
    return first_run[2]


@pytest.fixture(scope="module")
def prose(out):
    """The output with every run of white space made one space (the prose is wrapped to the terminal)."""
    return " ".join(out.split())


@pytest.fixture(scope="module")
def planted(first_run):
    """Counts straight from the truth table, to compare the demo's sentences with."""
    with duckdb.connect(str(first_run[0]), read_only=True) as con:

        def count(sql: str) -> int:
            return con.execute(sql).fetchall()[0][0]

        return {
            "12": count("SELECT count(*) FROM truth WHERE property = 'period_months' AND value = '12'"),
            "6": count("SELECT count(*) FROM truth WHERE property = 'period_months' AND value = '6'"),
            "3": count("SELECT count(*) FROM truth WHERE property = 'period_months' AND value = '3'"),
            "none": count("SELECT count(*) FROM truth WHERE property = 'seasonal' AND value = 'no'"),
            "shifts": count("SELECT count(*) FROM truth WHERE property = 'behaviour' AND value = 'volatility_shift'"),
            "reversals": count("SELECT count(*) FROM truth WHERE property = 'behaviour' AND value = 'trend_reversal'"),
            "lines": count("SELECT count(*) FROM truth WHERE property = 'behaviour' AND value LIKE 'trend%'"),
            "queues": count("SELECT count(*) FROM truth WHERE property = 'peak_hour'"),
            "twins": count("SELECT count(*) FROM truth WHERE property = 'looks_like'"),
        }


def numbers(pattern: str, text: str) -> tuple[int, ...]:
    found = re.search(pattern, text)
    assert found, f"no match for {pattern!r}"
    return tuple(int(g.replace(",", "")) for g in found.groups())


def test_builds_the_warehouse_where_asked_and_says_so(first_run, out):
    path, code, _, err = first_run
    assert code == 0 and err == ""
    assert sample_db.is_sample_warehouse(path)
    assert f"Warehouse: {path}" in out and "built just now" in out
    assert [p.name for p in path.parent.iterdir()] == [path.name]  # no half-built leftovers
    assert "Traceback" not in out


def test_every_question_is_asked_with_its_sql_and_a_result(out, prose):
    assert len(demo.STEPS) == 5
    for number, step in enumerate(demo.STEPS, 1):
        assert f"{number} of 5 · {step.title}" in out
        assert " ".join(step.question.split()) in prose
        for line in step.sql.splitlines():
            assert f"    {line}".rstrip() in out.splitlines()
        assert " ".join(f"How to read it: {step.reading}".split()) in prose
    assert out.count("Result, in ") == 5
    assert out.count("Against the planted truth: ") == 5


def test_results_are_tables_with_sparklines(out):
    assert re.search(r"^planted +found +items +strength +example +example_last_24_months$", out, re.M)
    assert re.search(r"^12 months +1 year +\d+ ", out, re.M)
    assert re.search(r"^item +nearest +dtw +next_best +planted_twin$", out, re.M)
    assert "3,000 rows (first 12 shown)" in out  # every item gets its look-alike
    assert "36 rows (first 12 shown)" in out  # the trend screen covers every instrument
    assert re.search(r"^CLOVER +\S+ +\[20\d\d-\d\d-\d\d\] +NULL +volatility_shift +20\d\d-\d\d-\d\d$", out, re.M)
    profiles = re.findall(r"^orders +([▁▂▃▄▅▆▇█]{24}) +(\d+) ", out, re.M)
    assert len(profiles) == 1 and profiles[0][1] == "11"


def test_seasonality_against_the_planted_cycles(prose, planted):
    p12, f12, p6, f6, p3, f3 = numbers(
        r"of the ([\d,]+) items planted with a 12-month cycle, ([\d,]+) answered 1 year; of the ([\d,]+) with a "
        r"6-month cycle, ([\d,]+) answered 6 months; of the ([\d,]+) with a 3-month cycle, ([\d,]+) answered",
        prose,
    )
    assert (p12, p6, p3) == (planted["12"], planted["6"], planted["3"])
    assert f12 >= 0.95 * p12 and f6 >= 0.95 * p6 and f3 >= 0.95 * p3
    none, alarms_p, alarms, flagged, _ = numbers(
        r"Of the ([\d,]+) items planted without a cycle, ([\d,]+) pass p < 0.01 and ([\d,]+) pass q < 0.01: the "
        r"list of ([\d,]+) flagged items holds ([\d,]+) noise items",
        prose,
    )
    assert none == planted["none"] and alarms_p <= 0.03 * none
    assert alarms <= alarms_p and alarms <= 0.02 * flagged  # q < 0.01: about 1 % of the list at most


def test_look_alikes_against_the_planted_twins(prose, planted):
    items, twins, found = numbers(
        r"of the ([\d,]+) items, (\d+) were planted with a twin .*? and (\d+) found it as their nearest", prose
    )
    assert items == 3000 and twins == planted["twins"] > 0 and found == twins
    standing_out, standing_out_twins = numbers(
        r"(\d+) nearest neighbours stand out at under half the next-best distance, (\d+) of them", prose
    )
    assert standing_out_twins == twins and standing_out <= twins + 30  # few loners look like a twin


def test_trends_and_walks_against_the_planted_behaviour(prose, planted):
    lines, lines_found, walks, walks_found, walks_mk = numbers(
        r"of the (\d+) instruments planted as a trend line .*?, (\d+) look like line\+noise; of the (\d+) planted "
        r"random walks, (\d+) wander, although Mann-Kendall calls (\d+) of them",
        prose,
    )
    assert lines == planted["lines"] and lines + walks == 36
    assert lines_found == lines and walks_found >= walks - 1
    assert walks_mk > walks // 2  # the point of the question: the trend test alone is fooled by walks


def test_regime_changes_against_the_planted_days(prose, planted):
    shifts, found, off = numbers(r"of the (\d+) planted volatility shifts, (\d+) were found, at most (\d+) days", prose)
    assert shifts == planted["shifts"] and found == shifts and off <= 10
    bends, bends_found = numbers(r"of the (\d+) planted trend reversals, (\d+) were found as bends", prose)
    assert bends == planted["reversals"] and bends_found >= bends - 1


def test_load_profile_against_the_planted_peaks(first_run, prose, planted):
    exact, queues, within = numbers(
        r"the peak hour is the planted one for (\d+) of the (\d+) queues, and within an hour of it for (\d+)", prose
    )
    assert queues == planted["queues"] and within == queues and exact >= queues - 1
    with duckdb.connect(str(first_run[0]), read_only=True) as con:
        levels = con.execute(
            "SELECT replace(w.subject, 'queue ', ''), w.value::DOUBLE * (5 + 2 * f.value::DOUBLE) / 7 "
            "FROM truth w JOIN truth f ON f.subject = w.subject AND f.property = 'weekend_factor' "
            "WHERE w.property = 'weekday_contacts'"
        ).fetchall()
    for queue, average_day in levels:
        fitted, shown = numbers(rf"{queue} (\d+) vs (\d+)", prose)
        assert shown == round(average_day) and abs(fitted - average_day) <= 0.05 * average_day


def test_ends_with_the_caution_and_where_to_go_next(first_run, out, prose):
    assert " ".join(demo.CAUTION.split()) in prose
    assert "not trading, staffing or safety advice" in prose
    assert f"seriesql shell {first_run[0]} --read-only" in out


def test_ends_by_offering_the_report_that_runs(first_run, out, tmp_path, monkeypatch):
    """The last command printed is `seriesql report` on the warehouse; run as printed, it writes the page."""
    last = out.rstrip().split("seriesql report ")[-1]
    assert out.rstrip().endswith(last) and "--out sample_report.html" in last
    argv = shlex.split("report " + last.replace("\\\n", " "))
    monkeypatch.chdir(tmp_path)
    code, printed, err = run(argv)
    assert code == 0 and err == "" and (tmp_path / "sample_report.html").stat().st_size > 100_000


def test_a_second_run_reuses_the_warehouse(first_run, monkeypatch):
    path = first_run[0]
    before = path.stat()
    monkeypatch.setattr(demo, "STEPS", ())  # the warehouse handling only
    code, out, err = run(["demo", "--db", str(path)])
    assert code == 0 and err == ""
    assert "already there, reused" in out
    after = path.stat()
    assert (after.st_ino, after.st_mtime_ns) == (before.st_ino, before.st_mtime_ns)


def test_default_location_is_the_cache_folder(tmp_path, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    monkeypatch.setattr(demo, "STEPS", ())
    code, out, _ = run(["demo"])
    expected = tmp_path / "cache" / "seriesql" / "sample_warehouse.duckdb"
    assert code == 0 and sample_db.default_path() == expected
    assert expected.exists() and f"Warehouse: {expected}" in out


@pytest.mark.parametrize("kind", ["text", "duckdb"])
def test_a_foreign_file_is_refused_and_left_alone(tmp_path, kind):
    path = tmp_path / "mine.duckdb"
    if kind == "text":
        path.write_bytes(b"my own notes, not a warehouse\n")
    else:
        with duckdb.connect(str(path)) as con:
            con.execute("CREATE TABLE precious AS SELECT 42 AS answer")
    content = path.read_bytes()
    code, out, err = run(["demo", "--db", str(path)])
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith("seriesql demo: ") and "not a tsql sample warehouse" in err
    assert "left untouched" in err and "Traceback" not in err
    assert path.read_bytes() == content
    assert sorted(p.name for p in tmp_path.iterdir()) == ["mine.duckdb"]


def test_a_failing_step_stops_with_one_line(first_run, monkeypatch):
    broken = demo.Step(
        title="Broken", question="Is this a table?", sql="SELECT * FROM no_such_table", reading="", check="", verdict=""
    )
    monkeypatch.setattr(demo, "STEPS", (broken,))
    code, out, err = run(["demo", "--db", str(first_run[0])])
    assert code == 1 and "Question: Is this a table?" in out
    assert err.strip().startswith("seriesql demo: stopped on ") and "no_such_table" in err
    assert err.strip().count("\n") == 0 and "Traceback" not in err
