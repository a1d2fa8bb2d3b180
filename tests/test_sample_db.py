"""The sample warehouse: built the same every time, safe with foreign files, and its planted truth shows."""

import datetime as dt
import hashlib
import subprocess
import sys
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa
import pytest

import tsql
from tsql import sample_db

BEHAVIOURS, PATTERNS, QUEUES = sample_db.tables.BEHAVIOURS, sample_db.tables.PATTERNS, sample_db.tables.QUEUES
N_ITEMS, N_MONTHS = sample_db.tables.N_ITEMS, sample_db.tables.N_MONTHS


@pytest.fixture(scope="module")
def warehouse(tmp_path_factory):
    return sample_db.build(tmp_path_factory.mktemp("first") / "nested" / "warehouse.duckdb")


@pytest.fixture(scope="module")
def con(warehouse):
    c = tsql.connect(str(warehouse), read_only=True)
    yield c
    c.close()


def facts(con, prop):
    """{subject id: value} of one truth property, the kind word ('item ', 'queue ', ...) dropped."""
    rows = con.execute("SELECT subject, value FROM truth WHERE property = ?", [prop]).fetchall()
    return {subject.split(" ", 1)[1]: value.removeprefix("item ") for subject, value in rows}


def series(con, table, key, time, value):
    rows = con.execute(f"SELECT {key}, list({value}::DOUBLE ORDER BY {time}) FROM {table} GROUP BY {key}").fetchall()
    return {k: np.array(v) for k, v in rows}


def digest(con, query):
    return hashlib.sha256(repr(con.execute(query).fetchall()).encode()).hexdigest()


def test_builds_the_same_every_time(warehouse, tmp_path_factory):
    again = sample_db.build(tmp_path_factory.mktemp("second") / "warehouse.duckdb")
    with duckdb.connect(str(warehouse), read_only=True) as one, duckdb.connect(str(again), read_only=True) as two:
        for table in sample_db.TABLES:
            query = f"SELECT * FROM {table} ORDER BY ALL"
            assert digest(one, query) == digest(two, query), table


def test_marker_and_spans(con, warehouse):
    about = dict(con.execute("SELECT key, value FROM about").fetchall())
    assert sample_db.is_sample_warehouse(warehouse)
    assert about["kind"] == "tsql sample warehouse" and about["generator_version"] == sample_db.GENERATOR_VERSION
    spans = con.execute(
        """SELECT (SELECT min(month)::VARCHAR || ' ' || max(month) FROM monthly_sales),
                  (SELECT min(day)::VARCHAR || ' ' || max(day) FROM daily_prices)"""
    ).fetchone()
    assert spans == (f"{about['first_month']} {about['last_month']}", f"{about['first_day']} {about['last_day']}")
    first, last = con.execute("SELECT min(hour)::VARCHAR, max(hour)::VARCHAR FROM hourly_contacts").fetchone()
    assert about["first_hour"] <= first <= last <= about["last_hour"]


def test_tables_types_and_counts(con):
    types = dict(
        con.execute(
            "SELECT table_name || '.' || column_name, data_type FROM information_schema.columns"
            " WHERE table_schema = 'main'"
        ).fetchall()
    )
    assert types["monthly_sales.month"] == "DATE" and types["monthly_sales.units"] == "INTEGER"
    assert types["hourly_contacts.hour"] == "TIMESTAMP" and types["hourly_contacts.contacts"] == "INTEGER"
    assert types["daily_prices.day"] == "DATE" and types["daily_prices.price"] == "DOUBLE"
    assert types["truth.value"] == "VARCHAR" and types["items.category"] == "VARCHAR"

    items = con.execute(
        "SELECT count(*), count(DISTINCT item), count(DISTINCT name), count(DISTINCT category) FROM items"
    )
    assert items.fetchone() == (N_ITEMS, N_ITEMS, N_ITEMS, 8)
    gaps = sum(len(v.split(",")) for v in facts(con, "missing_months").values())
    sales = con.execute("SELECT count(*), count(DISTINCT (item, month)), min(units) FROM monthly_sales").fetchone()
    assert sales[:2] == (N_ITEMS * N_MONTHS - gaps,) * 2 and sales[2] >= 0
    orphans = con.execute("SELECT count(*) FROM monthly_sales ANTI JOIN items USING (item)").fetchone()
    assert orphans == (0,)

    contacts = con.execute(
        "SELECT count(DISTINCT queue), count(*) = count(DISTINCT (queue, hour)), min(contacts) FROM hourly_contacts"
    ).fetchone()
    assert contacts[:2] == (len(QUEUES), True) and contacts[2] >= 1  # a quiet hour has no row, never a zero

    prices = con.execute(
        """SELECT count(DISTINCT instrument), count(DISTINCT day), count(*), min(price) > 0,
                  count(*) FILTER (WHERE isodow(day) > 5)
           FROM daily_prices"""
    ).fetchone()
    assert prices[0] == sum(BEHAVIOURS.values()) and prices[2] == prices[0] * prices[1]
    assert prices[3] and prices[4] == 0
    assert 1000 < prices[1] < 1100  # four years of weekdays


