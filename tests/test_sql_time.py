"""Honest time through SQL: on_grid, and *_agg forms that see missing periods and answer in time terms."""

import datetime as dt
import json
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa
import pytest

import tsql

DELETED = (14, 31, 47)  # months removed from the record: no row at all


@pytest.fixture(scope="module")
def con():
    c = tsql.connect()
    yield c
    c.close()


@pytest.fixture(scope="module")
def sst(con, elnino):
    """Five years (1990-1994) of the monthly El Nino sea surface temperature, three months deleted."""
    series = elnino[40 * 12 : 45 * 12]
    months = [dt.date(1990 + i // 12, i % 12 + 1, 1) for i in range(len(series))]
    keep = [i for i in range(len(series)) if i not in DELETED]
    table = pa.table(
        {
            "month": pa.array([months[i] for i in keep], pa.date32()),
            "month_index": pa.array(keep, pa.int64()),
            "temperature": pa.array(series[keep]),
        }
    )
    con.register("sst_table", table)
    con.execute(
        """CREATE OR REPLACE TEMP VIEW sst AS
           SELECT month, month::TIMESTAMP AS month_ts, (month::TIMESTAMP AT TIME ZONE 'UTC') AS month_tz,
                  month_index, temperature
           FROM sst_table"""
    )
    return series


def test_on_grid_puts_missing_values_back_where_they_belong(con, sst):
    (grid,) = con.execute("SELECT on_grid(list(temperature), list(month)) FROM sst").fetchall()[0]
    assert len(grid) == 60
    assert [i for i, v in enumerate(grid) if v is None] == list(DELETED)
    assert all(grid[i] == sst[i] for i in range(60) if i not in DELETED)


def test_dominant_period_agg_answers_a_year_where_the_squeezed_list_does_not(con, sst):
    agg, squeezed, complete = con.execute(
        f"""SELECT dominant_period_agg(temperature, month) = INTERVAL 12 MONTH,
                  dominant_period(list(temperature ORDER BY month)),
                  dominant_period({sst.tolist()})
           FROM sst"""
    ).fetchall()[0]
    assert agg
    assert abs(complete - 12) < 0.25  # the full record (El Nino SST is dominated by the annual cycle)
    assert abs(squeezed - 12) > 0.4  # the squeezed list lost three months: its cycle looks shorter


@pytest.mark.parametrize("time", ["month", "month_ts", "month_tz"])
def test_temporal_time_columns_give_intervals(con, sst, time):
    period, season, lag12 = con.execute(
        f"""SELECT dominant_period_agg(temperature, {time}) = INTERVAL 12 MONTH,
                  seasonality_agg(temperature, {time}).period = INTERVAL 1 YEAR,
                  autocorrelation_agg(temperature, {time}, lag := 12)
           FROM sst"""
    ).fetchall()[0]
    assert period and season
    (on_grid,) = con.execute(
        "SELECT autocorrelation(on_grid(list(temperature), list(month)), lag := 12) FROM sst"
    ).fetchall()[0]
    assert lag12 == on_grid


def test_integer_time_columns_answer_in_their_own_units(con, sst):
    period, stepped = con.execute(
        """SELECT dominant_period_agg(temperature, month_index),
                  dominant_period_agg(temperature, month_index * 5)
           FROM sst"""
    ).fetchall()[0]
    assert abs(period - 12) < 0.25
    assert stepped == pytest.approx(5 * period, rel=1e-12)


def test_timestamptz_grid_runs_on_utc_instants_whatever_the_session_zone(con):
    # 2024-03-31 02:00 does not exist on a Berlin wall clock; an hourly UTC grid has no hole there
    other = tsql.connect()
    other.execute("SET TimeZone = 'Europe/Berlin'")
    rows = other.execute(
        """WITH h AS (SELECT TIMESTAMPTZ '2024-03-30 12:00:00+00' + to_hours(i::BIGINT) AS hour, i AS v
                      FROM range(48) r(i))
           SELECT len(on_grid(list(v), list(hour))), harmonic_smooth_agg(v, hour, harmonics := 1)[1].time
           FROM h"""
    ).fetchall()
    other.close()
    ((points, first),) = rows
    assert points == 48
    assert first == dt.datetime(2024, 3, 30, 12, tzinfo=dt.UTC)  # a TIMESTAMPTZ, the same instant


def test_change_points_agg_with_gaps_answers_observed_years(con, nile):
    # Nile annual flow (statsmodels), the 1899 shift (Cobb 1978), with three years missing
    years = [y for y in range(1871, 1971) if y not in (1880, 1898, 1930)]
    con.register("nile_gaps", pa.table({"year": years, "flow": [nile[y - 1871] for y in years]}))
    starts, segments = con.execute(
        "SELECT change_points_agg(flow, year), segments_agg(flow, year) FROM nile_gaps"
    ).fetchall()[0]
    assert starts == [1899]  # the grid point 1898 has no row: the first row of the new regime is 1899
    assert [(s["first"], s["last"]) for s in segments] == [(1871, 1897), (1899, 1970)]


def test_harmonic_smooth_agg_is_the_list_form_on_the_grid(con, sst):
    (records,) = con.execute(
        "SELECT harmonic_smooth_agg(temperature, month, harmonics := 2, period := 12) FROM sst"
    ).fetchall()[0]
    (expected,) = con.execute(
        "SELECT harmonic_smooth(on_grid(list(temperature), list(month)), harmonics := 2, period := 12) FROM sst"
    ).fetchall()[0]
    assert [r["value"] for r in records] == expected
    assert [r["time"] for r in records] == [dt.datetime(1990 + i // 12, i % 12 + 1, 1) for i in range(60)]
    (with_interval,) = con.execute(
        "SELECT harmonic_smooth_agg(temperature, month, harmonics := 2, period := INTERVAL 1 YEAR) FROM sst"
    ).fetchall()[0]
    assert with_interval == records


def test_harmonic_profile_agg_finds_the_peak_hour_of_an_hourly_load(con):
    # a synthetic call load peaking at 14:00; quiet hours have no row (an event log), so fill with zeros
    rng = np.random.default_rng(7)
    hours = np.arange(24 * 28)
    expected = 2 + 40 * np.exp(-0.5 * ((hours % 24 - 14) / 2.5) ** 2)
    calls = rng.poisson(expected)
    stamps = [dt.datetime(2024, 5, 6) + dt.timedelta(hours=int(h)) for h in hours]
    keep = calls > 0
    con.register(
        "calls",
        pa.table({"hour": pa.array(np.array(stamps)[keep], pa.timestamp("us")), "calls": calls[keep]}),
    )
    by_interval, by_steps, mean, zero_mean = con.execute(
        """SELECT list_position(p, list_max(p)) - 1, list_position(q, list_max(q)) - 1, list_avg(p), z
           FROM (SELECT harmonic_profile_agg(calls, hour, INTERVAL 1 DAY, harmonics := 4, fill := 'zero') AS p,
                        harmonic_profile_agg(calls, hour, 24, harmonics := 4, fill := 'zero') AS q,
                        list_avg(on_grid(list(calls), list(hour), fill := 'zero')) AS z
                 FROM calls)"""
    ).fetchall()[0]
    assert by_interval == by_steps == 14
    assert mean == pytest.approx(zero_mean, rel=1e-9)  # the profile's mean is the series' mean


def test_profiles_start_at_midnight_whatever_hour_each_group_starts(con):
    # two queues of an hourly load peaking at 14:00, one starting at 03:00, one at 07:00 (synthetic: the
    # property that phase 0 is the clock's midnight; a one-harmonic daily cosine is fitted exactly)
    con.execute(
        """CREATE OR REPLACE TEMP TABLE queues AS
           SELECT q, TIMESTAMP '2024-03-04' + to_hours(i) AS hour, 10 + 5 * cos(2 * pi() * (i % 24 - 14) / 24) AS v
           FROM range(24 * 14) r(i), (VALUES ('a', 3), ('b', 7)) s(q, h0) WHERE i >= h0"""
    )
    rows = con.execute(
        """SELECT q, harmonic_profile_agg(v, hour, INTERVAL 1 DAY, harmonics := 1),
                  harmonic_profile_agg(v, hour, 24, harmonics := 1, anchor := 'first'),
                  harmonic_profile_agg(v, hour::TIMESTAMPTZ, INTERVAL 1 DAY, harmonics := 1),
                  hour(min(hour))
           FROM queues GROUP BY q ORDER BY q"""
    ).fetchall()
    expected = 10 + 5 * np.cos(2 * np.pi * (np.arange(24) - 14) / 24)
    for _, calendar, first, utc, h0 in rows:
        assert calendar == pytest.approx(expected, abs=1e-9)  # element 1 is 00:00 to 01:00
        assert calendar == list(np.roll(first, h0))  # 'first': phase 0 at the group's first hour, bit for bit
        assert utc == calendar  # TIMESTAMPTZ: UTC hours
    assert rows[0][1] == pytest.approx(rows[1][1], abs=1e-12)


def test_a_weekly_profile_of_a_year_starts_on_the_first_of_january(con):
    # weekly rows (Mondays) from November or February across year ends, a 52-week cosine peaking on
    # 19 July 2021 (synthetic: the property that phase 0 is 1 January; 52 weeks, 364 days, reads as a year)
    first_days = {"early": dt.date(2021, 11, 1), "late": dt.date(2022, 2, 7)}
    peak = dt.date(2021, 7, 19)

    def load(days):
        return 10 + 5 * np.cos(2 * np.pi * np.asarray(days) / 364)

    rows = [
        (g, first + dt.timedelta(weeks=w), float(load((first - peak).days + 7 * w)))
        for g, first in first_days.items()
        for w in range(150)
    ]
    con.register("weeks", pa.table(dict(zip(("g", "week", "v"), map(list, zip(*rows))))))
    answers = con.execute(
        """SELECT g, harmonic_profile_agg(v, week, 52, harmonics := 1),
                  harmonic_profile_agg(v, week, 52, harmonics := 1, anchor := 'first')
           FROM weeks GROUP BY g ORDER BY g"""
    ).fetchall()
    for g, calendar, first in answers:
        january = dt.date(first_days[g].year, 1, 1)  # of the year the group starts in
        assert calendar == pytest.approx(load((january - peak).days + 7 * np.arange(52)), abs=1e-9), g
        assert first == pytest.approx(load((first_days[g] - peak).days + 7 * np.arange(52)), abs=1e-9), g
        assert int(np.argmax(calendar)) == 28  # 19 July 2021 (day 199), 18 July 2022 (day 198): week 28


def test_a_year_on_a_weekly_grid_is_52_1775_weeks_from_the_first_of_january(con):
    # weekly rows from November and February across year ends, a yearly cosine (365.2425 days) peaking on
    # 19 July 2021: INTERVAL 1 YEAR is 52.1775 weeks, fitted exactly; element k is 1 January + k years / 52
    first_days = {"early": dt.date(2021, 11, 1), "late": dt.date(2022, 2, 7)}
    peak, year = dt.date(2021, 7, 19), 365.2425
    rows = [
        (g, first + dt.timedelta(weeks=w), 10 + 5 * np.cos(2 * np.pi * ((first - peak).days + 7 * w) / year))
        for g, first in first_days.items()
        for w in range(150)
    ]
    con.register("years", pa.table(dict(zip(("g", "week", "v"), map(list, zip(*rows))))))
    answers = con.execute(
        """SELECT g, harmonic_profile_agg(v, week, INTERVAL 1 YEAR, harmonics := 1),
                  harmonic_profile_agg(v, week, 52.1775, harmonics := 1, anchor := 'first'),
                  harmonic_profile_agg(v, week, INTERVAL 12 MONTH, harmonics := 1, anchor := 'first')
           FROM years GROUP BY g ORDER BY g"""
    ).fetchall()
    for g, by_year, by_weeks, by_months in answers:
        january = dt.date(first_days[g].year, 1, 1)
        k = (january - peak).days + np.arange(52) * year / 52
        assert by_year == pytest.approx(10 + 5 * np.cos(2 * np.pi * k / year), abs=1e-9), g
        assert by_months == by_weeks  # 12 months are 52.1775 weeks


@pytest.fixture(scope="module")
def co2(con):
    """Weekly CO2 at Mauna Loa, 1958-2001 (Keeling's record, shipped inside statsmodels; 59 weeks missing)."""
    sm = pytest.importorskip("statsmodels.api")
    data = sm.datasets.co2.load_pandas().data
    con.register("co2", pa.table({"week": pa.array(data.index.date, pa.date32()), "co2": data["co2"].to_numpy()}))
    return data


def test_a_yearly_cycle_on_weekly_data_reads_one_year(con, co2):
    # the seasonal cycle of atmospheric CO2 is yearly (Keeling 1960); on the weekly grid it is estimated at
    # 52.15 weeks (365.05 days), which reads as a year; a longer cycle reads in whole days
    dominant, seasonality, cycles, stl, stl_year, exact = con.execute(
        """SELECT dominant_period_agg(co2, week), seasonality_agg(co2, week),
                  periods_agg(co2, week, k := 2), stl_strength_agg(co2, week),
                  stl_strength_agg(co2, week, period := INTERVAL 1 YEAR),
                  dominant_period_agg(co2, week) = INTERVAL 12 MONTH
           FROM co2"""
    ).fetchall()[0]
    year = dt.timedelta(days=360)  # DuckDB hands 12 months to Python as 360 days
    assert exact and dominant == seasonality["period"] == cycles[0]["period"] == stl["period"] == year
    assert stl_year == stl  # INTERVAL 1 YEAR: 52.1775 weeks, whole for STL: 52
    assert cycles[1]["period"].seconds == 0 and cycles[1]["period"].days > 5000  # whole days
    steps = con.execute(
        "SELECT seasonality(on_grid(list(co2), list(week))).period, stl_strength_agg(co2, week, period := 52) FROM co2"
    ).fetchall()[0]
    assert steps[0] * 7 == pytest.approx(365.05, abs=0.01)  # the estimate itself, in weeks
    assert steps[1] == stl
    # every length argument takes the year: 52.1775 weeks, or 52 where it must be whole
    same = con.execute(
        """SELECT stl_decompose_agg(co2, week, INTERVAL 1 YEAR) = stl_decompose_agg(co2, week, 52),
                  change_points_agg(co2, week, seasonal := INTERVAL 1 YEAR)
                      = change_points_agg(co2, week, seasonal := 52.1775),
                  harmonic_smooth_agg(co2, week, period := INTERVAL 1 YEAR)
                      = harmonic_smooth_agg(co2, week, period := 52.1775),
                  periods_agg(co2, week, min_period := INTERVAL 1 MONTH, max_period := INTERVAL 2 YEAR)
                      = periods_agg(co2, week, min_period := 30.436875 / 7, max_period := 104.355)
           FROM co2"""
    ).fetchall()[0]
    assert same == (True, True, True, True)


def test_periods_read_exactly_in_python(con, co2):
    query = """SELECT dominant_period_agg(co2, week) AS p, seasonality_agg(co2, week) AS s,
                      periods_agg(co2, week, k := 2) AS c, dominant_period_agg(co2, year(week) * 100 + week(week)) AS n
               FROM co2"""
    (lossy,) = con.execute("SELECT dominant_period_agg(co2, week) FROM co2").fetchall()[0]
    assert lossy == dt.timedelta(days=360)  # what DuckDB hands Python for 12 months
    table = con.sql(query).to_arrow_table()
    year = tsql.period_parts(table["p"])
    assert year == [(12, 0, 0)] and year[0].months == 12
    assert tsql.period_parts(table["s"].to_pylist()[0]["period"]) == (12, 0, 0)
    cycles = [tsql.period_parts(c["period"]) for c in table["c"].to_pylist()[0]]
    assert cycles[0] == (12, 0, 0) and cycles[1].months == 0 and cycles[1].days > 5000
    assert isinstance(tsql.period_parts(table["n"])[0], float)  # numeric times: the number
    with pytest.raises(ValueError, match="tsql.period_parts: a datetime.timedelta has lost the INTERVAL's months"):
        tsql.period_parts(lossy)


def test_daily_periods_read_in_whole_days_or_months(con):
    # synthetic: a weekly and a 30.4-day cycle on daily rows; the period arguments take INTERVALs in months
    daily = """(SELECT DATE '2023-01-02' + to_days(i) AS day, {} AS v FROM range(730) r(i))"""
    weekly, monthly = con.execute(
        "SELECT (SELECT dominant_period_agg(v, day)::VARCHAR FROM {}), (SELECT dominant_period_agg(v, day)::VARCHAR "
        "FROM {})".format(
            daily.format("sin(2 * pi() * i / 7) + 0.3 * cos(2 * pi() * i / 3.1)"),
            daily.format("sin(2 * pi() * i / 30.436875)"),
        )
    ).fetchall()[0]
    assert (weekly, monthly) == ("7 days", "1 month")
    smooth = con.execute(
        f"""SELECT harmonic_smooth_agg(v, day, period := INTERVAL 1 YEAR) = harmonic_smooth_agg(v, day, period :=
                       365.2425),
                   harmonic_profile_agg(v, day, INTERVAL 1 MONTH, anchor := 'first')
                       = harmonic_profile_agg(v, day, 30.436875, anchor := 'first')
            FROM {daily.format("sin(2 * pi() * i / 365.2425) + i / 100")}"""
    ).fetchall()[0]
    assert smooth == (True, True)


@pytest.fixture(scope="module")
def jfk(con):
    """Monthly passengers at JFK airport, 1977-2015 (TCPD, van den Burg & Williams 2020), loaded twice over:
    each July and August arrive as two rows at the same month, a third and the rest."""
    path = Path(__file__).resolve().parents[1].parent / "shared" / "data" / "tcpd" / "datasets" / "jfk_passengers"
    if not path.exists():
        pytest.skip("shared/data/tcpd is not beside the repository")
    data = json.loads((path / "jfk_passengers.json").read_text())
    months = [dt.date.fromisoformat(m + "-01") for m in data["time"]["raw"]]
    counts = [int(x) for x in data["series"][0]["raw"]]
    rows = []
    for month, count in zip(months, counts):
        parts = [count // 3, count - count // 3] if month.month in (7, 8) else [count]
        rows += [(month, part) for part in parts]
    con.register("jfk_rows", pa.table({"month": [r[0] for r in rows], "passengers": [r[1] for r in rows]}))
    return counts


def test_counts_loaded_in_several_rows_add_up_with_same_time_sum(con, jfk):
    summed, averaged, by_list, grid = con.execute(
        """SELECT seasonality_agg(passengers, month, same_time := 'sum'), seasonality_agg(passengers, month),
                  seasonality($counts::DOUBLE[]), on_grid(list(passengers), list(month), same_time := 'sum')
           FROM jfk_rows""",
        {"counts": jfk},
    ).fetchall()[0]
    assert grid == jfk  # the months' rows add up to the published counts
    assert summed["strength"] == by_list["strength"] and summed["p_value"] == by_list["p_value"]
    assert summed["period"] == dt.timedelta(days=360)  # the summer peak makes a yearly cycle
    # the default mean halves every summer: the peak becomes a trough, and the strongest cycle is half a year
    assert averaged["strength"] < summed["strength"] and averaged["period"] == dt.timedelta(days=180)


def test_first_and_last_do_not_depend_on_row_order(con, jfk):
    query = """SELECT on_grid(list(passengers), list(month), same_time := 'first'),
                      on_grid(list(passengers), list(month), same_time := 'last'),
                      seasonality_agg(passengers, month, same_time := 'first'),
                      seasonality_agg(passengers, month, same_time := 'last')
               FROM (SELECT * FROM jfk_rows ORDER BY {})"""
    answers = [
        con.execute(query.format(order)).fetchall()[0] for order in ("month", "hash(passengers)", "passengers DESC")
    ]
    assert answers[0] == answers[1] == answers[2]
    first, last, _, _ = answers[0]
    summer = [i for i in range(len(jfk)) if i % 12 in (6, 7)]
    assert [first[i] for i in summer] == [jfk[i] // 3 for i in summer]  # the smaller of two rows at one time
    assert [last[i] for i in summer] == [jfk[i] - jfk[i] // 3 for i in summer]


def test_same_time_error_names_the_function_and_the_time(con, jfk):
    for call in (
        "acf_agg(passengers, month, same_time := 'error')",
        "on_grid(list(passengers), list(month), same_time := 'error')",
    ):
        with pytest.raises(
            duckdb.Error, match=r"(acf_agg|on_grid): several rows at 1977-07-01 \(same_time := 'error'\)"
        ):
            con.execute(f"SELECT {call} FROM jfk_rows").fetchall()
    (ok,) = con.execute(
        "SELECT acf_agg(passengers, month, same_time := 'error') FROM jfk_rows WHERE month(month) NOT IN (7, 8)"
    ).fetchall()[0]
    assert ok is not None
    with pytest.raises(
        duckdb.Error, match="acf_agg: same_time must be one of 'mean', 'sum', 'first', 'last', 'error', got 'median'"
    ):
        con.execute("SELECT acf_agg(passengers, month, same_time := 'median') FROM jfk_rows").fetchall()


def test_calendar_phase_zero_of_numbers_is_zero(con):
    rows = con.execute(
        """SELECT harmonic_profile_agg(v, t, 10, harmonics := 1), harmonic_profile_agg(v, t, 10, harmonics := 1,
                                                                                    anchor := 'first')
           FROM (SELECT 100 + i AS t, cos(2 * pi() * (i + 100) / 10) AS v FROM range(5, 45) r(i))"""
    ).fetchall()
    calendar, first = rows[0]
    assert calendar == pytest.approx(np.cos(2 * np.pi * np.arange(10) / 10), abs=1e-12)
    assert calendar == list(np.roll(first, 5))


def test_results_do_not_depend_on_row_order(con, sst):
    query = """SELECT dominant_period_agg(temperature, month), seasonality_agg(temperature, month),
                      change_points_agg(temperature, month), harmonic_smooth_agg(temperature, month),
                      acf_agg(temperature, month, max_lag := 13), trend_test_agg(temperature, month)
               FROM {table}"""
    first = con.execute(query.format(table="sst")).fetchall()
    con.execute("CREATE OR REPLACE TEMP TABLE shuffled AS SELECT * FROM sst ORDER BY hash(month) DESC")
    con.execute("INSERT INTO shuffled SELECT * FROM sst WHERE month_index = 20")  # a duplicate row: same mean
    assert con.execute(query.format(table="shuffled")).fetchall() == first


def test_explicit_steps(con, sst):
    same, daily = con.execute(
        """SELECT on_grid(list(temperature), list(month), step := INTERVAL 1 MONTH)
                      = on_grid(list(temperature), list(month)),
                  len(on_grid(list(temperature), list(month), step := '1 day'))
           FROM sst"""
    ).fetchall()[0]
    assert same and daily == (dt.date(1994, 12, 1) - dt.date(1990, 1, 1)).days + 1
    (quarters,) = con.execute(
        "SELECT len(on_grid([1, 2, 3], [DATE '2020-01-01', DATE '2020-07-01', DATE '2021-01-01'], step := '3 months'))"
    ).fetchall()[0]
    assert quarters == 5


@pytest.mark.parametrize(
    ("query", "message"),
    [
        ("SELECT on_grid([1, 2], [1, 2, 3])", "on_grid: values and times must have the same length"),
        ("SELECT on_grid([1, 2], [1, 2], fill := 'nearest')", "fill must be one of 'null', 'zero', 'linear'"),
        ("SELECT on_grid([1, 2], [1, 2], step := 0)", "on_grid: step must be > 0, got 0"),
        ("SELECT on_grid([1, 2], [1, 2], step := INTERVAL 1 DAY)", "step must be a number for numeric times"),
        ("SELECT on_grid([1, 2], [DATE '2020-01-01', DATE '2020-02-01'], step := 2)", "must be an INTERVAL"),
        ("SELECT on_grid([1, 2], [DATE '2020-01-01', DATE '2020-02-01'], step := 'fortnight')", "got 'fortnight'"),
        ("SELECT on_grid([1, 2], [DATE '2020-01-01', DATE '2021-02-01'], step := '1 month 2 days')", "not both"),
        ("SELECT on_grid([1, 2], ['a', 'b'])", "time must be DATE, TIMESTAMP, TIMESTAMPTZ or a number, got VARCHAR"),
        (
            "SELECT acf_agg(v, uuid()) FROM (VALUES (1), (2), (3)) x(v)",
            "acf_agg: time must be DATE, TIMESTAMP, TIMESTAMPTZ or a number, got UUID",
        ),
        (
            "SELECT dominant_period_agg(v, t, fill := 'nearest') FROM (VALUES (1, 1), (2, 2)) x(v, t)",
            "dominant_period_agg: fill must be one of",
        ),
        (
            "SELECT acf_agg(v, t, max_lag := 0) FROM (VALUES (1, 1), (2, 2)) x(v, t)",
            "acf_agg: max_lag must be >= 1, got 0",
        ),
        (
            "SELECT harmonic_profile_agg(v, t, INTERVAL 90 DAY) FROM "
            "(SELECT i AS v, DATE '2024-01-01' + to_months(i) AS t FROM range(100) r(i))",
            "cannot be counted in the grid's steps",
        ),
        (
            "SELECT on_grid([1, 2], [TIMESTAMP '2000-01-01', TIMESTAMP '2024-01-01'], step := '1 second')",
            "on_grid: the step makes a grid of",
        ),
    ],
)
def test_nonsense_is_an_error_that_names_the_function(con, query, message):
    with pytest.raises(duckdb.Error, match=message) as error:
        con.execute(query).fetchall()
    assert "Traceback" not in str(error.value)


def test_null_and_empty_lists(con):
    rows = con.execute(
        "SELECT on_grid(x, y) FROM "
        "(VALUES (NULL, [1]), ([1], NULL), ([]::INTEGER[], []::INTEGER[]), ([5], [3])) v(x, y)"
    ).fetchall()
    assert [r[0] for r in rows] == [None, None, [], [5.0]]


def test_an_interval_argument_counts_each_groups_own_steps(con):
    rows = con.execute(
        """WITH hourly AS (SELECT 'hourly' AS g, TIMESTAMP '2024-01-01' + to_hours(i) AS t, sin(2 * pi() * i / 24) AS v
                           FROM range(24 * 7) r(i)),
                halfhourly AS (SELECT 'half-hourly' AS g, TIMESTAMP '2024-01-01' + to_minutes(30 * i) AS t,
                                      sin(2 * pi() * i / 48) AS v FROM range(48 * 7) r(i))
           SELECT g, len(harmonic_profile_agg(v, t, INTERVAL 1 DAY)),
                  round(epoch(dominant_period_agg(v, t).span) / 3600, 3)
           FROM (SELECT * FROM hourly UNION ALL SELECT * FROM halfhourly) GROUP BY g ORDER BY g"""
    ).fetchall()
    assert rows == [("half-hourly", 48, 24.0), ("hourly", 24, 24.0)]  # a one-day cycle, in hours


# --- how a group's rows reach the UDF, and the pieces the UDF works in ----------------------------


def _received(settings: dict, sql: str) -> pa.Array:
    """The observations column that an *_agg UDF receives for ``sql`` (one threaded scan: rows in table order)."""
    c = tsql.connect(config={"threads": 1})
    for name, value in settings.items():
        c.execute(f"SET {name} = {value}")
    seen = []

    def keep(observations):
        seen.append(observations)
        return pa.array(np.zeros(len(observations)))

    c.create_function("keep_observations", keep, ["UHUGEINT[]"], "DOUBLE", type="arrow")
    c.execute(sql.replace("OBSERVATIONS", "keep_observations(__tsql_observations('acf_agg', v, t))")).fetchall()
    c.close()
    return seen[0]


@pytest.mark.parametrize("settings", [{}, {"arrow_lossless_conversion": "true"}, {"arrow_large_buffer_size": "true"}])
def test_every_value_and_time_arrives_bit_for_bit(settings):
    """A row travels as one UHUGEINT (tick bits above value bits): awkward doubles come back exact,
    NULL as NaN, whatever Arrow type the session's settings give it."""
    from tsql.binding import observations

    values = ["-0.0", "5e-324", "-1.7976931348623157e308", "'inf'", "'-nan'", "NULL", "0.1", "-2.5"]
    times = ["-0.0", "1e-300", "2", "3.5", "1e15", "NULL", "-7", "8"]
    rows = ", ".join(f"({t}::DOUBLE, {v}::DOUBLE)" for t, v in zip(times, values))
    column = _received(settings, f"SELECT OBSERVATIONS FROM (VALUES {rows}) x(t, v)")
    ticks, got = observations(column)
    expected = duckdb.sql(f"SELECT list(t), list(v) FROM (VALUES {rows}) x(t, v)").fetchall()[0]
    as_array = [np.array([np.nan if x is None else x for x in xs]) for xs in expected]
    for ours, theirs in zip((ticks.values, got.values), as_array):
        missing = np.isnan(theirs)
        assert np.array_equal(np.isnan(ours), missing)
        assert ours[~missing].tobytes() == theirs[~missing].tobytes()  # bit for bit: -0.0 stays -0.0
    assert np.signbit(got.values[4])  # -nan keeps its sign bit: NaN payloads are not rewritten


def test_a_batch_whose_last_group_has_no_time_is_not_a_crash(con):
    rows = con.execute(
        """SELECT g, autocorrelation_agg(v, t) FROM (VALUES (1, 1.0, 1), (1, 2.0, 2), (1, 3.0, 3), (1, 1.0, 4),
                                                           (2, 1.0, NULL)) x(g, v, t)
           GROUP BY ALL ORDER BY g"""
    ).fetchall()
    assert rows == [(1, pytest.approx(-0.29545454545454547)), (2, None)]  # numpy's lag-1 ACF of 1, 2, 3, 1


def test_the_udf_pieces_do_not_change_any_answer(con, monkeypatch):
    """The UDF works on pieces of about 65,536 observations, and acf's FFT on buckets of equal lengths:
    neither tiny pieces nor a group computed alone may change a bit of any answer."""
    import tsql.forms.agg

    rng = np.random.default_rng(4)
    n_groups, n_points = 1200, 80  # buckets of equal lengths big enough for numpy to reuse temporaries
    days = np.tile(np.arange(n_points), n_groups)
    keep = rng.random(len(days)) > 0.1
    table = pa.table(
        {
            "g": np.repeat(np.arange(n_groups), n_points)[keep],
            "t": pa.array(np.datetime64("2020-01-01", "D") + days[keep]).cast(pa.date32()),
            "v": rng.normal(size=len(days))[keep] + np.sin(days[keep] / 2),
        }
    )
    con.register("pieces_table", table)
    query = """SELECT g, acf_agg(v, t, max_lag := 45), autocorrelation_agg(v, t, lag := 2), seasonality_agg(v, t),
                      harmonic_smooth_agg(v, t, harmonics := 2)
               FROM pieces_table GROUP BY g ORDER BY g"""
    whole = con.execute(query).fetchall()
    monkeypatch.setattr(tsql.forms.agg, "PIECE_POINTS", 1000)
    pieces = con.execute(query).fetchall()
    alone = [con.execute(query.replace("GROUP BY", f"WHERE g = {g} GROUP BY")).fetchall()[0] for g in (0, 57, 1199)]
    con.unregister("pieces_table")
    assert repr(pieces) == repr(whole)  # repr shows every bit of a float
    assert repr(alone) == repr([whole[0], whole[57], whole[1199]])


# --- a group's answer does not depend on the other groups of its batch ------------------------------


def _outcome(con, sql: str) -> list:
    """The rows of ``sql``, or the error it raises (either must not depend on the other groups)."""
    try:
        return con.execute(sql).fetchall()
    except duckdb.Error as error:
        return [str(error).split("\n")[0]]


def test_near_equal_spacings_are_judged_within_the_group():
    """Spacings 1.000001, 0.999999, 1, 1 are three spacings to nine digits of the group's own times (the
    most common is 1); another group with far larger times in the same batch must not merge them."""
    c = tsql.connect(config={"threads": 1})
    c.execute(
        """CREATE TABLE near AS SELECT 'a' AS g, t, t AS v FROM unnest([0, 1.000001, 2, 3, 4]::DOUBLE[]) u(t)
           UNION ALL SELECT 'b', t, t FROM unnest([0, 1e6, 2e6, 4e6]::DOUBLE[]) u(t)"""
    )
    query = "SELECT g, [r.time FOR r IN harmonic_smooth_agg(v, t, harmonics := 1)] FROM near {} GROUP BY g ORDER BY g"
    together = c.execute(query.format("")).fetchall()
    alone = c.execute(query.format("WHERE g = 'a'")).fetchall()
    c.close()
    assert alone == [("a", [0.0, 1.0, 2.0, 3.0, 4.0])]
    assert together[0] == alone[0]


def test_a_one_row_group_gets_the_same_answer_alone_and_among_regular_groups():
    """A group of one row has no step; an hourly group beside it must not lend it one."""
    c = tsql.connect(config={"threads": 1})
    c.execute(
        """CREATE TABLE one AS SELECT 1 AS g, TIMESTAMP '2024-01-01' + to_hours(i) AS t, sin(i / 3.0) AS v
                               FROM range(24 * 7) r(i)
           UNION ALL SELECT 2, TIMESTAMP '2024-03-01', 1.0"""
    )
    query = "SELECT g, harmonic_profile_agg(v, t, INTERVAL 1 DAY) FROM one {} GROUP BY g ORDER BY g"
    together = _outcome(c, query.format(""))
    alone = _outcome(c, query.format("WHERE g = 2"))
    c.close()
    if isinstance(alone[0], str):  # an error alone: the same error with the other group
        assert together == alone
    else:
        assert together[1] == alone[0]


def test_a_group_with_a_stray_far_time_is_null_and_the_others_are_answered(con):
    # docs/behaviour.md: group 'a' is hourly apart from one row 2,000 years on, so its own step
    # (an hour) would need about 17.5 million grid points (at most 10 million): 'a' gets NULL,
    # 'b' its answer
    rows = con.execute(
        """
        SELECT g, dominant_period_agg(v, t) FROM (
            SELECT 'a' AS g, TIMESTAMP '2000-01-01' + to_hours(i) AS t, sin(i / 7.0 * 2 * pi()) AS v
            FROM range(400) r(i)
            UNION ALL SELECT 'a', TIMESTAMP '4000-01-01', 0.0
            UNION ALL SELECT 'b', TIMESTAMP '2000-01-01' + to_hours(i), sin(i / 7.0 * 2 * pi()) FROM range(400) r(i)
        ) GROUP BY g ORDER BY g
        """
    ).fetchall()
    assert rows[0] == ("a", None)
    assert rows[1][0] == "b" and rows[1][1] is not None


SPAN_TEXTS = [
    "1 month", "2 months", "1 day", "1 week", "3 hours", "1 year", "90 minutes", "1.5 days", "1 month 2 days",
    "01:00:00", "10:30", "-1 day", "1 day ago", "12", " 2 ", "1.5", "1 mon", "2 weeks", "1 d", "1 h", "1m", "1 min",
    "1 s", "1 ms", "1 us", "1 decade", "1 quarter", "2 days 03:00:00", "1DAY", "1 Day", "0.5 seconds", "1 years",
    "1 hour 30 minutes", "1 century", "1.25 weeks", "1.5 years", "100 microseconds", "-01:30", "3 days ago",
    "fortnight", "day", "P1D", "+1 day", "1e3 days", "inf", "nan", "1e2", "0x10", "", "1.5 months",
]  # fmt: skip


@pytest.mark.parametrize("text", SPAN_TEXTS)
def test_span_text_reads_as_duckdb_reads_it(text):
    """The Spark host reads span text without DuckDB: what it reads must be what DuckDB's casts give."""
    from tsql.forms.time import read_span

    row = duckdb.sql("SELECT TRY_CAST($1 AS INTERVAL) AS i, TRY_CAST($1 AS DOUBLE) AS d", params=[text])
    expected = row.to_arrow_table().to_pylist()[0]
    _, interval, number = read_span(text)
    assert number == expected["d"] or (number != number and expected["d"] != expected["d"])
    if text == "1.5 months":  # documented: a fraction of a month is not read
        assert interval is None and expected["i"] is not None
    else:
        assert interval == expected["i"]
