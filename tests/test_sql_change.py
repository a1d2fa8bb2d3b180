"""Change points through DuckDB: the *_agg forms answer in the time column's own type."""

import datetime

import duckdb
import numpy as np
import pyarrow as pa
import pytest

import tsql
from tsql.kernels import changepoint
from tsql.kernels.ragged import Ragged


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


# --- seasonal, max_changes and the path (the kernels' own answers are checked in tests/test_changepoint_path.py)


def _kernel(name, series, **kwargs):
    return getattr(changepoint, name)(Ragged.from_list([list(series)]), **kwargs)


def test_max_changes_in_the_list_form(con, nile):
    def starts(args):
        query = f"SELECT change_points(list(volume ORDER BY year){args}) FROM nile"
        return con.execute(query).fetchall()[0][0]

    assert starts(", max_changes := 0") == []
    # the penalised optimum has one change (1899, Cobb 1978), so a limit of one or more keeps it
    assert starts(", max_changes := 1") == starts(", max_changes := 5") == starts("") == [29]
    # without a penalty the best segmentation with exactly three changes, as the kernel gives it alone
    three = starts(", penalty := 0, max_changes := 3")
    assert len(three) == 3
    assert three == _kernel("change_points", nile, penalty=0.0, max_changes=3).row(0).astype(int).tolist()
    assert starts(", max_changes := NULL") == [29]  # NULL: no limit


def test_seasonal_in_the_list_and_agg_forms(con):
    # six years of a monthly cycle with a level shift after four years (seeded synthetic data)
    rng = np.random.default_rng(14)
    months = np.arange(72)
    units = 50 + 20 * np.sin(2 * np.pi * months / 12) + np.where(months >= 48, 15.0, 0.0) + rng.normal(0, 3, 72)
    con.register("cycle", pa.table({"i": months, "units": units}))
    try:
        listed = {
            setting: con.execute(
                f"SELECT change_points(list(units ORDER BY i), seasonal := {setting}) FROM cycle"
            ).fetchall()[0][0]
            for setting in ("'auto'", "'none'", "12", "'12'")
        }
        for setting, expected in (("'auto'", "auto"), ("'none'", "none"), ("12", 12.0), ("'12'", 12.0)):
            alone = _kernel("change_points", units, seasonal=expected).row(0).astype(int).tolist()
            assert listed[setting] == alone, setting
        assert listed["12"] == listed["'auto'"] == [49]  # the shift, once the cycle is out
        dated = "SELECT change_points_agg(units, DATE '2019-01-01' + INTERVAL (i) MONTH, seasonal := {}) FROM cycle"
        by_interval = con.execute(dated.format("INTERVAL '1 year'")).fetchall()[0][0]
        by_steps = con.execute(dated.format("12")).fetchall()[0][0]
        assert by_interval == by_steps == [datetime.datetime(2023, 1, 1)]
        segs = con.execute("SELECT segments_agg(units, i, seasonal := 12, max_changes := 1) FROM cycle").fetchall()[0][
            0
        ]
        assert [s["first"] for s in segs] == [0, 48]
    finally:
        con.unregister("cycle")


def test_path_agg_positions_are_the_rows_times(con, nile):
    listed = con.execute("SELECT change_points_path(list(volume ORDER BY year), max_changes := 4) FROM nile")
    path = listed.fetchall()[0][0]
    records, positions = _kernel("change_points_path", nile, max_changes=4)
    assert [r["changes"] for r in path] == records.row(0)["changes"].tolist()
    assert [r["positions"] for r in path] == [positions.row(i).astype(int).tolist() for i in range(len(path))]
    assert path[0]["penalty_to"] is None and path[-1]["penalty_from"] == 0.0  # NULL: no upper bound
    assert all(a["penalty_from"] == b["penalty_to"] for a, b in zip(path, path[1:], strict=False))
    assert path[1]["positions"] == [29]  # the most important change: 1899 (Cobb 1978)
    timed = con.execute("SELECT change_points_path_agg(volume, year, max_changes := 4) FROM nile").fetchall()[0][0]
    assert [r["positions"] for r in timed] == [[1870 + p for p in r["positions"]] for r in path]
    assert [r["cost"] for r in timed] == [r["cost"] for r in path]
    # with years missing, positions are the times of the rows themselves (the grid's gaps hold no change)
    gappy = con.execute(
        "SELECT change_points_path_agg(volume, year, max_changes := 4), list(year) FROM nile WHERE year % 7 <> 3"
    ).fetchall()[0]
    present = set(gappy[1])
    assert all(set(r["positions"]) <= present for r in gappy[0])
    dated = con.execute("SELECT change_points_path_agg(volume, make_date(year, 1, 1), max_changes := 1) FROM nile")
    assert dated.fetchall()[0][0][1]["positions"] == [datetime.date(1899, 1, 1)]


@pytest.mark.parametrize(
    "call, message",
    [
        ("change_points([1, 2], seasonal := 'yearly')", "change_points: seasonal must be one of 'auto', 'none' or a"),
        ("segments([1, 2], seasonal := 1)", "segments: seasonal must be >= 2, got 1"),
        ("change_points([1, 2], max_changes := -1)", "change_points: max_changes must be >= 0, got -1"),
        ("change_points([1, 2], max_changes := 1.5)", "change_points: max_changes must be a whole number, got 1.5"),
        ("change_points([1, 2], max_changes := 101)", "change_points: max_changes must be <= 100, got 101"),
        ("change_points_path([1, 2], max_changes := 500)", "change_points_path: max_changes must be <= 100"),
        ("change_points_path([1, 2], model := 'x')", "change_points_path: model must be one of"),
        (
            "change_points_agg(v, t, seasonal := 'weekly') FROM (VALUES (1.0, DATE '2024-01-01')) x(v, t)",
            "change_points_agg: seasonal must be 'auto', 'none', an INTERVAL or a number of grid steps, got 'weekly'",
        ),
        (
            "change_points_agg(v, t, seasonal := INTERVAL '1 day') FROM "
            "(VALUES (1.0, DATE '2024-01-01'), (2.0, DATE '2024-01-02')) x(v, t)",
            "change_points_agg: seasonal must be >= 2 grid steps",
        ),
        (
            "change_points_path_agg(v, t, seasonal := INTERVAL '1 day') FROM (VALUES (1.0, 1), (2.0, 2)) x(v, t)",
            "change_points_path_agg: seasonal must be 'auto', 'none', a number of grid steps",
        ),
    ],
)
def test_new_arguments_errors_name_the_function(con, call, message):
    with pytest.raises(duckdb.Error, match=message):
        con.execute(f"SELECT {call}").fetchall()


def test_yearly_items_without_a_planted_change_get_none(sample_warehouse):
    warehouse = duckdb.connect(str(sample_warehouse), read_only=True)
    tsql.register(warehouse)
    # the truth table plants no level change on any item; take the yearly-seasonal items without a trend
    changes = warehouse.execute(
        """
        WITH yearly AS (SELECT replace(subject, 'item ', '') AS item FROM truth
                        WHERE property = 'period_months' AND value = '12'),
             level AS (SELECT replace(subject, 'item ', '') AS item FROM truth
                       WHERE property = 'trend' AND value = 'none')
        SELECT len(change_points_agg(units, month)) FROM monthly_sales JOIN yearly USING (item)
        JOIN level USING (item) GROUP BY item
        """
    ).fetchall()
    warehouse.close()
    counts = np.array([c for (c,) in changes])
    assert len(counts) > 100
    # most get no change at all; the cycle, not a change, explains them
    assert (counts == 0).mean() >= 0.9
