"""STL: seasonal-trend decomposition by LOESS, and the strengths of trend and seasonality.

The LOESS passes follow the published procedure (Cleveland et al. 1990) step by step, with the
defaults of its usual implementations: seasonal smoother 7, trend smoother the smallest odd
integer at or above ``1.5 period / (1 - 1.5 / 7)``, low-pass filter the smallest odd integer above
the period, local lines (degree 1) everywhere, no skipping, and 5 inner passes without robustness
or 2 inner passes inside 15 robustness iterations with it. One compiled function decomposes a row;
rows run one after another, each with its own work arrays, so a row's answer depends on that row
alone.

Missing elements: STL needs every value. Elements before the first and after the last present
value are left out (their outputs are NaN); a missing element between present values is filled by
linear interpolation between its neighbours, and its remainder is NaN (there is no observation to
leave a remainder). A row gets no answer when that span is shorter than two cycles, when a run of
missing elements is a whole cycle or longer, when more than a quarter of the span is missing, or
when it holds an infinite value.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from tsql.kernels.cancel import checkpoint
from tsql.kernels.gaps import fill_inside
from tsql.kernels.periodicity import dominant_period
from tsql.kernels.ragged import Ragged, full, rows_in_safe_range

__all__ = ["stl_decompose", "stl_strength", "stl_windows"]

_SEASONAL = 7  # length of the seasonal smoother (odd, >= 3)
_MAX_MISSING_SHARE = 0.25  # more of the span missing than this: no answer
_ELEMENTS_PER_CALL = 1 << 14  # elements decomposed between two looks at cancellation


def stl_windows(period: int, seasonal: int = _SEASONAL) -> tuple[int, int]:
    """The default trend and low-pass smoother lengths for ``period``.

    Trend: the smallest odd integer at or above ``1.5 period / (1 - 1.5 / seasonal)``; low-pass:
    the smallest odd integer above ``period`` (Cleveland et al. 1990, section 3.6).

    Examples
    --------
    >>> stl_windows(12)
    (23, 13)
    """
    trend = int(np.ceil(1.5 * period / (1.0 - 1.5 / seasonal)))
    trend += trend % 2 == 0
    low_pass = period + 1
    low_pass += low_pass % 2 == 0
    return trend, low_pass


def stl_decompose(batch: Ragged, period: int, robust: bool = False) -> dict[str, Ragged]:
    """Decompose each series into trend, seasonal and remainder by STL.

    Parameters
    ----------
    batch : Ragged
        The series, one per row, equally spaced; NaN elements are missing.
    period : int
        Length of the cycle in samples (>= 2).
    robust : bool
        Down-weight outliers: 15 robustness iterations of 2 inner passes each, with bisquare
        weights of the remainder over six times its median absolute value. Otherwise 5 inner
        passes and no robustness weights.

    Returns
    -------
    dict of str to Ragged
        ``trend``, ``seasonal`` and ``remainder``, each with the rows' own lengths (``trend +
        seasonal + remainder`` is the series). NaN before the first and after the last present
        value, and in ``remainder`` at missing elements (see the module notes for the filling).
        A row without an answer (invalid, shorter than two cycles, a gap of a whole cycle or
        more, over a quarter missing, an infinite value) is invalid, with length 0, in all three.

    Notes
    -----
    Each inner pass: detrend; smooth each cycle-subseries (all Januaries, ...) by LOESS with
    window 7, extended by one cycle at each end; low-pass filter the result (moving averages of
    lengths ``period``, ``period``, 3, then LOESS) and subtract it, which gives the seasonal
    component; smooth the deseasonalised series by LOESS for the trend. The smoother lengths are
    :func:`stl_windows`; all local fits are lines with tricube weights.

    The answer equals ``statsmodels.tsa.seasonal.STL(x, period).fit()`` (and ``robust=True``) to
    rounding.

    References
    ----------
    R. B. Cleveland, W. S. Cleveland, J. E. McRae and I. Terpenning, "STL: A Seasonal-Trend
    Decomposition Procedure Based on Loess", Journal of Official Statistics 6(1), 3-73 (1990).

    See Also
    --------
    stl_strength : strengths of trend and seasonality from this decomposition.

    Examples
    --------
    >>> t = np.arange(48)
    >>> x = 0.1 * t + np.cos(2 * np.pi * t / 12)
    >>> d = stl_decompose(Ragged.from_list([x]), period=12)
    >>> bool(np.abs(d["remainder"].values).max() < 0.05)
    True
    """
    period = _check_period(period, "stl_decompose")
    filled, first, last, answer = _prepare(batch, period)
    trend, seasonal = _run(filled, first, last, answer, period, bool(robust))
    lengths = np.where(answer, batch.lengths, 0)
    offsets = np.zeros(batch.n_rows + 1, dtype=np.int64)
    np.cumsum(lengths, out=offsets[1:])
    keep = np.repeat(answer, batch.lengths)
    remainder = batch.values - trend - seasonal
    valid = None if answer.all() else answer
    return {
        name: Ragged(np.ascontiguousarray(column[keep]), offsets, valid)
        for name, column in (("trend", trend), ("seasonal", seasonal), ("remainder", remainder))
    }


def stl_strength(batch: Ragged, period: int | None = None) -> dict[str, np.ndarray]:
    """Strength of trend and of seasonality of each series, from its STL decomposition.

    Parameters
    ----------
    batch : Ragged
        The series, one per row; NaN elements are missing.
    period : int or None
        Cycle length in samples (>= 2). ``None``: each row's
        :func:`~tsql.kernels.periodicity.dominant_period`, rounded to the nearest integer.

    Returns
    -------
    dict of str to numpy.ndarray
        float64, one value per row (NaN where :func:`stl_decompose` has no answer, where no
        period is found, or for a row whose present values are all equal):

        ``period``
            The cycle length used.
        ``trend``
            ``F_T = max(0, 1 - Var(R) / Var(T + R))`` in [0, 1].
        ``seasonal``
            ``F_S = max(0, 1 - Var(R) / Var(S + R))`` in [0, 1].

        ``T, S, R`` are the trend, seasonal and remainder of the non-robust decomposition, the
        variances taken over the present elements. A zero denominator gives 0.

    Notes
    -----
    Near 1 means the component dominates the remainder; a series with no trend (or no
    seasonality) has ``Var(T + R)`` (or ``Var(S + R)``) close to ``Var(R)``, hence near 0.

    References
    ----------
    X. Wang, K. A. Smith and R. J. Hyndman, "Characteristic-based clustering for time series
    data", Data Mining and Knowledge Discovery 13(3), 335-364 (2006).
    R. J. Hyndman and G. Athanasopoulos, "Forecasting: Principles and Practice", 3rd ed.,
    OTexts (2021), section 4.3.

    See Also
    --------
    stl_decompose : the decomposition.
    tsql.kernels.periodicity.seasonality : strength of the harmonics of the dominant period.

    Examples
    --------
    >>> t = np.arange(96)
    >>> x = np.cos(2 * np.pi * t / 12) + 0.1 * np.sin(1.3 * t)
    >>> s = stl_strength(Ragged.from_list([x]))
    >>> float(s["period"][0]), bool(s["seasonal"][0] > 0.9), bool(s["trend"][0] < 0.3)
    (12.0, True, True)
    """
    result = {key: full(batch.n_rows) for key in ("period", "trend", "seasonal")}
    if period is None:
        found = np.round(dominant_period(batch))
        settings = np.unique(found[np.isfinite(found) & (found >= 2)])
        row_period = found
    else:
        settings = np.array([_check_period(period, "stl_strength")], dtype=np.float64)
        row_period = np.full(batch.n_rows, settings[0])
    for value in settings:
        rows = np.flatnonzero(row_period == value)
        sub = rows_in_safe_range(batch if len(rows) == batch.n_rows else batch.take(rows))  # ratios: scale-free
        p = int(value)
        filled, first, last, answer = _prepare(sub, p)
        trend, seasonal = _run(filled, first, last, answer, p, False)
        strengths = np.full((sub.n_rows, 2), np.nan)
        _strengths(sub.values, sub.offsets, trend, seasonal, answer, strengths)
        ok = np.isfinite(strengths[:, 0])
        result["period"][rows[ok]] = value
        result["trend"][rows[ok]] = strengths[ok, 0]
        result["seasonal"][rows[ok]] = strengths[ok, 1]
    return result


# --------------------------------------------------------------------------------------------
# preparing rows: the span, interior gaps filled
# --------------------------------------------------------------------------------------------


def _check_period(period, name: str) -> int:
    if isinstance(period, bool) or not float(period).is_integer() or period < 2:
        raise ValueError(f"{name}: period must be a whole number of samples >= 2, got {period!r}")
    return int(period)


def _prepare(batch: Ragged, period: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Flat values with interior gaps filled, each row's span ``[first, last]`` (flat indices of its
    first and last present values) and whether the row gets an answer."""
    spans = fill_inside(batch)
    answer = (spans.length >= 2 * period) & (spans.longest_gap < period) & ~spans.infinite
    answer &= spans.missing_share() <= _MAX_MISSING_SHARE
    return spans.values, spans.first, spans.last, answer


