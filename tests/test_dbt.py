"""dbt host: the tiny project in tests/dbt_project runs tsql functions through the tsql.dbt plugin."""

import datetime
import os
import shutil
import subprocess
import sys
from pathlib import Path

import duckdb
import numpy as np
import pytest

import tsql

pytest.importorskip("dbt.adapters.duckdb", reason="dbt-duckdb is not installed (pip install 'seriesql[dbt]')")

from dbt.adapters.duckdb.plugins import BasePlugin  # noqa: E402

PROJECT = Path(__file__).parent / "dbt_project"
MONTHS = [datetime.date(2021 + m // 12, m % 12 + 1, 1) for m in range(48)]
SHIFT_ITEM, SHIFT_MONTH = "garden_hose", MONTHS[30]
SEASONAL = {"sunscreen", "heating_oil", "coffee_pods", "printer_ink"}

DIRECT_DIAGNOSTICS = """
    SELECT item, count(*) AS n_months, seasonality_agg(units, month) AS seasonality,
           change_points_agg(units, month) AS change_points
    FROM monthly_units GROUP BY item
"""
DIRECT_FLAGS = f"""
    SELECT item, seasonality.period, seasonality.p_value < 0.01, len(change_points), change_points[1]
    FROM ({DIRECT_DIAGNOSTICS}) ORDER BY item
"""


def write_seed(path: Path) -> None:
    """Units sold per item and month: yearly and four-month cycles, one level shift, one plain noise."""
    rng = np.random.default_rng(20240601)
    t = np.arange(48)
    shape = {
        "sunscreen": 40 + 25 * np.sin(2 * np.pi * t / 12),
        "heating_oil": 60 + 30 * np.cos(2 * np.pi * t / 12),
        "coffee_pods": 80 + 15 * np.sin(2 * np.pi * t / 4),
        "printer_ink": 30 + 10 * np.cos(2 * np.pi * t / 4 + 1.0),
        SHIFT_ITEM: np.where(t < 30, 20.0, 45.0),
        "batteries": np.full(48, 50.0),
    }
    lines = ["item,month,units"]
    # rows shuffled, so the models must order by month themselves
    rows = [(item, m) for item in shape for m in range(48)]
    for i in rng.permutation(len(rows)):
        item, m = rows[i]
        units = shape[item][m] + rng.normal(0.0, 3.0)
        lines.append(f"{item},{MONTHS[m].isoformat()},{units:.3f}")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def dbt(project: Path, tmp_path: Path, *args: str) -> subprocess.CompletedProcess:
    """Run one dbt command in a fresh process of this interpreter's environment."""
    # not the dbt console script: its first line may name another interpreter, with another tsql
    command = [sys.executable, "-m", "dbt.cli.main"]
    env = dict(os.environ)
    env.update(
        DBT_PROFILES_DIR=str(project),
        DBT_PROJECT_DIR=str(project),
        DBT_LOG_PATH=str(tmp_path / "logs"),
        DBT_TARGET_PATH=str(tmp_path / "target"),
        DBT_SEND_ANONYMOUS_USAGE_STATS="false",
        DBT_VERSION_CHECK="false",
        DBT_PARTIAL_PARSE="false",
        TSQL_DBT_DATABASE=str(tmp_path / "warehouse.duckdb"),
    )
    return subprocess.run(command + list(args), cwd=project, env=env, capture_output=True, text=True, timeout=600)


@pytest.fixture(scope="module")
def warehouse(tmp_path_factory) -> Path:
    tmp_path = tmp_path_factory.mktemp("dbt")
    project = tmp_path / "project"
    shutil.copytree(PROJECT, project)
    (project / "seeds").mkdir()
    write_seed(project / "seeds" / "monthly_units.csv")
    for command in (["seed"], ["run"]):
        done = dbt(project, tmp_path, *command)
        assert done.returncode == 0, f"dbt {command[0]} failed:\n{done.stdout}\n{done.stderr}"
    return tmp_path / "warehouse.duckdb"


def test_table_model_equals_the_same_query_run_directly(warehouse):
    con = tsql.connect(str(warehouse), read_only=True)
    try:
        model = con.execute("SELECT * FROM item_diagnostics ORDER BY item").fetchall()
        direct = con.execute(f"{DIRECT_DIAGNOSTICS} ORDER BY item").fetchall()
    finally:
        con.close()
    assert len(model) == 6
    assert model == direct


def test_view_model_over_the_table_agrees(warehouse):
    con = tsql.connect(str(warehouse), read_only=True)
    try:
        model = con.execute(
            "SELECT item, period, is_seasonal, n_changes, first_change FROM item_flags ORDER BY item"
        ).fetchall()
        direct = con.execute(DIRECT_FLAGS).fetchall()
    finally:
        con.close()
    assert model == direct
    flags = {row[0]: row for row in model}
    # the planted truth of the seed
    assert {item for item, row in flags.items() if row[2]} >= SEASONAL
    assert not flags["batteries"][2]
    assert flags[SHIFT_ITEM][3:] == (1, SHIFT_MONTH)


def test_models_are_readable_without_tsql(warehouse):
    # the table stores values; the view calls only built-in SQL, so plain DuckDB reads both
    con = duckdb.connect(str(warehouse), read_only=True)
    try:
        assert con.execute("SELECT count(*) FROM item_diagnostics").fetchone() == (6,)
        assert con.execute("SELECT count(*) FROM item_flags WHERE is_seasonal").fetchone()[0] >= len(SEASONAL)
    finally:
        con.close()


def test_plugin_registers_on_connection_and_cursor():
    # loaded the way dbt-duckdb loads a profile's `plugins: - module: tsql.dbt`
    plugin = BasePlugin.create("tsql.dbt")
    con = duckdb.connect()
    try:
        plugin.configure_connection(con)
        assert con.execute("SELECT change_points([1, 1, 1, 1, 9, 9, 9, 9])").fetchone() == ([5],)
        # a cursor is a new connection as far as TEMP macros go
        cursor = con.cursor()
        with pytest.raises(duckdb.CatalogException):
            cursor.execute("SELECT change_points([1, 1, 1, 1, 9, 9, 9, 9])")
        plugin.configure_cursor(cursor)
        assert cursor.execute("SELECT change_points([1, 1, 1, 1, 9, 9, 9, 9])").fetchone() == ([5],)
    finally:
        con.close()


def test_tsql_imports_without_dbt():
    code = "import sys, tsql; sys.exit(any(m == 'dbt' or m.startswith('dbt.') for m in sys.modules))"
    assert subprocess.run([sys.executable, "-c", code], timeout=120).returncode == 0