def test_truth_covers_every_subject(con):
    assert len(facts(con, "seasonal")) == len(facts(con, "trend")) == N_ITEMS
    assert set(facts(con, "peak_hour")) == set(QUEUES)
    behaviours = list(facts(con, "behaviour").values())
    assert {b: behaviours.count(b) for b in BEHAVIOURS} == BEHAVIOURS
    assert len(facts(con, "regime_change")) == BEHAVIOURS["volatility_shift"] + BEHAVIOURS["trend_reversal"]
    periods = list(facts(con, "period_months").values())
    for name in ("yearly", "half-yearly", "quarterly"):
        count, period, _ = PATTERNS[name]
        assert periods.count(str(period)) >= count  # look-alike followers copy their leader's cycle


def test_missing_months_are_absent_rows(con):
    missing = facts(con, "missing_months")
    assert len(missing) == 150
    months = dict(con.execute("SELECT item, list(month::VARCHAR) FROM monthly_sales GROUP BY item").fetchall())
    every = set(months[next(i for i in months if i not in missing)])
    assert len(every) == N_MONTHS
    for item, value in missing.items():
        gone = set(value.split(","))
        assert 1 <= len(gone) <= 4 and gone <= every
        assert set(months[item]) == every - gone, item
    assert all(len(m) == N_MONTHS for i, m in months.items() if i not in missing)


def test_planted_cycles_are_the_dominant_periods(con):
    periods = facts(con, "period_months")
    found = dict(
        con.execute(
            """SELECT item, dominant_period(list(units::DOUBLE ORDER BY month))
               FROM monthly_sales GROUP BY item HAVING count(*) = ?""",
            [N_MONTHS],
        ).fetchall()
    )
    checked = [(item, float(p), found[item]) for item, p in periods.items() if item in found]
    assert len(checked) > 1400
    assert all(abs(got - planted) < 0.5 for _, planted, got in checked), [c for c in checked if abs(c[2] - c[1]) >= 0.5]


def test_yearly_cycles_peak_in_the_planted_month(con):
    curves = series(con, "monthly_sales", "item", "month", "units")
    errors = []
    for item, month in facts(con, "peak_month").items():
        if len(curves[item]) == N_MONTHS:
            annual = np.sum(curves[item] * np.exp(-2j * np.pi * np.arange(N_MONTHS) / 12))
            peak = (-np.angle(annual) * 12 / (2 * np.pi)) % 12 + 1  # the phase of the fitted yearly sinusoid
            errors.append(abs((peak - int(month) + 6) % 12 - 6))  # in months, across the turn of the year
    assert len(errors) > 900 and max(errors) < 1 and np.mean(np.array(errors) < 0.5) > 0.99


def test_non_seasonal_items_have_no_significant_cycle(con):
    trend = facts(con, "trend")
    quiet = [i for i, v in facts(con, "seasonal").items() if v == "no" and trend[i] == "none"]
    p = dict(
        con.execute(
            "SELECT item, (seasonality(list(units::DOUBLE ORDER BY month))).p_value FROM monthly_sales GROUP BY item"
        ).fetchall()
    )
    seasonal = [i for i, v in facts(con, "seasonal").items() if v == "yes"]
    assert np.mean([p[i] > 0.01 for i in quiet]) > 0.97  # Fisher's g at 1 % on noise
    assert np.mean([p[i] < 0.01 for i in seasonal]) > 0.99


def test_planted_item_trends(con):
    tests = dict(
        con.execute(
            "SELECT item, trend_test(list(units::DOUBLE ORDER BY month)) FROM monthly_sales GROUP BY item"
        ).fetchall()
    )
    for item, trend in facts(con, "trend").items():
        if trend != "none":
            assert tests[item]["p_value"] < 0.01 and np.sign(tests[item]["tau"]) == (1 if trend == "up" else -1), item