def _run(
    filled: np.ndarray, first: np.ndarray, last: np.ndarray, answer: np.ndarray, period: int, robust: bool
) -> tuple[np.ndarray, np.ndarray]:
    """Trend and seasonal over the flat array (NaN outside the answered spans)."""
    trend = np.full(len(filled), np.nan)
    seasonal = np.full(len(filled), np.nan)
    rows = np.flatnonzero(answer)
    if len(rows) == 0:
        return trend, seasonal
    nt, nl = stl_windows(period)
    inner, outer = (2, 15) if robust else (5, 0)
    span = last[rows] - first[rows] + 1
    done = 0
    while done < len(rows):
        take = max(1, int(np.searchsorted(np.cumsum(span[done:]), _ELEMENTS_PER_CALL)))
        piece = rows[done : done + take]
        _decompose_rows(filled, first[piece], last[piece], period, _SEASONAL, nt, nl, inner, outer, trend, seasonal)
        done += take
        checkpoint()
    return trend, seasonal


# --------------------------------------------------------------------------------------------
# the compiled decomposition (positions inside the LOESS routines are 1-based, as published)
# --------------------------------------------------------------------------------------------


@njit(cache=True, error_model="numpy", nogil=True)
def _decompose_rows(values, first, last, period, ns, nt, nl, inner, outer, trend_out, seasonal_out):
    for r in range(len(first)):
        y = values[first[r] : last[r] + 1].copy()
        trend, season = _stl(y, period, ns, nt, nl, inner, outer)
        trend_out[first[r] : last[r] + 1] = trend
        seasonal_out[first[r] : last[r] + 1] = season


