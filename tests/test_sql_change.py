"""Change points through DuckDB: the *_agg forms answer in the time column's own type."""

import datetime

import duckdb
import numpy as np
import pyarrow as pa
import pytest

import tsql


@pytest.fixture(scope="module")
def con(nile):
    c = tsql.connect()
    years = np.arange(1871, 1971)
    c.execute("CREATE TEMP TABLE nile (year INTEGER, volume DOUBLE)")
    c.executemany("INSERT INTO nile VALUES (?, ?)", [(int(y), float(v)) for y, v in zip(years, nile, strict=True)])
    yield c
    c.close()


def test_nile_changes_once_in_1899(con):
    # reference: Nile annual flow shipped in statsmodels; the published change is a drop from 1899,
    # after the Aswan dam works began around 1898 (Cobb 1978)
    assert con.execute("SELECT change_points_agg(volume, year) FROM nile").fetchall()[0] == ([1899],)
    # rows may arrive in any order: the aggregate orders them by time
    shuffled = con.execute("SELECT change_points_agg(volume, year) FROM (SELECT * FROM nile ORDER BY volume)")
    assert shuffled.fetchall()[0] == ([1899],)


@pytest.mark.parametrize(
    "time_sql, first, change",
    [
        ("make_date(year, 1, 1)", datetime.date(1871, 1, 1), datetime.date(1899, 1, 1)),
        ("make_timestamp(year, 7, 1, 0, 0, 0)", datetime.datetime(1871, 7, 1), datetime.datetime(1899, 7, 1)),
        ("year::DOUBLE", 1871.0, 1899.0),
    ],
)
def test_answers_in_the_time_columns_own_type(con, time_sql, first, change):
    points, segs = con.execute(
        f"SELECT change_points_agg(volume, {time_sql}), segments_agg(volume, {time_sql}) FROM nile"
    ).fetchall()[0]
    assert points == [change]
    assert [s["first"] for s in segs] == [first, change]
    assert type(segs[-1]["last"]) is type(first)


def test_segments_agg_means_are_the_regime_means(con, nile):
    segs = con.execute("SELECT segments_agg(volume, year) FROM nile").fetchall()[0][0]
    assert segs[0]["first"] == 1871 and segs[0]["last"] == 1898 and segs[1]["last"] == 1970
    assert segs[0]["mean"] == pytest.approx(nile[:28].mean(), rel=1e-12)
    assert segs[1]["mean"] == pytest.approx(nile[28:].mean(), rel=1e-12)
    # slope per sample (per year here), against numpy's least-squares line
    assert segs[1]["slope"] == pytest.approx(np.polyfit(np.arange(72), nile[28:], 1)[0], rel=1e-9)


def test_list_form_gives_positions(con):
    positions, segs = con.execute(
        "SELECT change_points(list(volume ORDER BY year)), segments(list(volume ORDER BY year)) FROM nile"
    ).fetchall()[0]
    assert positions == [29]
    assert [(s["first"], s["last"]) for s in segs] == [(1, 28), (29, 100)]


def test_group_by_many_series(con):
    # 200 noisy series, each with one planted level shift at 20 + g % 20 (invented data)
    rng = np.random.default_rng(5)
    g = np.repeat(np.arange(200), 60)
    t = np.tile(np.arange(60), 200)
    v = np.where(t >= 20 + g % 20, 10.0, 0.0) + rng.standard_normal(len(g))
    con.register("shifts", pa.table({"g": g, "t": t, "v": v}))
    rows = con.execute("SELECT g, change_points_agg(v, t) FROM shifts GROUP BY g ORDER BY g").fetchall()
    con.unregister("shifts")
    assert all(20 + g % 20 in points for g, points in rows)
    # BIC is a liberal penalty on short noisy series: a few extra changes are expected, not many
    assert sum(points == [20 + g % 20] for g, points in rows) >= 160


@pytest.mark.parametrize(
    "call, message",
    [
        ("change_points([1, 2], model := 'level')", "change_points: model must be one of 'mean', 'meanvar', 'trend'"),
        ("change_points([1, 2], penalty := 'aic')", "change_points: penalty must be one of 'bic', 'mbic' or a number"),
        ("change_points([1, 2], penalty := -1)", "change_points: penalty must be >= 0, got -1"),
        ("segments([1, 2], min_size := 0)", "segments: min_size must be >= 1, got 0"),
        ("change_points([1, 2], model := 'trend', min_size := 1)", "min_size must be >= 2 for model 'trend', got 1"),
        ("change_points_agg(v, t, model := 'nope') FROM (VALUES (1.0, 1)) x(v, t)", "model must be one of"),
    ],
)
def test_nonsense_arguments_are_errors(con, call, message):
    with pytest.raises(duckdb.Error, match=message):
        con.execute(f"SELECT {call}").fetchall()


def test_numeric_penalty_as_number_or_text(con):
    a = con.execute("SELECT change_points(list(volume ORDER BY year), penalty := 20) FROM nile").fetchall()[0]
    b = con.execute("SELECT change_points(list(volume ORDER BY year), penalty := '20') FROM nile").fetchall()[0]
    assert a == b
