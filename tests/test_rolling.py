"""The README's rolling diagnostics: each query runs, and a window's answer is the list form's on that window alone.

The series are the monthly sea surface temperatures of the El Nino region 1950-2010 shipped inside
statsmodels, cut into three "items" of twenty years.
"""

from __future__ import annotations

import re
from pathlib import Path

import duckdb
import pytest

import tsql
from tsql.statements import split_statements

ROOT = Path(__file__).resolve().parents[1]


def readme_queries() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("### Rolling diagnostics", 1)[1]
    block = re.search(r"```sql\n(.*?)```", section, re.S).group(1)
    return [s.text for s in split_statements(block)]


QUERIES = readme_queries()
FAMILIES = ["autocorrelation", "seasonality", "trend_test", "change_points", "dtw_distance"]


@pytest.fixture(scope="module")
def con(elnino):
    con = tsql.connect()
    months = len(elnino) // 3 * 3
    con.execute(
        "CREATE TABLE sst AS SELECT unnest($x::DOUBLE[]) AS units, generate_subscripts($x, 1) AS i",
        {"x": list(elnino[:months])},
    )
    con.execute(
        f"CREATE TABLE sales AS SELECT (i - 1) // {months // 3} AS item, "
        "(DATE '1950-01-01' + to_months(i - 1))::DATE AS month, units FROM sst"
    )
    return con


def test_one_query_per_family():
    assert len(QUERIES) == len(FAMILIES)
    for query, family in zip(QUERIES, FAMILIES):
        assert f"{family}(list(units ORDER BY month) OVER " in query


@pytest.mark.parametrize(("query", "family"), list(zip(QUERIES, FAMILIES)), ids=FAMILIES)
def test_a_window_answers_as_its_rows_alone(con, query, family):
    rows = con.execute(f"SELECT * FROM ({query.rstrip(';')}) ORDER BY item, month").fetchall()
    assert len(rows) == con.execute("SELECT count(*) FROM sales").fetchone()[0]
    # a full window of item 1 with an answer (for change_points: one that found a change), from its rows alone
    first = len(rows) // 3 + 36
    item, month, answer = next(r for r in rows[first:] if r[2])
    length = int(re.search(r"ROWS (\d+) PRECEDING", query).group(1)) + 1

    def last(n: int, column: str = "units", skip: int = 0) -> str:
        rows = f"SELECT * FROM sales WHERE item = {item} AND month <= ? ORDER BY month DESC LIMIT {n} OFFSET {skip}"
        return f"(SELECT list({column} ORDER BY month) FROM ({rows}))"

    if family == "change_points":
        sql = f"SELECT change_points({last(length)}), {last(length, 'month')}"
        positions, months = con.execute(sql, [month] * 2).fetchone()
        alone = [months[i - 1] for i in positions]
    elif family == "dtw_distance":
        sql = f"SELECT dtw_distance({last(12)}, {last(12, skip=12)}, normalize := true)"
        alone = con.execute(sql, [month] * 2).fetchone()[0]
    else:
        settings = ", lag := 12" if family == "autocorrelation" else ""
        alone = con.execute(f"SELECT {family}({last(length)}{settings})", [month]).fetchone()[0]
    assert answer is not None
    assert alone == answer


def test_an_agg_form_over_a_window_is_refused_by_the_binder(con):
    window = "OVER (PARTITION BY item ORDER BY month ROWS 23 PRECEDING)"
    with pytest.raises(duckdb.BinderException, match="Window function macro bodies must contain exactly one aggregate"):
        con.execute(f"SELECT trend_test_agg(units, month) {window} FROM sales")