@njit(cache=True, error_model="numpy")
def _stl(y, period, ns, nt, nl, inner, outer):
    n = len(y)
    trend = np.zeros(n)
    season = np.zeros(n)
    rw = np.ones(n)
    width = n + 2 * period
    w0, w1, w2, w3, w4 = np.zeros(width), np.zeros(width), np.zeros(width), np.zeros(width), np.zeros(width)
    use_rw = False
    k = 0
    while True:
        _one_step(y, period, ns, nt, nl, inner, use_rw, rw, season, trend, w0, w1, w2, w3, w4)
        k += 1
        if k > outer:
            break
        for i in range(n):
            w0[i] = trend[i] + season[i]
        _robustness_weights(y, w0, rw)
        use_rw = True
    return trend, season


@njit(cache=True, error_model="numpy")
def _one_step(y, period, ns, nt, nl, inner, use_rw, rw, season, trend, w0, w1, w2, w3, w4):
    n = len(y)
    for _ in range(inner):
        for i in range(n):
            w0[i] = y[i] - trend[i]
        _subseries(w0, n, period, ns, use_rw, rw, w1, w2, w3, w4, season)
        _low_pass(w1, n + 2 * period, period, w2, w0)
        _smooth(w2, n, nl, False, w3, w0, w4)
        for i in range(n):
            season[i] = w1[period + i] - w0[i]
            w0[i] = y[i] - season[i]
        _smooth(w0, n, nt, use_rw, rw, trend, w2)


@njit(cache=True, error_model="numpy")
def _fit_at(y, n, length, xs, nleft, nright, w, use_rw, rw):
    """Local line at position ``xs`` from ``y[nleft-1 : nright]``, tricube weights; NaN if none."""
    h = float(max(xs - nleft, nright - xs))
    if length > n:
        h += math.floor((length - n) / 2.0)
    h9 = 0.999 * h
    h1 = 0.001 * h
    a = 0.0
    for j in range(nleft - 1, nright):
        w[j] = 0.0
        r = abs(j + 1 - xs)
        if r <= h9:
            if r <= h1:
                w[j] = 1.0
            else:
                q = r / h
                q = 1.0 - q * q * q
                w[j] = q * q * q
            if use_rw:
                w[j] = w[j] * rw[j]
            a += w[j]
    if a <= 0.0:
        return np.nan
    for j in range(nleft - 1, nright):
        w[j] = w[j] / a
    if h > 0.0:
        a = 0.0
        for j in range(nleft - 1, nright):
            a += w[j] * (j + 1)
        b = xs - a
        c = 0.0
        for j in range(nleft - 1, nright):
            c += w[j] * (j + 1 - a) ** 2
        if math.sqrt(c) > 0.001 * (n - 1.0):
            b = b / c
            for j in range(nleft - 1, nright):
                w[j] = w[j] * (b * (j + 1 - a) + 1.0)
    ys = 0.0
    for j in range(nleft - 1, nright):
        ys += w[j] * y[j]
    return ys


