"""`seriesql report`: the screen's SQL against outside references, the page in headless Chromium, bad input."""

from __future__ import annotations

import contextlib
import datetime as dt
import importlib.util
import io
import json
import re
import shutil
import sys
from pathlib import Path

import duckdb
import numpy as np
import pytest

import tsql
from tsql.cli import main
from tsql.reporting import MISSING_PLOTLY, ReportError, screen_queries

LEVEL = 0.05
needs_plotly = pytest.mark.skipif(
    importlib.util.find_spec("plotly") is None, reason="plotly is not installed (the report extra)"
)


@pytest.fixture(scope="module")
def warehouse(sample_warehouse) -> Path:
    return sample_warehouse


@pytest.fixture(scope="module")
def con(warehouse):
    with tsql.connect(str(warehouse), read_only=True) as con:
        con.execute("SET enable_progress_bar = false")
        yield con


@pytest.fixture(scope="module")
def pages(con, tmp_path_factory) -> dict[str, Path]:
    """The sample warehouse's reports: monthly sales, hourly contacts, and log prices with model 'trend'."""
    pytest.importorskip("plotly", reason="plotly is not installed (the report extra)")
    folder = tmp_path_factory.mktemp("pages")
    return {
        "sales": tsql.report(
            con, "monthly_sales", series="item", time="month", value="units", path=folder / "sales.html"
        ),
        "contacts": tsql.report(
            con, "hourly_contacts", series="queue", time="hour", value="contacts", path=folder / "contacts.html"
        ),
        "prices": tsql.report(
            con,
            "SELECT instrument, day, ln(price) AS log_price FROM daily_prices",
            series="instrument",
            time="day",
            value="log_price",
            path=folder / "prices.html",
            model="trend",
            details=36,
        ),
    }


def embedded(path: Path) -> dict:
    """The data the page's script draws from."""
    text = path.read_text(encoding="utf-8")
    found = re.search(r'<script type="application/json" id="report-data">(.*?)</script>', text, re.S)
    return json.loads(found.group(1))


