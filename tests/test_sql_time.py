"""Honest time through SQL: on_grid, and *_agg forms that see missing periods and answer in time terms."""

import datetime as dt

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
            "SELECT harmonic_profile_agg(v, t, INTERVAL 1 MONTH) FROM "
            "(SELECT i AS v, TIMESTAMP '2024-01-01' + to_hours(i) AS t FROM range(100) r(i))",
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
