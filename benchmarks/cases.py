"""The benchmark cases, as data: which query, on which table, against what, and the bar it must meet.

A grouped case is one expression per group, timed as
``SELECT count(r) FROM (SELECT g, <expr> AS r FROM <table> GROUP BY g)`` so that the result is
computed in full but not converted to Python objects; a pair case is one expression per pair of
an SQL self-join (each unordered pair once).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import duckdb
import numpy as np
from dtaidistance import dtw as dtaidistance
from scipy import stats

from benchmarks import data, loops


@dataclass(frozen=True)
class Sizes:
    """How big each table is, how often each query runs, and how long a reference loop may take."""

    name: str
    groups: int  # the O(n) functions: groups x points
    points: int
    change_groups: int  # change points: groups x points
    change_points: int
    walks: int  # DTW all pairs: curves x length
    walk_length: int
    pelt_short: int  # one series against ruptures
    pelt_long: int
    trend_long: int  # one long series for trend_test
    trend_check: int  # a series short enough for scipy's theilslopes, to check the slope is exact
    scale_lengths: tuple[int, ...]  # series lengths at scale_groups series
    scale_groups: int
    scale_counts: tuple[int, ...]  # numbers of series at scale_points points
    scale_points: int
    repeat: int = 3
    loop_budget: float = 1.0  # seconds per reference loop (fewer series when a full loop would take longer)
    loop_repeat: int = 3


FULL = Sizes(
    "full", 10_000, 1_000, 4_000, 500, 500, 36, 3_000, 100_000, 200_000, 5_000,
    (250, 1_000, 4_000), 500, (2_500, 5_000, 10_000), 250, loop_budget=1.0,
)  # fmt: skip
QUICK = Sizes(
    "quick", 800, 400, 400, 250, 150, 36, 600, 20_000, 20_000, 2_000,
    (128, 512), 250, (1_024, 4_096), 64, loop_budget=0.2, loop_repeat=1,
)  # fmt: skip
TINY = Sizes(
    "tiny", 40, 128, 20, 120, 12, 20, 300, 2_000, 2_000, 500,
    (64, 128), 20, (20, 40), 64, loop_budget=0.02, loop_repeat=1,
)  # fmt: skip
PRESETS = {s.name: s for s in (FULL, QUICK, TINY)}


@dataclass(frozen=True)
class Bar:
    """A bar a row must meet. ``kind``: 'floor', 'native', 'compiled' (ours / theirs <= limit),
    'faster' (compiled reference / ours >= limit), 'loop' (export-and-loop / ours >= limit, per
    series or pair), 'rss' (our peak memory / the floor query's <= limit), 'seconds' (ours < limit)."""

    kind: str
    limit: float

    def text(self) -> str:
        return {
            "floor": f"≤ {self.limit:g}× floor",
            "native": f"≤ {self.limit:g}× native",
            "compiled": f"≤ {self.limit:g}× compiled",
            "faster": f"≥ {self.limit:g}× faster than compiled",
            "loop": f"≥ {self.limit:g}× faster than loop",
            "rss": f"RSS ≤ {self.limit:g}× floor",
            "seconds": f"< {self.limit:g} s",
        }[self.kind]

    def met(self, value: float) -> bool:
        if self.kind in ("faster", "loop"):
            return bool(value >= self.limit)
        if self.kind == "seconds":
            return bool(value < self.limit)
        return bool(value <= self.limit)


@dataclass(frozen=True)
class Reference:
    """A comparison: a label and what to run. ``sql`` for native SQL (``{table}`` is filled in); ``run``
    for a compiled reference (given the table's numpy data); ``per_series``/``per_pair`` for a loop."""

    label: str
    sql: str | None = None
    run: Callable[[np.ndarray], object] | None = None
    per_series: Callable | None = None
    per_pair: Callable | None = None


@dataclass(frozen=True)
class Case:
    function: str
    form: str  # 'list', 'agg' or 'pairs'
    table: str
    expr: str
    native: Reference | None = None
    compiled: Reference | None = None
    loop: Reference | None = None
    bars: tuple[Bar, ...] = ()
    check: Callable[[duckdb.DuckDBPyConnection, dict, object], tuple[bool, str]] | None = None
    """Compares the answer with an outside one, given (connection, the tables' arrays, the compiled
    reference's output); returns (agrees, what was compared)."""
    note: str = ""
    rss_bar: Bar = field(default=Bar("rss", 1.5))

    @property
    def name(self) -> str:
        return f"{self.function} ({self.form}) on {self.table}"


# --------------------------------------------------------------------------- #
# tables
# --------------------------------------------------------------------------- #

PAIR_TABLES = {"walks"}
FLOOR = "list_sum(list(v ORDER BY t))"
PAIR_FLOOR = "list_sum(a.curve) + list_sum(b.curve)"


def query(table: str, expr: str) -> str:
    """The timed SQL of an expression on a table."""
    if table in PAIR_TABLES:
        return f"SELECT count(r) FROM (SELECT {expr} AS r FROM {table} a JOIN {table} b ON a.item < b.item)"
    return f"SELECT count(r) FROM (SELECT g, {expr} AS r FROM {table} GROUP BY g)"


def floor_query(table: str) -> str:
    return query(table, PAIR_FLOOR if table in PAIR_TABLES else FLOOR)


def build(con: duckdb.DuckDBPyConnection, sizes: Sizes) -> dict[str, np.ndarray]:
    """Create every table; returns each table's values as a (groups x points) matrix."""
    rng = np.random.default_rng(2024)
    arrays = {
        "series": data.seasonal(sizes.groups, sizes.points),
        "shifts": data.shifted(sizes.change_groups, sizes.change_points),
        "walks": data.walks(sizes.walks, sizes.walk_length),
        "pelt_short": (data.piecewise(rng, sizes.pelt_short, 8) * 5.0 + 50.0)[None, :],
        "pelt_long": (data.piecewise(rng, sizes.pelt_long, 40) * 5.0 + 50.0)[None, :],
        "trend_long": data.seasonal(1, sizes.trend_long, seed=5),
        "trend_check": data.seasonal(1, sizes.trend_check, seed=6),
    }
    for points in sizes.scale_lengths:
        arrays[f"length_{points}"] = data.seasonal(sizes.scale_groups, points, seed=points)
    for groups in sizes.scale_counts:
        arrays[f"count_{groups}"] = data.seasonal(groups, sizes.scale_points, seed=groups)
    for name, values in arrays.items():
        if name in PAIR_TABLES:
            data.store_walks(con, name, values)
        else:
            data.store(con, name, data.rows_table(values))
    return arrays


def work(table: str, values: np.ndarray) -> dict[str, int]:
    groups, points = values.shape
    if table in PAIR_TABLES:
        return {"series": groups, "points": points, "pairs": groups * (groups - 1) // 2, "rows": groups}
    return {"groups": groups, "points": points, "rows": groups * points}


# --------------------------------------------------------------------------- #
# checks of the answers (cheap; the tests check the methods)
# --------------------------------------------------------------------------- #


def check_dtw(con: duckdb.DuckDBPyConnection, arrays: dict, matrix: np.ndarray) -> tuple[bool, str]:
    got = con.execute(
        "SELECT a.item, b.item, dtw_distance(a.curve, b.curve) FROM walks a JOIN walks b ON a.item < b.item"
    ).fetchall()
    worst = max(abs(d - matrix[i, j]) for i, j, d in got)
    return bool(worst <= 1e-9), f"largest |SQL − dtaidistance| over all pairs: {worst:.1e}"


def check_pelt(con: duckdb.DuckDBPyConnection, arrays: dict, ends: list[int]) -> tuple[bool, str]:
    # a numeric penalty and no cycle removed: the search alone, against ruptures (see loops.bic_pelt)
    (ours,) = con.execute(
        "SELECT change_points(list(v ORDER BY t), penalty := 2 * ln(count(*)), seasonal := 'none') FROM pelt_short"
    ).fetchone()
    theirs = [end + 1 for end in ends[:-1]]  # ruptures gives segment ends, the last one n
    same = list(ours) == theirs
    return same, f"same change points as ruptures: {'yes' if same else 'NO'} ({len(ours)} changes)"


def check_sen(con: duckdb.DuckDBPyConnection, arrays: dict, _: object) -> tuple[bool, str]:
    (ours,) = con.execute("SELECT trend_test(list(v ORDER BY t)).slope FROM trend_check").fetchone()
    x = arrays["trend_check"][0]
    theirs = stats.theilslopes(x).slope
    same = math.isclose(ours, theirs, rel_tol=1e-12, abs_tol=1e-15)
    return same, f"Sen slope equal to scipy.stats.theilslopes on a {len(x):,}-point series: {'yes' if same else 'NO'}"


# --------------------------------------------------------------------------- #
# the cases
# --------------------------------------------------------------------------- #

LAG_CORR = Reference(
    "lag() + corr()",
    sql="SELECT count(r) FROM (SELECT g, corr(v, v_prev) AS r FROM "
    "(SELECT g, v, lag(v) OVER (PARTITION BY g ORDER BY t) AS v_prev FROM {table}) GROUP BY g)",
)
OLS_SLOPE = Reference(
    "regr_slope (OLS slope, no test)",
    sql="SELECT count(r) FROM (SELECT g, regr_slope(v, t - DATE '2000-01-01') AS r FROM {table} GROUP BY g)",
)
C_MATRIX = Reference(
    "dtaidistance distance_matrix_fast (C)", run=lambda x: dtaidistance.distance_matrix_fast(x, compact=False)
)
RUPTURES = Reference("ruptures Pelt, l2, jump 1", run=lambda x: loops.bic_pelt(x[0]))


def loop(label: str, per_series: Callable) -> Reference:
    return Reference(f"pandas + {label}", per_series=per_series)


def pair_loop(label: str, per_pair: Callable) -> Reference:
    return Reference(f"pandas + {label} per pair", per_pair=per_pair)


def both_forms(function: str, list_expr: str, agg_expr: str, **kwargs) -> list[Case]:
    return [Case(function, "list", "series", list_expr, **kwargs), Case(function, "agg", "series", agg_expr, **kwargs)]


def registry_cases(covered: set[str]) -> list[Case]:
    """A function without a case of its own, measured from its registry entry against the floor only
    (its first test arguments; a reference loop and bars belong in :func:`cases`)."""
    from tsql.registry import FUNCTIONS

    rows: list[Case] = []
    for fn in FUNCTIONS:
        if fn.name in covered or fn.series != ("values",):
            continue
        args = f", {fn.test_args[0]}" if fn.test_args[0] else ""
        note = "from its registry entry: no reference yet"
        rows.append(Case(fn.name, "list", "series", f"{fn.name}(list(v ORDER BY t){args})", note=note))
        if fn.aggregate:
            rows.append(Case(fn.name, "agg", "series", f"{fn.name}_agg(v, t{args})", note=note))
    return rows


def cases() -> list[Case]:
    """Every public function, in both forms where it has an ``*_agg`` form."""
    at_least_2x = Bar("loop", 2.0)
    rows: list[Case] = []
    rows += both_forms(
        "autocorrelation",
        "autocorrelation(list(v ORDER BY t))",
        "autocorrelation_agg(v, t)",
        native=LAG_CORR,
        loop=loop("statsmodels acf", loops.lag_one_acf),
        bars=(Bar("native", 1.1), at_least_2x),
    )
    rows += both_forms(
        "dominant_period",
        "dominant_period(list(v ORDER BY t))",
        "dominant_period_agg(v, t)",
        loop=loop("scipy periodogram", loops.periodogram_period),
        bars=(Bar("floor", 2.0), at_least_2x),
    )
    rows += both_forms(
        "seasonality",
        "seasonality(list(v ORDER BY t))",
        "seasonality_agg(v, t)",
        loop=loop("scipy periodogram + Fisher g", loops.periodogram_fisher),
        bars=(Bar("floor", 2.5), at_least_2x),
    )
    rows += both_forms(
        "acf",
        "acf(list(v ORDER BY t))",
        "acf_agg(v, t)",
        loop=loop("statsmodels acf", loops.ten_lag_acf),
        bars=(Bar("floor", 2.0), at_least_2x),
    )
    rows += both_forms(
        "ljung_box",
        "ljung_box(list(v ORDER BY t))",
        "ljung_box_agg(v, t)",
        loop=loop("statsmodels acorr_ljungbox", loops.ljung_box_ten),
        bars=(at_least_2x,),
    )
    rows += both_forms(
        "trend_test",
        "trend_test(list(v ORDER BY t))",
        "trend_test_agg(v, t)",
        native=OLS_SLOPE,
        loop=loop("scipy kendalltau + theilslopes", loops.kendall_sen),
        bars=(at_least_2x,),
    )
    rows += both_forms(
        "harmonic_smooth",
        "harmonic_smooth(list(v ORDER BY t))",
        "harmonic_smooth_agg(v, t)",
        loop=loop("numpy lstsq harmonic fit", loops.harmonic_fit),
        bars=(Bar("floor", 2.0), at_least_2x),
    )
    rows += both_forms(
        "harmonic_profile",
        "harmonic_profile(list(v ORDER BY t), 12)",
        "harmonic_profile_agg(v, t, 12)",
        loop=loop("numpy lstsq harmonic fit", loops.harmonic_cycle),
        bars=(at_least_2x,),
    )
    rows.append(
        Case(
            "sparkline",
            "list",
            "series",
            "sparkline(list(v ORDER BY t))",
            loop=loop("numpy + str.join", loops.blocks),
            bars=(at_least_2x,),
        )
    )
    rows.append(
        Case(
            "on_grid",
            "list",
            "series",
            "on_grid(list(v), list(t))",
            loop=loop("Series.asfreq('D')", loops.daily_grid),
            bars=(Bar("floor", 2.0), at_least_2x),
        )
    )
    for form, expr in (("list", "change_points(list(v ORDER BY t))"), ("agg", "change_points_agg(v, t)")):
        rows.append(
            Case(
                "change_points",
                form,
                "shifts",
                expr,
                loop=loop("ruptures Pelt", loops.pelt_series),
                bars=(Bar("floor", 6.0), Bar("loop", 50.0)),
            )
        )
    for form, expr in (("list", "segments(list(v ORDER BY t))"), ("agg", "segments_agg(v, t)")):
        rows.append(
            Case(
                "segments",
                form,
                "shifts",
                expr,
                loop=loop("ruptures Pelt + numpy polyfit", loops.pelt_segments),
                bars=(at_least_2x,),
            )
        )
    rows += [
        Case(
            "dtw_distance",
            "pairs",
            "walks",
            "dtw_distance(a.curve, b.curve)",
            compiled=C_MATRIX,
            loop=pair_loop("dtaidistance distance_fast", loops.dtw_pair),
            bars=(Bar("compiled", 3.0), at_least_2x),
            check=check_dtw,
        ),
        Case(
            "dtw_path",
            "pairs",
            "walks",
            "dtw_path(a.curve, b.curve)",
            loop=pair_loop("dtaidistance warping_path_fast", loops.dtw_path_pair),
            bars=(at_least_2x,),
        ),
        Case(
            "lb_keogh",
            "pairs",
            "walks",
            "lb_keogh(a.curve, b.curve, 3)",
            loop=pair_loop("dtaidistance lb_keogh (C)", loops.lb_keogh_pair),
            bars=(at_least_2x,),
        ),
        Case(
            "cross_correlation",
            "pairs",
            "walks",
            "cross_correlation(a.curve, b.curve)",
            note="every pair of a self-join against the floor only: no reference loop yet",
        ),
        Case(
            "lead_lag",
            "pairs",
            "walks",
            "lead_lag(a.curve, b.curve)",
            note="every pair of a self-join against the floor only: no reference loop yet",
        ),
        Case(
            "change_points",
            "list",
            "pelt_short",
            "change_points(list(v ORDER BY t))",
            compiled=RUPTURES,
            bars=(Bar("faster", 50.0),),
            check=check_pelt,
            note="one series; the compiled reference is ruptures' exact PELT on the numpy array",
        ),
        Case(
            "change_points",
            "list",
            "pelt_long",
            "change_points(list(v ORDER BY t))",
            note="one series; ruptures not run (its time grows faster than n: tens of seconds at 3,000 points)",
        ),
    ]
    rows += [
        Case(
            "trend_test",
            form,
            "trend_long",
            expr,
            bars=(Bar("seconds", 10.0),),
            check=check_sen if form == "list" else None,
            note="one series; scipy's theilslopes would list n(n-1)/2 slopes (2e10 at 200,000 points)",
        )
        for form, expr in (("list", "trend_test(list(v ORDER BY t))"), ("agg", "trend_test_agg(v, t)"))
    ]
    one_by_one = (
        "seasonality_agg(v, t).p_value + trend_test_agg(v, t).p_value + autocorrelation_agg(v, t) + "
        "ljung_box_agg(v, t).p_value + adf_test_agg(v, t).p_value + spectral_entropy_agg(v, t) + "
        "len(change_points_agg(v, t))"
    )  # a sum, NULL when a part is: count() needs every part (it would drop the aggregates of a struct_pack)
    rows.append(Case("screen", "list", "series", "screen(list(v ORDER BY t))", note="against the floor only"))
    rows.append(
        Case(
            "screen",
            "agg",
            "series",
            "screen_agg(v, t)",
            native=Reference("its parts one by one", sql=query("{table}", one_by_one)),
            bars=(Bar("floor", 4.0), Bar("native", 1.0)),
            note="every field equals its own function (tests/test_screen.py); benchmarks/screen_sql.py has the parts",
        )
    )
    rows += registry_cases({c.function for c in rows})
    return rows


# scaling: time against series length and against the number of series, and DuckDB threads 1 vs 2
SCALING = (
    FLOOR,
    "autocorrelation_agg(v, t)",
    "dominant_period(list(v ORDER BY t))",
    "seasonality_agg(v, t)",
    "change_points(list(v ORDER BY t))",
    "trend_test(list(v ORDER BY t))",
)