@njit(cache=True, error_model="numpy")
def _smooth(y, n, length, use_rw, rw, ys, work):
    """LOESS of ``y[:n]`` with window ``length`` at every position, into ``ys``."""
    if n < 2:
        ys[0] = y[0]
        return
    if length >= n:
        for i in range(n):
            ys[i] = _fit_at(y, n, length, i + 1, 1, n, work, use_rw, rw)
            if np.isnan(ys[i]):
                ys[i] = y[i]
        return
    half = (length + 2) // 2
    nleft = 1
    nright = length
    for i in range(n):
        if i + 1 > half and nright != n:
            nleft += 1
            nright += 1
        ys[i] = _fit_at(y, n, length, i + 1, nleft, nright, work, use_rw, rw)
        if np.isnan(ys[i]):
            ys[i] = y[i]


@njit(cache=True, error_model="numpy")
def _subseries(y, n, period, ns, use_rw, rw, season, work1, work2, work3, work4):
    """Smooth each cycle-subseries, extended by one value at each end, into ``season``."""
    for j in range(period):
        k = (n - (j + 1)) // period + 1
        for i in range(k):
            work1[i] = y[i * period + j]
        if use_rw:
            for i in range(k):
                work3[i] = rw[i * period + j]
        _smooth(work1, k, ns, use_rw, work3, work2[1:], work4)
        nright = min(ns, k)
        work2[0] = _fit_at(work1, k, ns, 0, 1, nright, work4, use_rw, work3)
        if np.isnan(work2[0]):
            work2[0] = work2[1]
        nleft = max(1, k - ns + 1)
        work2[k + 1] = _fit_at(work1, k, ns, k + 1, nleft, k, work4, use_rw, work3)
        if np.isnan(work2[k + 1]):
            work2[k + 1] = work2[k]
        for m in range(k + 2):
            season[m * period + j] = work2[m]


@njit(cache=True, error_model="numpy")
def _moving_average(x, n, length, ave):
    v = 0.0
    for i in range(length):
        v += x[i]
    ave[0] = v / length
    k = length
    m = 0
    for j in range(1, n - length + 1):
        v += x[k] - x[m]
        ave[j] = v / length
        k += 1
        m += 1


@njit(cache=True, error_model="numpy")
def _low_pass(x, n, period, trend, work):
    _moving_average(x, n, period, trend)
    _moving_average(trend, n - period + 1, period, work)
    _moving_average(work, n - 2 * period + 2, 3, trend)


@njit(cache=True, error_model="numpy")
def _robustness_weights(y, fit, rw):
    n = len(y)
    for i in range(n):
        rw[i] = abs(y[i] - fit[i])
    ordered = np.sort(rw)
    cmad = 3.0 * (ordered[n // 2] + ordered[n - n // 2 - 1])  # six times the median
    if cmad == 0.0:
        rw[:] = 1.0
        return
    c9 = 0.999 * cmad
    c1 = 0.001 * cmad
    for i in range(n):
        if rw[i] <= c1:
            rw[i] = 1.0
        elif rw[i] <= c9:
            q = rw[i] / cmad
            q = 1.0 - q * q
            rw[i] = q * q
        else:
            rw[i] = 0.0


@njit(cache=True, error_model="numpy", nogil=True)
def _strengths(values, offsets, trend, seasonal, answer, out):
    """``1 - Var(R) / Var(T + R)`` and ``1 - Var(R) / Var(S + R)`` over each row's present elements."""
    for r in range(len(answer)):
        if not answer[r]:
            continue
        lo, hi = offsets[r], offsets[r + 1]
        count = 0
        lowest, highest = np.inf, -np.inf
        s_r, s_tr, s_sr = 0.0, 0.0, 0.0
        for i in range(lo, hi):
            if not np.isnan(values[i]):
                rem = values[i] - trend[i] - seasonal[i]
                count += 1
                s_r += rem
                s_tr += trend[i] + rem
                s_sr += seasonal[i] + rem
                lowest = min(lowest, values[i])
                highest = max(highest, values[i])
        if count < 2 or lowest == highest:
            continue
        m_r, m_tr, m_sr = s_r / count, s_tr / count, s_sr / count
        v_r, v_tr, v_sr = 0.0, 0.0, 0.0
        for i in range(lo, hi):
            if not np.isnan(values[i]):
                rem = values[i] - trend[i] - seasonal[i]
                v_r += (rem - m_r) ** 2
                v_tr += (trend[i] + rem - m_tr) ** 2
                v_sr += (seasonal[i] + rem - m_sr) ** 2
        out[r, 0] = max(0.0, 1.0 - v_r / v_tr) if v_tr > 0.0 else 0.0
        out[r, 1] = max(0.0, 1.0 - v_r / v_sr) if v_sr > 0.0 else 0.0