def test_look_alikes_are_nearest_by_dtw(con):
    pairs = facts(con, "looks_like")
    assert len(pairs) == 400 and all(pairs[pairs[a]] == a for a in pairs)
    curves = series(con, "monthly_sales", "item", "month", "units")
    rng = np.random.default_rng(7)
    items = sorted(curves)
    rows = []
    for a, b in pairs.items():
        rows.append((a, b, True))
        rows += [(a, c, False) for c in rng.choice(items, 20) if c not in (a, b)]
    con.register("candidates", pa.table(dict(zip(("a", "b", "planted"), map(list, zip(*rows))))))
    nearest = con.execute(
        """WITH curves AS (SELECT item, list(units::DOUBLE ORDER BY month) AS v FROM monthly_sales GROUP BY item),
           scored AS (
               SELECT a, planted, dtw_distance(x.v, y.v, normalize := true) AS d
               FROM candidates JOIN curves x ON x.item = a JOIN curves y ON y.item = b
           )
           SELECT count(*) FILTER (WHERE planted_d < other_d), count(*)
           FROM (SELECT a, min(d) FILTER (WHERE planted) AS planted_d, min(d) FILTER (WHERE NOT planted) AS other_d
                 FROM scored GROUP BY a)"""
    ).fetchall()
    con.unregister("candidates")
    assert nearest == [(400, 400)]


def test_look_alikes_differ_in_volume(con):
    ratio = facts(con, "volume_ratio")
    totals = dict(con.execute("SELECT item, sum(units) FROM monthly_sales GROUP BY item").fetchall())
    pairs = facts(con, "looks_like")
    assert len(ratio) == 200
    for big, r in ratio.items():
        assert totals[big] / totals[pairs[big]] == pytest.approx(float(r), rel=0.03)


def test_queue_peaks_in_the_harmonic_profile(con):
    about = dict(con.execute("SELECT key, value FROM about").fetchall())
    profiles = con.execute(
        """WITH grid AS (
               SELECT queue, hour
               FROM (SELECT DISTINCT queue FROM hourly_contacts),
                    generate_series(?::TIMESTAMP, ?::TIMESTAMP, INTERVAL 1 HOUR) AS g(hour)
           )
           SELECT queue, harmonic_profile(list(coalesce(contacts, 0)::DOUBLE ORDER BY hour), 24)
           FROM grid LEFT JOIN hourly_contacts USING (queue, hour)
           GROUP BY queue""",
        [about["first_hour"], about["last_hour"]],
    ).fetchall()
    peaks = facts(con, "peak_hour")
    assert len(profiles) == len(QUEUES) and about["first_hour"].endswith("00:00:00")  # profile[0] is midnight
    for queue, profile in profiles:
        assert len(profile) == 24 and int(np.argmax(profile)) == int(peaks[queue]), queue


def test_queue_weekday_volumes_with_numpy(con):
    rows = con.execute(
        "SELECT queue, isodow(hour) > 5, count(DISTINCT hour::DATE), sum(contacts) FROM hourly_contacts GROUP BY ALL"
    )
    per_day = {(q, weekend): total / days for q, weekend, days, total in rows.fetchall()}
    weekday, factor = facts(con, "weekday_contacts"), facts(con, "weekend_factor")
    for queue in QUEUES:
        assert per_day[queue, False] == pytest.approx(float(weekday[queue]), rel=0.05)
        ratio = per_day[queue, True] / per_day[queue, False]
        assert ratio == pytest.approx(float(factor[queue]), abs=0.05)


def test_trending_instruments(con):
    behaviour, drift = facts(con, "behaviour"), facts(con, "drift_per_year")
    tests = dict(
        con.execute(
            "SELECT instrument, trend_test(list(price ORDER BY day)) FROM daily_prices GROUP BY instrument"
        ).fetchall()
    )
    trending = [i for i, b in behaviour.items() if b == "trend"]
    assert len(trending) == BEHAVIOURS["trend"]
    for name in trending:
        assert tests[name]["p_value"] < 1e-10 and np.sign(tests[name]["tau"]) == np.sign(float(drift[name])), name
        assert abs(tests[name]["tau"]) > 0.9


def test_random_walks_have_no_drift(con):
    prices = series(con, "daily_prices", "instrument", "day", "price")
    walks = [i for i, b in facts(con, "behaviour").items() if b == "random_walk"]
    for name in walks:
        returns = np.diff(np.log(prices[name]))
        assert abs(returns.mean() / returns.std() * np.sqrt(len(returns))) < 3, name  # t statistic of the mean
        assert abs(np.corrcoef(returns[1:], returns[:-1])[0, 1]) < 0.1, name  # independent steps


def test_volatility_shifts(con):
    behaviour, change = facts(con, "behaviour"), facts(con, "regime_change")
    before, after = facts(con, "volatility"), facts(con, "volatility_after")
    for name in (i for i, b in behaviour.items() if b == "volatility_shift"):
        days, prices = con.execute(
            "SELECT list(day ORDER BY day), list(price ORDER BY day) FROM daily_prices WHERE instrument = ?", [name]
        ).fetchone()
        returns = np.diff(np.log(prices))  # returns[k] is the return of days[k + 1]
        c = days.index(dt.date.fromisoformat(change[name]))
        assert returns[c - 1 :].std() / returns[: c - 1].std() == pytest.approx(
            float(after[name]) / float(before[name]), rel=0.2
        )
        (points,) = con.execute("SELECT change_points(?::DOUBLE[], model := 'meanvar')", [returns.tolist()]).fetchone()
        assert len(points) == 1 and abs(points[0] - c) <= 5, (name, points, c)  # position p is days[p]


