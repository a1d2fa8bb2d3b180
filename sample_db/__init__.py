"""The tsql sample warehouse: invented demo data with its planted truth, built the same every time.

The scenario is made up. Quillmoor Supply is an invented mail-order supplier of garden,
camping, craft and household goods. Its warehouse is one DuckDB file with these tables:

``items(item, name, category)``
    3,000 items (``SKU-0001`` ...), each with an invented name and one of eight categories.
``monthly_sales(item, month, units)``
    Units sold per item and month (``month`` is the month's first day), January 2019 to
    December 2024. Units are Poisson counts, so non-negative integers. Some items have a
    few months with no row at all (absent, not zero).
``hourly_contacts(queue, hour, contacts)``
    Contacts per hour at five help-desk queues over eight weeks from Monday 2 September
    2024, 00:00. An hour without contacts has no row, as in an event log.
``daily_prices(instrument, day, price)``
    Daily prices of 36 invented instruments of a made-up exchange, Monday to Friday (no
    weekend rows, no holidays), 2021 to 2024, rounded to cents.
``truth(subject, property, value)``
    Every planted fact, all as text (see below).
``about(key, value)``
    ``kind`` = ``tsql sample warehouse`` marks the file as ours; ``generator_version``,
    ``scenario``, and the record spans ``first_month``/``last_month``,
    ``first_hour``/``last_hour``, ``first_day``/``last_day``.

Properties in ``truth``. A subject is ``'item SKU-0001'``, ``'queue orders'`` or
``'instrument ALDER'``; numbers are written as text.

Items (every item has ``seasonal`` and ``trend``):

- ``seasonal``: ``yes`` if a cycle was planted, else ``no`` (noise, or noise and a trend).
- ``period_months``: the planted cycle, ``12``, ``6`` or ``3`` (seasonal items only).
- ``peak_month``: calendar month (1-12) in which a yearly cycle peaks (12-month items only).
- ``trend``: ``up``, ``down`` or ``none``; a trend changes the log of the expected units by
  0.10 to 0.35 a year.
- ``looks_like``: another item (value ``item SKU-...``) whose curve has the same shape at a
  very different volume; written in both directions for each of the 200 pairs.
- ``volume_ratio``: on the larger item of a look-alike pair, its units divided by the
  other's (10 to 40); it copies the other's cycle, trend and noise, plus Poisson noise.
- ``missing_months``: comma-separated month starts (``2021-04-01,2023-10-01``) that have
  no row in ``monthly_sales``; an item without this fact has all 72 months. Never the
  first or last month, never an item of a look-alike pair.

Queues:

- ``peak_hour``: hour of day (0-23) at which the expected number of contacts peaks; the
  daily curve is smooth and symmetric about it.
- ``weekday_contacts``: expected contacts on a Monday to Friday.
- ``weekend_factor``: Saturdays and Sundays expect this fraction of a weekday.

Instruments:

- ``behaviour``: ``trend`` (log price on a straight line plus independent daily noise),
  ``random_walk`` (no drift), ``volatility_shift`` (a random walk whose volatility jumps at
  ``regime_change``) or ``trend_reversal`` (a trend whose drift changes sign at
  ``regime_change``).
- ``volatility``: for a random walk, the standard deviation of its daily log returns
  (before a shift); for a trend, that of the daily noise about its line.
- ``volatility_after``: the same after the shift (``volatility_shift`` only).
- ``drift_per_year``: log-price change per year of 261 weekdays (``trend`` and
  ``trend_reversal``; before the reversal); its sign gives the direction.
- ``drift_per_year_after``: the drift after the reversal (``trend_reversal`` only).
- ``regime_change``: the first day of the new regime (``volatility_shift`` and
  ``trend_reversal``).

Building is deterministic: every table has its own fixed seed, so the same version of
the generator writes the same rows, value for value. :func:`build` always writes afresh;
:func:`ensure` reuses a warehouse of the current generator version and rebuilds an older
one. Neither ever overwrites a file that is not a sample warehouse.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa

from .tables import (
    FIRST_MONTH,
    N_MONTHS,
    business_days,
    contact_hours,
    daily_prices,
    hourly_contacts,
    items_and_sales,
)

__all__ = [
    "GENERATOR_VERSION",
    "TABLES",
    "NotASampleWarehouse",
    "build",
    "default_path",
    "ensure",
    "is_sample_warehouse",
]

MARKER = "tsql sample warehouse"
GENERATOR_VERSION = "1"
FILE_NAME = "sample_warehouse.duckdb"
SCENARIO = "Quillmoor Supply, an invented mail-order supplier of garden, camping, craft and household goods"
SEEDS = {"items": 20190101, "contacts": 20240902, "prices": 20210104}
TABLES = ("items", "monthly_sales", "hourly_contacts", "daily_prices", "truth", "about")
#: DuckDB writes this at byte 8 of its database files.
DUCKDB_MAGIC = b"DUCK"

COMMENTS = {
    "items": "Invented items of Quillmoor Supply.",
    "monthly_sales": "Units sold per item and month; some months have no row.",
    "hourly_contacts": "Help-desk contacts per queue and hour; hours without contacts have no row.",
    "daily_prices": "Weekday prices of invented instruments.",
    "truth": "Every fact the generator planted: (subject, property, value).",
    "about": "Marks this file as a tsql sample warehouse.",
}


class NotASampleWarehouse(FileExistsError):
    """The target path holds something that is not a sample warehouse; it is left untouched."""


def default_path() -> Path:
    """``$XDG_CACHE_HOME/seriesql/sample_warehouse.duckdb``, or under ``~/.cache`` when that is unset."""
    cache = os.environ.get("XDG_CACHE_HOME", "")
    base = Path(cache) if cache and Path(cache).is_absolute() else Path.home() / ".cache"
    return base / "seriesql" / FILE_NAME


def _about(path: Path) -> dict[str, str] | None:
    """The ``about`` table of a sample warehouse at ``path``, or None for anything else."""
    try:
        with path.open("rb") as f:
            if f.read(12)[8:12] != DUCKDB_MAGIC:
                return None
        with duckdb.connect(str(path), read_only=True) as con:
            about = dict(con.execute("SELECT key, value FROM about").fetchall())
    except (OSError, duckdb.Error):
        return None
    return about if about.get("kind") == MARKER else None


def is_sample_warehouse(path: str | os.PathLike) -> bool:
    """True if ``path`` is a DuckDB file written by this generator (any version)."""
    return _about(Path(path)) is not None


def _about_table() -> pa.Table:
    months = (FIRST_MONTH + np.array([0, N_MONTHS - 1])).astype("datetime64[D]")
    hours, days = contact_hours(), business_days()
    rows = {
        "kind": MARKER,
        "generator_version": GENERATOR_VERSION,
        "scenario": SCENARIO,
        "first_month": str(months[0]),
        "last_month": str(months[1]),
        "first_hour": str(hours[0].astype("datetime64[s]")).replace("T", " "),
        "last_hour": str(hours[-1].astype("datetime64[s]")).replace("T", " "),
        "first_day": str(days[0]),
        "last_day": str(days[-1]),
    }
    return pa.table({"key": list(rows), "value": list(rows.values())})


def _tables() -> dict[str, pa.Table]:
    items, sales, item_facts = items_and_sales(np.random.default_rng(SEEDS["items"]))
    contacts, queue_facts = hourly_contacts(np.random.default_rng(SEEDS["contacts"]))
    prices, instrument_facts = daily_prices(np.random.default_rng(SEEDS["prices"]))
    facts = sorted(item_facts + queue_facts + instrument_facts)
    truth = pa.table({name: [f[i] for f in facts] for i, name in enumerate(("subject", "property", "value"))})
    return {
        "items": items,
        "monthly_sales": sales,
        "hourly_contacts": contacts,
        "daily_prices": prices,
        "truth": truth,
        "about": _about_table(),
    }


def _write(path: Path) -> None:
    with duckdb.connect(str(path)) as con:
        for name, table in _tables().items():
            con.register("incoming", table)
            con.execute(f"CREATE TABLE {name} AS SELECT * FROM incoming")
            con.unregister("incoming")
            con.execute(f"COMMENT ON TABLE {name} IS '{COMMENTS[name]}'")
        con.execute("CHECKPOINT")


def build(path: str | os.PathLike) -> Path:
    """Write the sample warehouse to ``path`` and return it.

    The file is written next to ``path`` under a temporary name and renamed into place at
    the end, so a half-built file never remains. Parent folders are created. An existing
    sample warehouse is rebuilt; any other existing file raises :class:`NotASampleWarehouse`
    (a ``FileExistsError``) and is left untouched.
    """
    path = Path(path).expanduser()
    if path.exists() and not is_sample_warehouse(path):
        raise NotASampleWarehouse(
            f"tsql.sample_db.build: {path} exists and is not a tsql sample warehouse (or cannot be read); "
            "it was left untouched, choose another path"
        )
    path.parent.mkdir(parents=True, exist_ok=True)
    workdir = Path(tempfile.mkdtemp(prefix=f".{path.name}.", dir=path.parent))
    try:
        _write(workdir / path.name)
        os.replace(workdir / path.name, path)
    finally:
        shutil.rmtree(workdir, ignore_errors=True)
    return path


def ensure(path: str | os.PathLike | None = None) -> Path:
    """Return the sample warehouse at ``path`` (default: :func:`default_path`), building it if needed.

    A warehouse of the current generator version is reused; one of an older version is rebuilt.
    """
    path = default_path() if path is None else Path(path).expanduser()
    about = _about(path)
    if about is not None and about.get("generator_version") == GENERATOR_VERSION:
        return path
    return build(path)