def run(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


# --- the screen's SQL -------------------------------------------------------------------------


def test_q_values_are_benjamini_hochberg(con):
    """The screen's q-values against statsmodels' multipletests(method='fdr_bh') on the same p-values."""
    multipletests = pytest.importorskip("statsmodels.stats.multitest").multipletests
    result = con.execute(screen_queries('"monthly_sales"', "item", "month", "units")["screen"])
    columns = [d[0] for d in result.description]
    rows = result.fetchall()
    table = {c: np.array([r[i] for r in rows], dtype=object) for i, c in enumerate(columns)}
    for p_name, q_name in (("season_p", "season_q"), ("trend_p", "trend_q")):
        p = table[p_name]
        present = np.array([x is not None for x in p])
        assert present.sum() > 2900
        expected = multipletests(p[present].astype(float), method="fdr_bh")[1]
        np.testing.assert_allclose(table[q_name][present].astype(float), expected, rtol=1e-12)
        assert all(q is None for q in table[q_name][~present])


def test_overview_equals_the_sql_answers(con, pages):
    """The counts the page shows against the same functions asked directly, BH by statsmodels."""
    multipletests = pytest.importorskip("statsmodels.stats.multitest").multipletests
    rows = con.sql(
        "SELECT seasonality_agg(units, month).p_value, trend_test_agg(units, month).p_value, "
        "len(change_points_agg(units, month)) FROM monthly_sales GROUP BY item"
    ).fetchall()
    season = np.array([r[0] for r in rows], dtype=float)
    trend = np.array([r[1] for r in rows], dtype=float)
    expected = {
        "series": len(rows),
        "seasonal": int(multipletests(season, alpha=LEVEL, method="fdr_bh")[0].sum()),
        "trending": int(multipletests(trend, alpha=LEVEL, method="fdr_bh")[0].sum()),
        "with_changes": sum(1 for r in rows if r[2] > 0),
    }
    data = embedded(pages["sales"])
    assert {k: data["overview"][k] for k in expected} == expected
    # the planted truth, loosely: most of the 1,500 seasonal items (plus look-alike followers) are found
    assert 1400 <= expected["seasonal"] <= 1800


def test_load_profile_peaks_at_the_planted_hour(con, pages):
    """Hourly contacts get an hour-of-day profile whose peak is each queue's planted peak hour (within one)."""
    data = embedded(pages["contacts"])
    assert data["load"]["phase"] == "hour"
    planted = dict(
        con.sql(
            "SELECT replace(subject, 'queue ', ''), value::INTEGER FROM truth WHERE property = 'peak_hour'"
        ).fetchall()
    )
    for queue, profile in data["load"]["profiles"].items():
        assert len(profile) == 24
        peak = max(profile, key=lambda r: r[1])[0]
        assert min(abs(peak - planted[queue]), 24 - abs(peak - planted[queue])) <= 1, queue
        assert all(low <= high and n > 0 for _, _, low, high, n in profile)


@needs_plotly
def test_load_band_is_residual_adjusted(tmp_path):
    """The band is the hour's mean plus the 10th-90th percentiles of the residuals about the slow level, the
    level being classical decomposition's centred 2x24 moving average: checked against statsmodels'
    seasonal_decompose (its trend) and numpy's percentiles (linear, as quantile_cont). On seeded hourly series
    with a steep trend, the raw values' percentiles at an hour would span the trend; the band spans the noise
    (N(0, 3): a 10th-90th width of 2 * 1.2816 * 3, scipy's normal quantile)."""
    seasonal_decompose = pytest.importorskip("statsmodels.tsa.seasonal").seasonal_decompose
    norm = pytest.importorskip("scipy.stats").norm
    rng = np.random.default_rng(7)
    hours = np.arange(60 * 24)
    start = np.datetime64("2024-03-01T00:00")
    curves = {
        "up": 100 + 2.0 * hours / 24 + 20 * np.cos(2 * np.pi * (hours - 14) / 24) + rng.normal(0, 3, hours.size),
        "down": 400 - 3.0 * hours / 24 + 35 * np.cos(2 * np.pi * (hours - 9) / 24) + rng.normal(0, 3, hours.size),
    }
    con = tsql.connect()
    con.execute("SET enable_progress_bar = false")
    for name, x in curves.items():
        con.execute(
            "CREATE OR REPLACE TEMP TABLE part AS SELECT ? AS queue, unnest(?) AS hour, unnest(?) AS contacts",
            [name, list((start + hours.astype("timedelta64[h]")).astype(dt.datetime)), x.tolist()],
        )
        con.execute("CREATE TABLE IF NOT EXISTS load AS FROM part WITH NO DATA")
        con.execute("INSERT INTO load FROM part")
    path = tsql.report(con, "load", series="queue", time="hour", value="contacts", path=tmp_path / "load.html")
    load = embedded(path)["load"]
    assert load["phase"] == "hour" and sorted(load["profiles"]) == ["down", "up"]
    noise = 2 * norm.ppf(0.9) * 3
    for name, x in curves.items():
        level = seasonal_decompose(x, period=24).trend
        whole = ~np.isnan(level)
        profile = np.array(load["profiles"][name], dtype=float)
        np.testing.assert_array_equal(profile[:, 0], np.arange(24))
        for h in range(24):
            at = hours % 24 == h
            residual = (x - level)[at & whole]
            expected = x[at].mean()
            low = expected + np.percentile(residual, 10) - residual.mean()
            high = expected + np.percentile(residual, 90) - residual.mean()
            np.testing.assert_allclose(profile[h, 1:4], [expected, low, high], rtol=1e-3)
            assert profile[h, 4] == at.sum()
            raw = np.percentile(x[at], 90) - np.percentile(x[at], 10)
            assert 0.5 * noise < high - low < 1.6 * noise and raw > 8 * (high - low), (name, h)


def test_look_alike_groups_keep_planted_twins_together(con, pages):
    """Planted look-alike pairs (the same curve at 10-40 times the volume) whose both items were grouped
    share their group; each group's medoid is a member, and the curves are z-scores (numpy's mean and std)."""
    groups = embedded(pages["sales"])["groups"]
    where = {m["series"]: g["cluster"] for g in groups for m in g["members"]}
    pairs = con.sql(
        "SELECT replace(subject, 'item ', ''), replace(value, 'item ', '') FROM truth WHERE property = 'looks_like'"
    ).fetchall()
    both = [(a, b) for a, b in pairs if a in where and b in where]
    assert len(where) == 100 and both
    assert all(where[a] == where[b] for a, b in both)
    for g in groups:
        assert g["medoid"] in {m["series"] for m in g["members"]}
        for m in g["members"]:
            z = np.array(m["z"], dtype=float)
            assert abs(z.mean()) < 0.01 and abs(z.std() - 1) < 0.01


def markup(path: Path) -> str:
    """The page without the text of its inline scripts (plotly.js holds URLs it never fetches on a page like
    this one: map tiles, the cloud editor, licences)."""
    return re.sub(r"(<script[^>]*>).*?(</script>)", r"\1\2", path.read_text(encoding="utf-8"), flags=re.S)


def test_the_page_is_offline(pages):
    """Nothing in the markup or the style a browser would fetch: no http(s) reference, no src, no link, no
    url(); every href is a link inside the page. What the scripts do is checked in Chromium below
    (test_nothing_is_fetched)."""
    for path in pages.values():
        text = markup(path)
        assert text.count("<script") == 3 and "<script src" not in text
        assert "http://" not in text and "https://" not in text
        assert not re.search(r"\bsrc\s*=|<link\b|url\(|@import", text, re.I)
        assert all(h.startswith("#") for h in re.findall(r'href="([^"]*)"', text))
        assert "Caution" in text and "not trading, staffing or safety advice" in text


def test_every_section_shows_its_sql(pages):
    text = pages["sales"].read_text(encoding="utf-8")
    for snippet in (
        "seasonality_agg(value, time)",
        "trend_test_agg",
        "change_points_agg",
        "dtw_clusters(series, grid)",
    ):
        assert snippet in text
    assert "harmonic_smooth_agg" in text and "segments_agg" in text
    assert "quantile_cont(value - level, 0.1)" in pages["contacts"].read_text(encoding="utf-8")


# --- the page in headless Chromium ---------------------------------------------------------------

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
CHROMEDRIVER = shutil.which("chromedriver")
FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--window-size=1280,1600",
    # a page the browser takes for hidden or in the background gets no animation frames, so no
    # IntersectionObserver callbacks and no plotly draws: keep every frame coming under load
    "--disable-backgrounding-occluded-windows",
    "--disable-renderer-backgrounding",
    "--disable-background-timer-throttling",
    # the network off: every host name fails to resolve, and any proxy lookup goes nowhere
    "--host-resolver-rules=MAP * ~NOTFOUND",
    "--proxy-server=127.0.0.1:9",
)
needs_chromium = pytest.mark.skipif(
    CHROMIUM is None or CHROMEDRIVER is None,
    reason="headless Chromium is not installed (Debian: apt-get install chromium chromium-driver)",
)


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    webdriver = pytest.importorskip("selenium.webdriver", reason="selenium is not installed (the test extra)")
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in FLAGS:
        options.add_argument(flag)
    options.add_argument(f"--user-data-dir={tmp_path_factory.mktemp('chromium-profile')}")
    # the console, and every request the page makes (DevTools' Network events)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL", "performance": "ALL"})
    driver = webdriver.Chrome(options=options, service=webdriver.ChromeService(executable_path=CHROMEDRIVER))
    try:
        driver.execute_cdp_cmd("Network.enable", {})
        offline = {"offline": True, "latency": 0, "downloadThroughput": 0, "uploadThroughput": 0}
        driver.execute_cdp_cmd("Network.emulateNetworkConditions", offline)
        yield driver
    finally:
        driver.quit()