def test_trend_reversals(con):
    behaviour, change = facts(con, "behaviour"), facts(con, "regime_change")
    drift, drift_after = facts(con, "drift_per_year"), facts(con, "drift_per_year_after")
    for name in (i for i, b in behaviour.items() if b == "trend_reversal"):
        assert np.sign(float(drift[name])) == -np.sign(float(drift_after[name]))
        days, points = con.execute(
            """SELECT list(day ORDER BY day), change_points(list(ln(price) ORDER BY day), model := 'trend')
               FROM daily_prices WHERE instrument = ?""",
            [name],
        ).fetchone()
        planted = days.index(dt.date.fromisoformat(change[name]))
        assert len(points) == 1 and abs(points[0] - 1 - planted) <= 15, (name, points, planted)


def test_refuses_to_overwrite_a_foreign_file(tmp_path):
    notes = tmp_path / "notes.duckdb"
    notes.write_bytes(b"my own notes, not a database\n")
    other = tmp_path / "other.duckdb"
    with duckdb.connect(str(other)) as c:
        c.execute("CREATE TABLE about (key VARCHAR, value VARCHAR); INSERT INTO about VALUES ('kind', 'mine')")
    for path in (notes, other, tmp_path):
        before = path.read_bytes() if path.is_file() else None
        assert not sample_db.is_sample_warehouse(path)
        for call in (sample_db.build, sample_db.ensure):
            with pytest.raises(sample_db.NotASampleWarehouse, match="not a tsql sample warehouse"):
                call(path)
        if before is not None:
            assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.duckdb", "other.duckdb"]


def test_a_failed_build_leaves_nothing(tmp_path, monkeypatch):
    def broken(rng):
        raise RuntimeError("generator stopped")

    monkeypatch.setattr(sample_db, "daily_prices", broken)
    with pytest.raises(RuntimeError, match="generator stopped"):
        sample_db.build(tmp_path / "warehouse.duckdb")
    assert list(tmp_path.iterdir()) == []


def test_ensure_reuses_a_current_warehouse_and_rebuilds_an_old_one(warehouse, tmp_path):
    stat = warehouse.stat()
    assert sample_db.ensure(warehouse) == warehouse
    assert (warehouse.stat().st_ino, warehouse.stat().st_mtime_ns) == (stat.st_ino, stat.st_mtime_ns)

    old = tmp_path / "old.duckdb"
    old.write_bytes(warehouse.read_bytes())
    with duckdb.connect(str(old)) as c:
        c.execute("UPDATE about SET value = '0' WHERE key = 'generator_version'; DELETE FROM items")
    assert sample_db.is_sample_warehouse(old)
    sample_db.ensure(old)
    with duckdb.connect(str(old), read_only=True) as c:
        assert c.execute("SELECT count(*) FROM items").fetchone() == (N_ITEMS,)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["old.duckdb"]


def test_default_path_is_in_the_cache_folder(tmp_path, monkeypatch):
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    assert sample_db.default_path() == tmp_path / "seriesql" / "sample_warehouse.duckdb"
    home_cache = Path.home() / ".cache" / "seriesql" / "sample_warehouse.duckdb"
    for unusable in ("", "relative/cache"):  # the XDG rules ignore both
        monkeypatch.setenv("XDG_CACHE_HOME", unusable)
        assert sample_db.default_path() == home_cache
    monkeypatch.delenv("XDG_CACHE_HOME")
    assert sample_db.default_path() == home_cache
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    assert sample_db.ensure() == tmp_path / "seriesql" / "sample_warehouse.duckdb"
    assert sample_db.is_sample_warehouse(sample_db.default_path())


def run_command(*args):
    return subprocess.run([sys.executable, "-m", "tsql.sample_db", *args], capture_output=True, text=True)


def test_command_prints_path_and_counts(tmp_path):
    path = tmp_path / "w.duckdb"
    done = run_command(str(path))
    assert done.returncode == 0, done.stderr
    out = done.stdout.splitlines()
    assert out[0] == str(path)
    counts = {line.split()[0]: int(line.split()[1].replace(",", "")) for line in out[1:]}
    assert set(counts) == set(sample_db.TABLES) and counts["items"] == N_ITEMS

    foreign = tmp_path / "mine.txt"
    foreign.write_text("keep me")
    done = run_command(str(foreign))
    assert done.returncode == 2 and "not a tsql sample warehouse" in done.stderr and "Traceback" not in done.stderr
    assert foreign.read_text() == "keep me"
