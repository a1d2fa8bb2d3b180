"""Invariants that hold for every input, checked with hypothesis through SQL (and on kernel batches).

The kernel files test most of these on the kernels directly; here the same statements are made about
what a user gets back from DuckDB: the macros, the argument plumbing, NULL handling and the Arrow
round trip included.
"""

from __future__ import annotations

import math

import numpy as np
import pyarrow as pa
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy import stats

import tsql
from tsql.forms.list_form import list_udf as make_udf
from tsql.kernels.sparkline import BLOCKS
from tsql.registry import BY_NAME

SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])

finite = st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False)
element = st.one_of(finite, finite, finite, finite, st.none())  # about one in five missing
series = st.lists(element, max_size=60)
dense = st.lists(st.floats(-1e3, 1e3, allow_nan=False, allow_infinity=False), min_size=1, max_size=14)
bands = st.one_of(st.none(), st.integers(0, 15))


@pytest.fixture(scope="module")
def con():
    c = tsql.connect()
    yield c
    c.close()


def one(con, sql: str, **params):
    """The single value of a one-row, one-column query with named parameters."""
    (row,) = con.execute(f"SELECT {sql}", params).fetchall()
    return row[0]


def present(x: list) -> np.ndarray:
    return np.array([v for v in x if v is not None], dtype=np.float64)


# --- correlation ------------------------------------------------------------------------------


@SETTINGS
@given(x=series, max_lag=st.integers(1, 12))
def test_acf_is_at_most_one_and_agrees_with_autocorrelation(con, x, max_lag):
    # |r_k| <= 1 for the biased estimator (Cauchy-Schwarz; Box & Jenkins)
    r = one(con, "acf($x::DOUBLE[], max_lag := $k)", x=x, k=max_lag)
    if r is None:
        return
    assert len(r) == max_lag
    for k, rk in enumerate(r, start=1):
        single = one(con, "autocorrelation($x::DOUBLE[], lag := $k)", x=x, k=k)
        if rk is None:
            assert single is None
            continue
        assert abs(rk) <= 1 + 1e-12
        assert single == pytest.approx(rk, abs=1e-9)


@SETTINGS
@given(x=series, lags=st.integers(1, 12))
def test_ljung_box_p_value_is_a_probability(con, x, lags):
    lb = one(con, "ljung_box($x::DOUBLE[], max_lag := $k)", x=x, k=lags)
    if lb is None:
        return
    assert lb["q"] >= 0 and 0 <= lb["p_value"] <= 1


@SETTINGS
@given(x=series)
def test_trend_test_ranges_and_sen_slope(con, x):
    got = one(con, "trend_test($x::DOUBLE[])", x=x)
    v = present(x)
    if got is None:
        assert len(v) < 3 or np.ptp(v) == 0
        return
    assert -1 <= got["tau"] <= 1 and 0 <= got["p_value"] <= 1
    t = np.array([i for i, e in enumerate(x) if e is not None], dtype=np.float64)
    # reference: scipy.stats.theilslopes (Sen 1968), at the elements' own positions
    assert got["slope"] == pytest.approx(stats.theilslopes(v, t).slope, rel=1e-9, abs=1e-9)


# --- similarity -------------------------------------------------------------------------------


@SETTINGS
@given(a=dense, b=dense, band=bands)
def test_dtw_is_a_nonnegative_symmetric_lower_bounded_distance(con, a, b, band):
    d = one(con, "dtw_distance($a::DOUBLE[], $b::DOUBLE[], band := $w)", a=a, b=b, w=band)
    assert d >= 0
    assert one(con, "dtw_distance($b::DOUBLE[], $a::DOUBLE[], band := $w)", a=a, b=b, w=band) == pytest.approx(
        d, rel=1e-12, abs=1e-12
    )
    assert one(con, "dtw_distance($a::DOUBLE[], $a::DOUBLE[], band := $w)", a=a, w=band) == 0.0
    free = one(con, "dtw_distance($a::DOUBLE[], $b::DOUBLE[])", a=a, b=b)
    assert free <= d * (1 + 1e-12) + 1e-12  # a band only takes paths away
    if len(a) == len(b):  # the diagonal is one warping path
        euclid = math.sqrt(sum((x - y) ** 2 for x, y in zip(a, b)))
        assert d <= euclid * (1 + 1e-12) + 1e-12
    envelope = max(len(a), len(b)) if band is None else band
    bound = one(con, "lb_keogh($a::DOUBLE[], $b::DOUBLE[], $w)", a=a, b=b, w=envelope)
    assert 0 <= bound <= d * (1 + 1e-12) + 1e-12