def open_page(browser, path: Path):
    """Open a page and wait until its script has drawn what is in view (the overview's plot resolves later)."""
    from selenium.webdriver.support.ui import WebDriverWait

    browser.get(path.resolve().as_uri())
    WebDriverWait(browser, 30).until(lambda b: b.execute_script("return document.body.dataset.ready") == "1")
    return browser


def draw(browser, chart) -> None:
    """Scroll a chart into view and wait until plotly has drawn it (charts below the fold are drawn lazily)."""
    from selenium.common.exceptions import TimeoutException
    from selenium.webdriver.support.ui import WebDriverWait

    browser.execute_script("arguments[0].scrollIntoView({block: 'center'})", chart)
    try:
        WebDriverWait(browser, 60).until(lambda _: chart.get_attribute("data-drawn") == "1")
    except TimeoutException:
        state = browser.execute_script(
            "const r = arguments[0].getBoundingClientRect();"
            "return [document.visibilityState, Math.round(r.top), Math.round(r.height), innerHeight];",
            chart,
        )
        console = [entry["message"] for entry in browser.get_log("browser")]
        raise AssertionError(
            f"chart {chart.get_attribute('id')!r} not drawn in 60 s; page visibility, chart top and height, "
            f"window height: {state}; console: {console}"
        ) from None


def draw_all(browser) -> int:
    charts = browser.find_elements("css selector", ".chart")
    for chart in charts:
        draw(browser, chart)
    return len(charts)


