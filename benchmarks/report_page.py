"""The time and the file size of ``seriesql report``, and how long the page takes to open.

    python -m benchmarks.report_page [--series 20000] [--points 120] [--repeat 3] [--out benchmarks/RESULTS_report.md]

Pages for the sample warehouse's three tables, and for ``--series`` seeded synthetic monthly
series of ``--points`` each (a quarter each: yearly cycle, trend, a level shift, noise). For each:
the median seconds to write the page (screen and page, tsql registered and its kernels compiled
beforehand), the file size (plotly.js, about 4.8 MB, included), the bytes per series, and the
seconds headless Chromium takes from navigation to the page's script having drawn what is in view
(the overview and the table; lower charts are drawn when scrolled to): medians of the first open in
a fresh profile and of the second open (when chromium, chromedriver and selenium are installed).
A single run on a shared machine: quote medians, compare within the run.
"""

from __future__ import annotations

import argparse
import os
import platform
import shutil
import statistics
import tempfile
import time
from importlib.metadata import version
from pathlib import Path

import numpy as np
import pyarrow as pa

import tsql
from tsql import sample_db

LINES: list[str] = []
ABOUT = __doc__.split("\n\n", 2)[2].strip()


def show(line: str) -> None:
    LINES.append(line)
    print(line, flush=True)