@SETTINGS
@given(a=dense, b=dense, band=bands)
def test_dtw_path_walks_from_corner_to_corner_at_the_distance(con, a, b, band):
    path, d = con.execute(
        "SELECT dtw_path($a::DOUBLE[], $b::DOUBLE[], band := $w), dtw_distance($a::DOUBLE[], $b::DOUBLE[], band := $w)",
        {"a": a, "b": b, "w": band},
    ).fetchall()[0]
    cells = [(c["i"], c["j"]) for c in path]
    assert cells[0] == (1, 1) and cells[-1] == (len(a), len(b))
    assert {(i2 - i1, j2 - j1) for (i1, j1), (i2, j2) in zip(cells, cells[1:])} <= {(1, 0), (0, 1), (1, 1)}
    cost = math.sqrt(sum((a[i - 1] - b[j - 1]) ** 2 for i, j in cells))
    assert cost == pytest.approx(d, rel=1e-9, abs=1e-12)


# --- change -----------------------------------------------------------------------------------


@st.composite
def change_case(draw):
    n = draw(st.integers(0, 80))
    levels = draw(st.lists(st.floats(-50, 50), min_size=1, max_size=6))
    noise = draw(st.lists(st.floats(-1, 1), min_size=n, max_size=n))
    x = [levels[i * len(levels) // n] + e if n else e for i, e in enumerate(noise)]
    gaps = draw(st.sets(st.integers(0, max(n - 1, 0)), max_size=n // 5)) if n else set()
    x = [None if i in gaps else v for i, v in enumerate(x)]
    model = draw(st.sampled_from(["mean", "meanvar", "trend"]))
    min_size = draw(st.integers(1 if model == "mean" else 2, 8))
    penalty = draw(st.sampled_from(["bic", "mbic", "0", "3.5", "40"]))
    return x, model, min_size, penalty


@SETTINGS
@given(case=change_case())
def test_change_points_increase_stay_in_range_and_respect_min_size(con, case):
    x, model, min_size, penalty = case
    starts, segs = con.execute(
        """SELECT change_points($x::DOUBLE[], model := $m, penalty := $p, min_size := $s),
                  segments($x::DOUBLE[], model := $m, penalty := $p, min_size := $s)""",
        {"x": x, "m": model, "p": penalty, "s": min_size},
    ).fetchall()[0]
    if starts is None:
        assert segs is None and len(present(x)) == 0
        return
    n = len(x)
    assert all(a < b for a, b in zip(starts, starts[1:]))
    assert all(2 <= s <= n for s in starts)
    assert segs[0]["first"] == 1 and segs[-1]["last"] == n
    assert [s["first"] for s in segs[1:]] == starts
    assert all(s["last"] + 1 == t["first"] for s, t in zip(segs, segs[1:]))
    if starts:
        assert all(s["last"] - s["first"] + 1 >= min_size for s in segs)


# --- smoothing and periodicity ----------------------------------------------------------------


@SETTINGS
@given(half=st.integers(2, 20), data=st.data())
def test_harmonic_smooth_with_all_harmonics_reproduces_the_input(con, half, data):
    # n = 2 + 2h parameters (level, trend, h cosine/sine pairs) for n points: the fit interpolates
    n = 2 * half
    x = data.draw(st.lists(st.floats(-1e3, 1e3, allow_nan=False), min_size=n, max_size=n))
    smooth = one(con, "harmonic_smooth($x::DOUBLE[], harmonics := $h)", x=x, h=half - 1)
    assert smooth is not None and len(smooth) == n
    scale = max(1.0, max(abs(v) for v in x))
    np.testing.assert_allclose(smooth, x, rtol=0, atol=1e-6 * scale)


@st.composite
def period_case(draw):
    x = draw(st.lists(element, min_size=4, max_size=80))
    lo = draw(st.floats(2, 12))
    hi = draw(st.one_of(st.none(), st.floats(0, 30).map(lambda w: lo + w)))
    return x, lo, hi


@SETTINGS
@given(case=period_case())
def test_dominant_period_stays_within_its_limits(con, case):
    x, lo, hi = case
    period, season = con.execute(
        """SELECT dominant_period($x::DOUBLE[], min_period := $lo, max_period := $hi),
                  seasonality($x::DOUBLE[], min_period := $lo, max_period := $hi)""",
        {"x": x, "lo": lo, "hi": hi},
    ).fetchall()[0]
    if period is None:
        assert season is None
        return
    assert lo - 1e-9 <= period <= (len(x) / 2 if hi is None else min(hi, len(x) / 2)) + 1e-9
    assert season["period"] == period
    assert 0 <= season["strength"] <= 1 + 1e-12
    # a record too short for Fisher's test (4 points: only the period 2 fits) has no p-value
    assert season["p_value"] is None or 0 <= season["p_value"] <= 1


# --- look and time ----------------------------------------------------------------------------


@SETTINGS
@given(
    x=st.one_of(st.none(), st.lists(st.one_of(finite, st.none()), max_size=60)),
    width=st.one_of(st.none(), st.integers(1, 100)),
)
def test_sparkline_has_the_width_asked_for(con, x, width):
    line = one(con, "sparkline($x::DOUBLE[], width := $w)", x=x, w=width)
    if x is None:
        assert line is None
        return
    assert len(line) == (0 if not x else len(x) if width is None else width)
    assert set(line) <= set(BLOCKS) | {" "}


@SETTINGS
@given(points=st.dictionaries(st.integers(-50, 50), finite, min_size=1, max_size=40))
def test_on_grid_with_step_one_puts_every_value_at_its_time(con, points):
    times = list(points)
    values = [points[t] for t in times]
    grid, linear = con.execute(
        """SELECT on_grid($v::DOUBLE[], $t::BIGINT[], step := 1),
                  on_grid($v::DOUBLE[], $t::BIGINT[], step := 1, fill := 'linear')""",
        {"v": values, "t": times},
    ).fetchall()[0]
    first = min(times)
    assert len(grid) == max(times) - first + 1
    assert all(grid[t - first] == v for t, v in points.items())
    assert sum(g is not None for g in grid) == len(points)
    assert None not in linear  # both ends are observed, so linear fill leaves nothing empty


# --- kernels on batches -----------------------------------------------------------------------

KERNEL_SETTINGS = {
    "dominant_period": {"min_period": 2, "max_period": None},
    "seasonality": {"min_period": 3, "max_period": 20},
    "autocorrelation": {"lag": 2},
    "acf": {"max_lag": 4},
    "ljung_box": {"max_lag": 3},
    "trend_test": {},
    "change_points": {"model": "mean", "penalty": "bic", "min_size": 2, "seasonal": "auto", "max_changes": None},
    "segments": {"model": "trend", "penalty": "mbic", "min_size": 3, "seasonal": "none", "max_changes": 2},
    "change_points_path": {"model": "meanvar", "max_changes": 3, "min_size": 2, "seasonal": "auto"},
    "harmonic_smooth": {"harmonics": 2, "period": None},
    "harmonic_profile": {"period": 7, "harmonics": 2},
    "sparkline": {"width": 9},
}


def _params(name: str, n: int) -> list[pa.Array]:
    fn = BY_NAME[name]
    values = KERNEL_SETTINGS[name]
    return [pa.array([values[p.name]] * n, type=p.sql_type.arrow) for p in fn.params]


@SETTINGS
@given(
    rows=st.lists(st.one_of(st.none(), series), min_size=1, max_size=12), name=st.sampled_from(list(KERNEL_SETTINGS))
)
def test_a_row_answers_the_same_alone_and_in_any_batch(rows, name):
    udf = make_udf(BY_NAME[name])
    column = pa.array(rows, type=pa.list_(pa.float64()))
    together = udf(column, *_params(name, len(rows))).to_pylist()
    for row, answer in zip(rows, together):
        alone = udf(pa.array([row], type=pa.list_(pa.float64())), *_params(name, 1)).to_pylist()[0]
        assert alone == answer
    assume(len(rows) > 1)
    reverse = udf(pa.array(rows[::-1], type=pa.list_(pa.float64())), *_params(name, len(rows))).to_pylist()
    assert reverse == together[::-1]