def requests(browser) -> list[str]:
    """The URLs of the requests made since the last call (DevTools' Network.requestWillBeSent)."""
    events = (json.loads(entry["message"])["message"] for entry in browser.get_log("performance"))
    return [e["params"]["request"]["url"] for e in events if e["method"] == "Network.requestWillBeSent"]


@needs_chromium
def test_page_loads_without_console_errors(browser, pages):
    for path in pages.values():
        browser.get_log("browser")
        open_page(browser, path)
        assert draw_all(browser) >= 12
        errors = [entry for entry in browser.get_log("browser") if entry["level"] in ("SEVERE", "WARNING")]
        assert errors == [], path.name


@needs_chromium
def test_nothing_is_fetched(browser, pages, tmp_path):
    """With the network off, opening each page and drawing every chart requests the page's own file and
    nothing else. The control: a page that does fetch shows up in the same log."""
    control = tmp_path / "control.html"
    control.write_text('<!DOCTYPE html><html><body><img src="https://example.invalid/logo.png"></body></html>')
    requests(browser)
    browser.get(control.as_uri())
    assert "https://example.invalid/logo.png" in requests(browser)
    for path in pages.values():
        open_page(browser, path)
        draw_all(browser)
        browser.find_element("id", "next").click()
        assert requests(browser) == [path.resolve().as_uri()], path.name


@needs_chromium
def test_overview_on_screen_equals_the_data(browser, pages):
    open_page(browser, pages["sales"])
    shown = {k: browser.find_element("id", f"n-{k}").text for k in ("series", "seasonal", "trending", "changes")}
    overview = embedded(pages["sales"])["overview"]
    assert shown == {
        "series": f"{overview['series']:,}",
        "seasonal": f"{overview['seasonal']:,}",
        "trending": f"{overview['trending']:,}",
        "changes": f"{overview['with_changes']:,}",
    }
    traces = browser.execute_script(
        "return document.getElementById('scatter').data.map(t => ({name: t.name, x: t.x, text: t.text}))"
    )
    assert sum(len(t["x"]) for t in traces) == overview["series"]
    seasonal = next(t for t in traces if t["name"].startswith("seasonal"))
    assert len(seasonal["x"]) == overview["seasonal"]
    # hovering a point shows its series' name
    browser.execute_script("Plotly.Fx.hover('scatter', [{curveNumber: 1, pointNumber: 0}])")
    hover = browser.find_element("css selector", "#scatter .hovertext").get_attribute("textContent")
    assert seasonal["text"][0] in hover and hover.startswith("SKU-")


def column(browser, index: int) -> list[str]:
    return [td.text for td in browser.find_elements("css selector", f"#rows tr td:nth-child({index + 1})")]


@needs_chromium
def test_the_table_sorts_filters_and_pages(browser, pages):
    open_page(browser, pages["sales"])
    assert len(browser.find_elements("css selector", "#rows tr")) == 50
    heads = browser.find_elements("css selector", "#heads th")
    q_cycle = [h.text for h in heads].index("q cycle")
    heads[q_cycle].click()
    values = [float(v) for v in column(browser, q_cycle)]
    assert values == sorted(values)
    assert browser.find_element("id", "screen-table").get_attribute("data-sort") == "q cycle asc"
    heads[q_cycle].click()
    values = [float(v) for v in column(browser, q_cycle) if v]
    assert values == sorted(values, reverse=True) and values[0] <= 1
    name = [h.text for h in heads].index("series")
    heads[name].click()
    assert column(browser, name)[:2] == ["SKU-0001", "SKU-0002"]
    browser.find_element("id", "next").click()
    assert column(browser, name)[0] == "SKU-0051"
    browser.find_element("id", "filter").send_keys("SKU-002")
    assert column(browser, name) == [f"SKU-{i:04d}" for i in range(20, 30)]