def synthetic(n_series: int, points: int) -> pa.Table:
    """``(series, month, value)``: seeded mixtures of a cycle, a trend, a level shift and noise."""
    rng = np.random.default_rng(20)
    kind = np.arange(n_series) % 4
    t = np.arange(points)
    level = rng.uniform(50, 500, (n_series, 1))
    values = level * (1 + rng.normal(0, 0.1, (n_series, points)))
    counts = [int((kind == k).sum()) for k in range(3)]
    phase = rng.integers(0, 12, (counts[0], 1))
    values[kind == 0] += level[kind == 0] * 0.4 * np.cos(2 * np.pi * (t - phase) / 12)
    values[kind == 1] += level[kind == 1] * rng.uniform(-0.01, 0.01, (counts[1], 1)) * t
    shift = rng.integers(points // 4, 3 * points // 4, counts[2])
    values[kind == 2] += level[kind == 2] * 0.5 * (t >= shift[:, None])
    months = (np.datetime64("2015-01", "M") + t).astype("datetime64[D]")
    return pa.table(
        {
            "series": pa.array(np.repeat([f"S{i:05d}" for i in range(n_series)], points)),
            "month": pa.array(np.tile(months, n_series)),
            "value": pa.array(values.ravel()),
        }
    )


def open_seconds(path: Path, repeat: int) -> tuple[float, float] | None:
    """Seconds from navigation to ``document.body.dataset.ready`` (what is in view drawn) in headless Chromium
    with the network off: the median of ``repeat`` first opens, each in a fresh profile (plotly.js compiled),
    and the median of the second opens that follow them (compiled code cached)."""
    chromium, driver_path = shutil.which("chromium"), shutil.which("chromedriver")
    try:
        from selenium import webdriver
        from selenium.webdriver.support.ui import WebDriverWait
    except ImportError:
        return None
    if chromium is None or driver_path is None:
        return None
    flags = ("--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--window-size=1280,1600")
    first, then = [], []
    for _ in range(repeat):
        options = webdriver.ChromeOptions()
        options.binary_location = chromium
        for flag in (*flags, "--host-resolver-rules=MAP * ~NOTFOUND", "--proxy-server=127.0.0.1:9"):
            options.add_argument(flag)
        with tempfile.TemporaryDirectory() as profile:
            options.add_argument(f"--user-data-dir={profile}")
            driver = webdriver.Chrome(options=options, service=webdriver.ChromeService(executable_path=driver_path))
            try:
                for times in (first, then):
                    driver.get("about:blank")
                    started = time.perf_counter()
                    driver.get(path.resolve().as_uri())
                    WebDriverWait(driver, 120, poll_frequency=0.02).until(
                        lambda d: d.execute_script("return document.body.dataset.ready") == "1"
                    )
                    times.append(time.perf_counter() - started)
            finally:
                driver.quit()
    return statistics.median(first), statistics.median(then)


def baseline(folder: Path, repeat: int) -> None:
    """A page holding only plotly.js: what any page pays before its own data and charts."""
    from tsql.report_page import plotly_script

    path = folder / "plotly_only.html"
    path.write_text(
        f"<!DOCTYPE html><html><body><script>{plotly_script()}</script>"
        "<script>document.body.dataset.ready = '1'</script></body></html>",
        encoding="utf-8",
    )
    shown = open_seconds(path, repeat)
    opened = "- | -" if shown is None else f"{shown[0]:.2f} | {shown[1]:.2f}"
    show(f"| plotly.js alone | - | - | {path.stat().st_size / 1e6:.2f} | - | {opened} |")


def measure(con, name: str, source: str, columns: tuple[str, str, str], folder: Path, repeat: int, **options):
    series, time_column, value = columns
    path = folder / f"page{len(list(folder.glob('*.html')))}.html"
    seconds = []
    for _ in range(repeat):
        started = time.perf_counter()
        tsql.report(con, source, series=series, time=time_column, value=value, path=path, replace=True, **options)
        seconds.append(time.perf_counter() - started)
    query = source if " " in source else f"SELECT * FROM {source}"
    (count,) = con.sql(f"SELECT count(DISTINCT {series}) FROM ({query})").fetchall()[0]
    size = path.stat().st_size
    shown = open_seconds(path, repeat)
    opened = "- | -" if shown is None else f"{shown[0]:.2f} | {shown[1]:.2f}"
    written = statistics.median(seconds)
    show(f"| {name} | {count:,} | {written:.1f} | {size / 1e6:.2f} | {size / count:,.0f} | {opened} |")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--series", type=int, default=20000)
    parser.add_argument("--points", type=int, default=120)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--out", type=Path, default=None, help="a markdown file for the table (with how it was made)")
    args = parser.parse_args(argv)
    load = os.getloadavg()[0]
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        warehouse = sample_db.build(folder / "warehouse.duckdb")
        with tsql.connect(str(warehouse)) as con:
            con.execute("SET enable_progress_bar = false")
            con.register("synthetic_view", synthetic(args.series, args.points))
            con.execute("CREATE TABLE synthetic AS FROM synthetic_view")
            warm = "SELECT seasonality_agg(units, month), trend_test_agg(units, month), change_points_agg(units, month)"
            con.sql(f"{warm} FROM monthly_sales WHERE item = 'SKU-0001'").fetchall()
            show("| page | series | seconds to write | MB | bytes per series | seconds to open, first | then |")
            show("|---|---:|---:|---:|---:|---:|---:|")
            baseline(folder, args.repeat)
            measure(con, "monthly_sales", "monthly_sales", ("item", "month", "units"), folder, args.repeat)
            measure(con, "hourly_contacts", "hourly_contacts", ("queue", "hour", "contacts"), folder, args.repeat)
            measure(
                con,
                "daily_prices (log, model 'trend')",
                "SELECT instrument, day, ln(price) AS log_price FROM daily_prices",
                ("instrument", "day", "log_price"),
                folder,
                args.repeat,
                model="trend",
            )
            measure(
                con,
                f"synthetic {args.series:,} x {args.points}",
                "synthetic",
                ("series", "month", "value"),
                folder,
                args.repeat,
            )
    if args.out is not None:
        head = (
            "# `seriesql report`: time to write, file size, time to open\n\n"
            f"`python -m benchmarks.report_page --series {args.series} --points {args.points} --repeat {args.repeat}`"
            f" (plotly {version('plotly')}, {platform.python_implementation()} {platform.python_version()}, "
            f"{os.cpu_count()} cores, load average {load:.1f} at the start). {ABOUT}\n\n"
        )
        args.out.write_text(head + "\n".join(LINES) + "\n", encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
