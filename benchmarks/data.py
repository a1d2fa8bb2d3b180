"""Seeded benchmark data: numpy arrays, and the same data as DuckDB tables.

Every grouped table has the columns ``g`` (INTEGER group), ``t`` (DATE, one day apart) and
``v`` (DOUBLE), stored in time order across groups (day 1 of every group, then day 2, ...),
the way a warehouse table grows.
"""

from __future__ import annotations

import duckdb
import numpy as np
import pyarrow as pa

FIRST_DAY = np.datetime64("2000-01-01", "D")


def seasonal(groups: int, points: int, seed: int = 11) -> np.ndarray:
    """``groups`` noisy series of ``points`` days: a level, a weak trend, a 7-, 12- or 24-day cycle."""
    rng = np.random.default_rng(seed)
    k = np.arange(points)
    period = rng.choice([7.0, 12.0, 24.0], groups)[:, None]
    amplitude = rng.uniform(0.5, 3.0, (groups, 1))
    phase = rng.uniform(0, 2 * np.pi, (groups, 1))
    level = rng.normal(100, 10, (groups, 1))
    slope = rng.normal(0, 1e-3, (groups, 1))
    return (
        level + slope * k + amplitude * np.sin(2 * np.pi * k / period + phase) + rng.standard_normal((groups, points))
    )


def shifted(groups: int, points: int, seed: int = 8) -> np.ndarray:
    """``groups`` noisy series of ``points`` values with 0-4 level shifts each."""
    rng = np.random.default_rng(seed)
    levels = np.zeros((groups, points))
    for g in range(groups):
        for start in rng.integers(10, points - 10, rng.integers(0, 5)):
            levels[g, start:] += rng.normal(0, 4)
    return levels + rng.standard_normal((groups, points))


def piecewise(rng: np.random.Generator, n: int, n_changes: int) -> np.ndarray:
    """One series of ``n`` points with ``n_changes`` level shifts at least 20 points from the ends."""
    cuts = np.sort(rng.choice(np.arange(20, n - 20), size=n_changes, replace=False))
    levels = rng.normal(0.0, 2.0, n_changes + 1)
    return np.repeat(levels, np.diff(np.r_[0, cuts, n])) + rng.standard_normal(n)


def walks(count: int, length: int, seed: int = 3) -> np.ndarray:
    """``count`` random walks of ``length`` steps."""
    return np.cumsum(np.random.default_rng(seed).standard_normal((count, length)), axis=1)


def rows_table(values: np.ndarray) -> pa.Table:
    """A (groups x points) matrix as (g, t, v) rows in time order across groups."""
    groups, points = values.shape
    days = FIRST_DAY + np.arange(points)
    return pa.table(
        {
            "g": pa.array(np.tile(np.arange(groups, dtype=np.int32), points)),
            "t": pa.array(np.repeat(days, groups)).cast(pa.date32()),
            "v": pa.array(values.T.ravel()),
        }
    )


def store(con: duckdb.DuckDBPyConnection, name: str, table: pa.Table) -> None:
    """Copy an Arrow table into a DuckDB table of that name."""
    con.register("__arrow_source", table)
    con.execute(f"CREATE OR REPLACE TABLE {name} AS SELECT * FROM __arrow_source")
    con.unregister("__arrow_source")


def store_walks(con: duckdb.DuckDBPyConnection, name: str, curves: np.ndarray) -> None:
    """Store curves as (item INTEGER, curve DOUBLE[]), one row per curve."""
    store(con, name, pa.table({"item": np.arange(len(curves), dtype=np.int32), "curve": list(curves)}))