@needs_chromium
def test_change_point_marks_at_the_planted_times(browser, pages, con):
    """Each trend reversal's chart has a mark (a plotly layout shape) within 15 days of the planted day (the
    demo's tolerance), and the marks are the segment starts that segments_agg gives in SQL."""
    open_page(browser, pages["prices"])
    planted = con.sql(
        "SELECT replace(b.subject, 'instrument ', ''), c.value::DATE FROM truth b JOIN truth c USING (subject) "
        "WHERE b.property = 'behaviour' AND b.value = 'trend_reversal' AND c.property = 'regime_change'"
    ).fetchall()
    assert len(planted) == 6
    for name, day in planted:
        chart = browser.find_element("css selector", f'.panel[data-series="{name}"] .chart')
        draw(browser, chart)
        shapes = browser.execute_script("return arguments[0].layout.shapes", chart)
        marks = [dt.date.fromisoformat(s["x0"]) for s in shapes if s["name"] == "change point"]
        assert all(s["x0"] == s["x1"] and s["yref"] == "paper" for s in shapes)
        assert marks and min(abs((m - day).days) for m in marks) <= 15, (name, day, marks)
        (segments,) = con.sql(
            "SELECT segments_agg(ln(price), day, model := 'trend') FROM daily_prices WHERE instrument = ?",
            params=[name],
        ).fetchall()[0]
        assert marks == [s["first"] for s in segments[1:]]
        # the chart's own curves: the values, the smooth curve and the segment levels
        names = browser.execute_script("return arguments[0].data.map(t => t.name)", chart)
        assert names == ["values", "smooth curve", "segment level"]


@needs_chromium
def test_screenshot_is_not_blank(browser, pages):
    image = pytest.importorskip("PIL.Image")
    open_page(browser, pages["sales"])
    picture = image.open(io.BytesIO(browser.get_screenshot_as_png())).convert("RGB")
    pixels = np.asarray(picture).reshape(-1, 3)
    colours = np.unique(pixels, axis=0)
    background = np.mean(np.all(pixels == pixels[0], axis=1))
    assert len(colours) > 50 and background < 0.9


@needs_chromium
@needs_plotly
def test_names_are_text_not_markup(browser, bad, tmp_path):
    """A series named like markup is shown as its text, in the table and on its chart, and breaks nothing."""
    nasty = "</script><b onmouseover=alert(1)>&amp;'\""
    with tsql.connect(str(bad), read_only=True) as c:
        query = f"SELECT {tsql_literal(nasty)} AS s, t, v FROM one UNION ALL SELECT 'b', t, -v * v FROM one"
        path = tsql.report(c, query, series="s", time="t", value="v", path=tmp_path / "r.html")
    browser.get_log("browser")
    open_page(browser, path)
    draw_all(browser)
    assert browser.get_log("browser") == []
    names = [td.text for td in browser.find_elements("css selector", "#rows td:first-child")]
    assert sorted(names) == sorted([nasty, "b"])
    assert browser.find_elements("css selector", "#rows b") == []


def tsql_literal(text: str) -> str:
    return "'" + text.replace("'", "''") + "'"


# --- bad input --------------------------------------------------------------------------------


@pytest.fixture()
def bad(tmp_path):
    path = tmp_path / "bad.duckdb"
    with duckdb.connect(str(path)) as c:
        c.execute("CREATE TABLE empty (s VARCHAR, t DATE, v DOUBLE)")
        c.execute("CREATE TABLE one AS SELECT 'a' s, DATE '2024-01-01' + i::INT t, i::DOUBLE v FROM range(30) _(i)")
        c.execute(
            "CREATE TABLE nulls AS SELECT s, t, NULL::DOUBLE AS v FROM one UNION ALL SELECT 'b', t, NULL FROM one"
        )
        c.execute(
            "CREATE TABLE texts AS SELECT s, t::VARCHAR AS t, v FROM one UNION ALL SELECT 'b', t::VARCHAR, v FROM one"
        )
        c.execute(
            "CREATE TABLE nameless AS SELECT NULL::VARCHAR AS s, t, v FROM one UNION ALL SELECT 'b', t, v FROM one"
        )
    return path


@needs_plotly
@pytest.mark.parametrize(
    "table, message",
    [
        ("empty", "has no rows"),
        ("one", "one series only ('a')"),
        ("nulls", "every v is NULL"),
        ("texts", "column 't' is VARCHAR, not a DATE, TIMESTAMP or number"),
        ("nameless", "rows have a NULL s"),
        ("missing", "cannot read table 'missing'"),
    ],
)
def test_bad_input_is_one_clear_line_and_no_file(bad, tmp_path, table, message):
    out = tmp_path / "page" / "report.html"
    out.parent.mkdir()
    code, printed, err = run(
        ["report", str(bad), "--table", table, "--series", "s", "--time", "t", "--value", "v", "--out", str(out)]
    )
    assert code == 2 and printed == ""
    assert err.count("\n") == 1 and err.startswith("seriesql report: ") and message in err, err
    assert list(out.parent.iterdir()) == []


