"""The page of ``seriesql report``: plain data in, one self-contained HTML file out.

The data goes into the page as JSON. The charts are drawn with plotly.js, inlined once per page
(about 4.8 MB) from the optional ``plotly`` package (``pip install 'seriesql[report]'``); a small
script (``report_page.js``, inlined with ``report_page.css``) builds each figure from the data,
draws the charts below the fold only when they come near the view, and runs the table (sort,
filter, pages, small SVG sparklines), which grows by a few hundred bytes per series.
"""

from __future__ import annotations

import html
import json
from importlib.resources import files
from typing import Any

__all__ = ["CAUTION", "plotly_script", "render"]

CAUTION = (
    "These results are statistical indications computed from the data (p-values, q-values, cycles, change "
    "points, distances). They are not trading, staffing or safety advice: look at the series, and know the "
    "business behind them, before acting on a result."
)


def plotly_script() -> str:
    """plotly.js, to inline once per page; raises ImportError when plotly is not installed."""
    from plotly.offline import get_plotlyjs

    return get_plotlyjs()


def _asset(name: str) -> str:
    return files("tsql").joinpath(name).read_text(encoding="utf-8")


def _sql_block(title: str, sql: str | None) -> str:
    if not sql:
        return ""
    return f'<details class="sql"><summary>{html.escape(title)}</summary><pre>{html.escape(sql)}</pre></details>'


def _json(data: Any) -> str:
    text = json.dumps(data, separators=(",", ":"), allow_nan=False, default=str)
    return text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")


def render(data: dict, script: str | None = None) -> str:
    """The HTML page of one screen (see :func:`tsql.reporting.gather` for ``data``); ``script`` is
    :func:`plotly_script`'s text, read when not given."""
    script = plotly_script() if script is None else script
    if "</script" in script.lower():  # it would end the page's script element early
        raise ValueError("the plotly script holds '</script'")
    e = html.escape
    facts, cols = data["facts"], data["columns"]
    sql = data["sql"]
    source = data["source"]
    source_text = source if "\n" not in source and len(source) < 80 else "a query"
    level = data["level"]
    missing = facts["missing_values"]
    load = ""
    if data["load"]:
        by = "hour of day" if data["load"]["phase"] == "hour" else "day of week"
        load = (
            f"<h2>Expected load by {by}</h2><p class='meta'>The mean at each {by} (line) and the 10th to 90th "
            f"percentile of the residual-adjusted values there (band), for the first {len(data['load']['profiles'])} "
            f"series by name. A value's residual is its distance from the slow level (the centred moving average "
            f"over one {'day' if by == 'hour of day' else 'week'}, as in a classical decomposition); the band is the "
            f"{by}'s mean plus the spread of its residuals about their mean, so a trend or a slow drift does not "
            "widen it. Only rows present are counted: a missing row is not read as zero.</p>"
            f"<div class='grid' id='load'></div>{_sql_block('SQL of this section', sql.get('load'))}"
        )
    groups = ""
    if data["groups"] or "groups" in sql:
        groups = (
            "<h2>Look-alike groups</h2><p class='meta'>The flagged series (at most 100) grouped by k-medoids on "
            "the DTW distance of their z-scored curves (dtw_clusters); each chart overlays the members (grey) on "
            "the medoid (black).</p><div class='grid' id='groups'></div>"
            f"{_sql_block('SQL of this section', sql.get('groups'))}"
        )
    else:
        groups = "<div id='groups' hidden></div>"
    missing_note = f" {missing:,} NULL values are read as missing." if missing else ""
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><meta name="viewport" content="width=device-width, initial-scale=1">
<title>Screen of {e(source_text)}</title><style>{_asset("report_page.css")}</style></head>
<body><main>
<h1>Screen of {e(source_text)}</h1>
<p class="meta">{facts["rows"]:,} rows; series <code>{e(cols["series"])}</code>, time <code>{e(cols["time"])}</code>
({e(facts["time_type"])}), value <code>{e(cols["value"])}</code>; false-discovery level {level:g};
change-point model '{e(data["model"])}'.{missing_note}</p>
<div class="caution"><b>Caution.</b> {e(CAUTION)}</div>
<h2>Overview</h2>
<div class="cards">
<div class="card"><b id="n-series"></b><span>series</span></div>
<div class="card"><b id="n-seasonal"></b><span>seasonal (cycle q &le; {level:g})</span></div>
<div class="card"><b id="n-trending"></b><span>trending (trend q &le; {level:g})</span></div>
<div class="card"><b id="n-changes"></b><span>with regime changes</span></div>
</div>
<div class="panel"><div class="meta">The strongest cycle of each series: its period against the share of variance
it explains (red: seasonal at q &le; {level:g}). Hover a point for the series.<span id="scatter-note"></span></div>
<div id="scatter"></div></div>
{_sql_block("SQL of the screen (one GROUP BY; Benjamini-Hochberg q-values)", sql["screen"])}
{_sql_block("SQL of the overview (over the screen's result)", sql["overview"].replace("$level", repr(level)))}
<h2>Every series</h2>
<div class="controls"><input type="search" id="filter" placeholder="filter by name">
<label><input type="checkbox" id="only-flagged"> flagged only</label>
<button id="prev">&larr;</button><button id="next">&rarr;</button><span id="page-info" class="meta"></span></div>
<table id="screen-table"><thead><tr id="heads"></tr></thead><tbody id="rows"></tbody></table>
<p class="meta">Click a heading to sort. q: Benjamini-Hochberg q-value of the cycle
(Fisher's g against white and red noise) or the trend (Mann-Kendall); tau: Kendall's tau of the trend;
changes: PELT change points (hover for their times); acf(1): lag-1 autocorrelation; entropy: spectral
entropy (near 0: one clean cycle, near 1: noise). The chart is the series on its grid in at most 32 bucket
means.</p>
<h2>Flagged series</h2>
<p class="meta">{data["flagged"]:,} series are flagged (a q-value &le; {level:g} or a change point);
{len(data["details"])} are drawn, taking in turn the strongest cycle, the strongest trend and the most change points
left: values (blue), smooth curve (orange: a level, a trend and 3 harmonics of the cycle), segment levels
(green) and change points (red, dashed); a series longer than 2,000 points is drawn at every k-th point.
The rest are in the table.</p>
<div id="details"></div>
{_sql_block("SQL of this section", sql.get("details"))}
{groups}
{load}
<script type="application/json" id="report-data">{_json({k: v for k, v in data.items() if k != "sql"})}</script>
<script>{script}</script>
<script>{_asset("report_page.js")}</script>
</main></body></html>
"""