@needs_plotly
def test_a_failure_while_writing_leaves_no_file(con, tmp_path, monkeypatch):
    import tsql.report_page

    def broken(data, script=None):
        raise RuntimeError("disk full")

    monkeypatch.setattr(tsql.report_page, "render", broken)
    with pytest.raises(RuntimeError):
        tsql.report(con, "hourly_contacts", series="queue", time="hour", value="contacts", path=tmp_path / "r.html")
    assert list(tmp_path.iterdir()) == []


@needs_plotly
def test_a_missing_plotly_is_named_with_its_fix(con, warehouse, tmp_path, monkeypatch):
    """Without plotly (its import made to fail), the call and the command say what needs it and how to get it,
    at once and leaving no file."""
    monkeypatch.setitem(sys.modules, "plotly", None)
    monkeypatch.setitem(sys.modules, "plotly.offline", None)
    with pytest.raises(ReportError) as raised:
        tsql.report(con, "hourly_contacts", series="queue", time="hour", value="contacts", path=tmp_path / "r.html")
    assert str(raised.value) == f"tsql.report: {MISSING_PLOTLY}"
    assert "plotly" in MISSING_PLOTLY and "pip install 'seriesql[report]'" in MISSING_PLOTLY
    argv = ["report", str(warehouse), "--table", "hourly_contacts", "--series", "queue", "--time", "hour"]
    code, printed, err = run([*argv, "--value", "contacts", "--out", str(tmp_path / "r.html")])
    assert (code, printed, err) == (2, "", f"seriesql report: {MISSING_PLOTLY}\n")
    assert list(tmp_path.iterdir()) == []


@needs_plotly
def test_python_errors_name_the_fix(con, tmp_path):
    with pytest.raises(ReportError, match="^tsql.report: value: column 'queue' is VARCHAR, not a number"):
        tsql.report(con, "hourly_contacts", series="hour", time="hour", value="queue", path=tmp_path / "r.html")
    with pytest.raises(ReportError, match="^tsql.report: path must end in .html"):
        tsql.report(con, "hourly_contacts", series="queue", time="hour", value="contacts", path=tmp_path / "r.txt")
    assert list(tmp_path.iterdir()) == []


@needs_plotly
def test_some_null_values_are_missing_values(bad, tmp_path):
    with tsql.connect(str(bad), read_only=True) as c:
        query = (
            "SELECT s, t, CASE WHEN t = DATE '2024-01-05' THEN NULL ELSE v END AS v FROM one "
            "UNION ALL SELECT 'b', t, -v FROM one"
        )
        path = tsql.report(c, query, series="s", time="t", value="v", path=tmp_path / "r.html")
    text = path.read_text(encoding="utf-8")
    assert "1 NULL values are read as missing" in text
    assert embedded(path)["overview"]["series"] == 2


@needs_plotly
def test_the_command_writes_the_page(warehouse, tmp_path):
    out = tmp_path / "contacts.html"
    argv = ["report", str(warehouse), "--table", "hourly_contacts", "--series", "queue", "--time", "hour"]
    code, printed, err = run([*argv, "--value", "contacts", "--out", str(out)])
    assert code == 0 and err == "" and printed.startswith(f"wrote {out} (") and out.exists()
    code, _, err = run([*argv, "--value", "contacts", "--out", str(out)])
    assert code == 2 and "exists; pass --replace" in err


@needs_plotly
def test_the_command_screens_a_query(warehouse, tmp_path):
    out = tmp_path / "prices.html"
    query = "SELECT instrument, day, ln(price) AS log_price FROM daily_prices WHERE instrument < 'D'"
    argv = ["report", str(warehouse), "--query", query, "--series", "instrument", "--time", "day"]
    code, printed, err = run([*argv, "--value", "log_price", "--model", "trend", "--out", str(out)])
    assert code == 0 and err == "" and out.exists()
    data = embedded(out)
    with duckdb.connect(str(warehouse), read_only=True) as c:
        (expected,) = c.sql(f"SELECT count(DISTINCT instrument) FROM ({query})").fetchall()[0]
    assert data["overview"]["series"] == expected and data["model"] == "trend" and data["load"]["phase"] == "weekday"


def test_same_input_same_page(con, pages, tmp_path):
    again = tsql.report(con, "monthly_sales", series="item", time="month", value="units", path=tmp_path / "s.html")
    assert again.read_bytes() == pages["sales"].read_bytes()


@needs_plotly
def test_the_docstring_example_runs():
    import doctest

    import tsql.reporting

    result = doctest.testmod(tsql.reporting)
    assert result.attempted >= 3 and result.failed == 0
