"""Change points by penalised optimal segmentation (PELT, FPOP).

Each series is cut where ``sum of segment costs + penalty x number of
changes`` is least; the exact minimiser is found by PELT (Killick, Fearnhead
& Eckley 2012). PELT drops a candidate start only once it is worse than the
optimum so far, which inside a long homogeneous segment rarely happens, so a
series with one change costs about ``n x segment length``. For 'mean' the
search prunes functionally instead (FPOP, Maidstone, Hocking, Rigaill &
Fearnhead 2017): each start keeps an interval of the segment means at which it
could still be best, narrowed by the starts before and after it, and goes when that is
empty; a few dozen starts survive (a few hundred with 'mbic', whose length
term loosens the bounds), so a series with few changes costs little more than
``n`` (see :func:`_narrow_mean`). The answers are PELT's: both drop only
starts that cannot be best again (ties kept). 'meanvar' and 'trend', with two
parameters per segment, keep PELT's rule, and its cost on long segments.

What a segment costs (the model) is kept apart from the search. A model is
three small pieces:

* ``_prepare_x``: from a series' present values ``y`` and their positions
  ``p``, fill a table of cumulative sums ``stats[k, i]`` (over the first ``i``
  present values) and say whether the series has a scale at all;
* ``_cost_x``: ``base[j] + C(s_j, t)``, the cost of the segment of present
  values ``s_j .. t - 1`` added to a base (the search's ``F(s_j)``), for all
  candidate starts ``s_j`` at once, from ``stats[:, t]`` and the candidates'
  copies of ``stats[:, s_j]`` (``rows[k][j]``, contiguous per statistic, so
  the loop vectorises);
* a :class:`CostModel` entry: name, how many parameters a change adds (the BIC
  penalty), smallest sensible segment.

Adding a model: write those, and add one branch to :func:`_prepare` and one to
the step of :func:`_pelt` (the branch sits in the search loop because a call
through a dispatching function costs more than a short candidate list).

Every cost here satisfies ``C(a, b) + C(b, c) <= C(a, c)``, so PELT prunes
with ``K = 0``. Costs are in units of twice a negative Gaussian
log-likelihood, so penalties of ``k log n`` are BIC's.

The models and the search are in one module on purpose: numba's on-disk cache
checks only the source file of the function it loads, so a compiled search
would keep running the old code of a cost edited in another file.

Rows are independent: each is read, segmented and written by itself, with
work buffers of its own and an output slot fixed by its position in the batch
(a row of ``n`` values has at most ``n`` segments), so the rows run in parallel
(``numba.prange``) and an answer depends neither on the other rows of the batch
nor on the number of threads or the order in which they take the rows. Calls
from several Python threads take turns (a lock: numba releases the GIL inside a
parallel region, and its 'workqueue' threading layer must not be entered twice
at once). In a process forked after numba's OpenMP layer was loaded, where
OpenMP cannot run, the same rows run on the calling thread.

Rules for a row (``m`` = number of present, non-NaN values):

* NULL row, empty list, ``m == 0``, or any infinite value: no answer
  (``row_valid`` False).
* ``m < 2 * min_size``, or all present values equal, or no noise scale (see
  :func:`segments`): no change point, a single segment.
* otherwise: PELT on the present values. Missing elements are skipped by the
  costs; a change point is the original position of the first present value
  of a new segment, and a segment runs up to the element before the next
  segment's first, so segments cover the list with no gap.

References
----------
Killick, R., Fearnhead, P. & Eckley, I. A. (2012). Optimal detection of
changepoints with a linear computational cost. *JASA* 107(500), 1590–1598.
Maidstone, R., Hocking, T., Rigaill, G. & Fearnhead, P. (2017). On optimal
multiple changepoint algorithms for large data. *Statistics and Computing*
27(2), 519–533.
Jackson, B. et al. (2005). An algorithm for optimal partitioning of data on an
interval. *IEEE Signal Processing Letters* 12(2), 105–108.
Schwarz, G. (1978). Estimating the dimension of a model. *Ann. Statist.* 6(2),
461–464.
Zhang, N. R. & Siegmund, D. O. (2007). A modified Bayes information criterion
with applications to the analysis of comparative genomic hybridization data.
*Biometrics* 63(1), 22–32.
Hampel, F. R. (1974). The influence curve and its role in robust estimation.
*JASA* 69(346), 383–393 (the MAD and its consistency factor 1.4826).
Rice, J. (1984). Bandwidth choice for nonparametric regression. *Ann. Statist.*
12(4), 1215–1230 (noise scale from differences of neighbouring values).
Hoare, C. A. R. (1961). Algorithm 65: Find. *Comm. ACM* 4(7), 321–322.
"""

from __future__ import annotations

import math
import os
import threading
from dataclasses import dataclass

import numba
import numpy as np
from numba import njit, prange

from tsql.kernels.ragged import Ragged, RaggedRecords

__all__ = ["MODELS", "MIN_SIZE", "PENALTIES", "change_points", "segments"]

# --------------------------------------------------------------------------- models

#: 1 / Phi^-1(3/4): makes the MAD a consistent estimate of a Gaussian sigma.
MAD_SCALE = 1.482602218505602

#: 'meanvar' adds this fraction of the whole series' variance to every
#: segment variance, so a constant segment costs ``L log(VARIANCE_FLOOR * V)``
#: instead of minus infinity.
VARIANCE_FLOOR = 1e-4

#: A noise scale at most this many ulps of the largest |value| is rounding, not noise:
#: differences of decimal inputs such as 5.1 - 5.0 leave residues of ~1e-16.
ROUNDING_ULPS = 1000.0

#: Most cumulative sums any model keeps (rows of the ``stats`` table).
MAX_STATS = 5

MEAN, MEANVAR, TREND = 0, 1, 2


@dataclass(frozen=True)
class CostModel:
    """What the search and the binding need to know about one model."""

    name: str
    code: int
    n_stats: int
    #: parameters one more change adds: its position plus the new segment's own parameters
    params_per_change: int
    #: smallest min_size the model accepts
    min_size: int


MODELS: dict[str, CostModel] = {
    "mean": CostModel("mean", MEAN, n_stats=2, params_per_change=2, min_size=1),
    "meanvar": CostModel("meanvar", MEANVAR, n_stats=2, params_per_change=3, min_size=2),
    "trend": CostModel("trend", TREND, n_stats=5, params_per_change=3, min_size=2),
}


# --------------------------------------------------------------------------- noise scale


@njit(cache=True, error_model="numpy")
def _select(a: np.ndarray, k: int, n: int) -> float:
    """The k-th smallest of ``a[:n]`` (0-based), reordering ``a`` (Hoare 1961, FIND).

    Median-of-three pivots; afterwards every ``a[i]`` with ``i < k`` is at most
    the answer.
    """
    lo = 0
    hi = n - 1
    while lo < hi:
        x = a[lo]
        y = a[(lo + hi) // 2]
        z = a[hi]
        pivot = max(min(x, y), min(max(x, y), z))
        i = lo
        j = hi
        while i <= j:
            while a[i] < pivot:
                i += 1
            while a[j] > pivot:
                j -= 1
            if i <= j:
                a[i], a[j] = a[j], a[i]
                i += 1
                j -= 1
        # a[lo..j] <= pivot <= a[i..hi], and a[j + 1..i - 1] == pivot
        if k <= j:
            hi = j
        elif k >= i:
            lo = i
        else:
            return a[k]
    return a[k]


@njit(cache=True, error_model="numpy")
def _median(a: np.ndarray, n: int) -> float:
    """Median of ``a[:n]`` as numpy.median defines it; reorders ``a``."""
    upper = _select(a, n // 2, n)
    if n % 2:
        return upper
    lower = a[0]
    for i in range(1, n // 2):
        lower = max(lower, a[i])
    return (lower + upper) / 2.0


@njit(cache=True, error_model="numpy")
def _mad_sigma(r: np.ndarray, k: int, work: np.ndarray) -> float:
    """1.4826 * median(|r - median(r)|) of ``r[:k]``, or 0 when k == 0; reorders ``r``."""
    if k == 0:
        return 0.0
    med = _median(r, k)
    for i in range(k):
        work[i] = abs(r[i] - med)
    return MAD_SCALE * _median(work, k)


@njit(cache=True, error_model="numpy")
def _rms_sigma(r: np.ndarray, k: int) -> float:
    """Standard deviation (ddof 0) of ``r[:k]``."""
    if k == 0:
        return 0.0
    mean = 0.0
    for i in range(k):
        mean += r[i]
    mean /= k
    acc = 0.0
    for i in range(k):
        acc += (r[i] - mean) ** 2
    return math.sqrt(acc / k)


@njit(cache=True, error_model="numpy")
def _std(y: np.ndarray, m: int) -> tuple[float, float]:
    """Mean and standard deviation (ddof 0) of ``y[:m]``."""
    mean = 0.0
    for i in range(m):
        mean += y[i]
    mean /= m
    acc = 0.0
    for i in range(m):
        acc += (y[i] - mean) ** 2
    return mean, math.sqrt(acc / m)


@njit(cache=True, error_model="numpy")
def _rounding(y: np.ndarray, m: int) -> float:
    """The scale below which a spread in ``y[:m]`` is rounding: ROUNDING_ULPS ulps of max |y|."""
    top = 0.0
    for i in range(m):
        top = max(top, abs(y[i]))
    return ROUNDING_ULPS * np.finfo(np.float64).eps * top


@njit(cache=True, error_model="numpy")
def _first_difference_sigma(y: np.ndarray, m: int, work: np.ndarray) -> float:
    """Noise scale from first differences of neighbouring present values.

    ``1.4826 * MAD(diff(y)) / sqrt(2)``; if that is 0 (most differences equal,
    e.g. piecewise-constant data) the standard deviation of the differences
    over sqrt(2); if that is 0 too (a straight ramp), the standard deviation of
    ``y`` itself; if that is 0 too, 0. Here "0" means at most ROUNDING_ULPS
    ulps of ``max |y|``.
    """
    k = m - 1
    r = work[m:]
    for i in range(k):
        r[i] = y[i + 1] - y[i]
    tiny = _rounding(y, m)
    sigma = _mad_sigma(r, k, work) / math.sqrt(2.0)
    if sigma <= tiny:
        sigma = _rms_sigma(r, k) / math.sqrt(2.0)
    if sigma <= tiny:
        sigma = _std(y, m)[1]
    return sigma if sigma > tiny else 0.0


@njit(cache=True, error_model="numpy")
def _second_difference_sigma(y: np.ndarray, p: np.ndarray, m: int, work: np.ndarray) -> float:
    """Noise scale from second differences, blind to any straight line.

    For each present value, its residual from the line through its two present
    neighbours, divided by that residual's standard deviation in units of the
    noise (``sqrt(1 + w0^2 + w2^2)``, the interpolation weights); on an even
    grid this is ``diff(y, 2) / sqrt(6)``. A change of slope disturbs one
    residual only. Then ``1.4826 * MAD``, with the same fallbacks as
    :func:`_first_difference_sigma`.
    """
    k = m - 2
    r = work[m:]
    for i in range(k):
        gap = p[i + 2] - p[i]
        w0 = (p[i + 2] - p[i + 1]) / gap
        w2 = (p[i + 1] - p[i]) / gap
        r[i] = (y[i + 1] - w0 * y[i] - w2 * y[i + 2]) / math.sqrt(1.0 + w0 * w0 + w2 * w2)
    tiny = _rounding(y, m)
    sigma = _mad_sigma(r, k, work)
    if sigma <= tiny:
        sigma = _rms_sigma(r, k)
    if sigma <= tiny:
        sigma = _std(y, m)[1]
    return sigma if sigma > tiny else 0.0


# --------------------------------------------------------------------------- 'mean'


@njit(cache=True, error_model="numpy")
def _standardised_sums(y, m, centre, scale, stats) -> None:
    """Cumulative sums of z and z^2, z = (y - centre) / scale, into stats[0] and stats[1]."""
    s1 = 0.0
    s2 = 0.0
    stats[0, 0] = 0.0
    stats[1, 0] = 0.0
    for i in range(m):
        z = (y[i] - centre) / scale
        s1 += z
        s2 += z * z
        stats[0, i + 1] = s1
        stats[1, i + 1] = s2


@njit(cache=True, error_model="numpy")
def _prepare_mean(y, p, m, stats, work) -> bool:
    sigma = _first_difference_sigma(y, m, work)
    if not sigma > 0.0:
        return False
    centre = _std(y, m)[0]
    _standardised_sums(y, m, centre, sigma, stats)
    return True


@njit(cache=True, error_model="numpy")
def _cost_mean(stats, rows, starts, base, m, t, out) -> None:
    """RSS about the segment mean, in units of sigma^2."""
    a1 = stats[0, t]
    a2 = stats[1, t]
    c1 = rows[0]
    c2 = rows[1]
    tf = float(t)
    for j in range(m):
        d = a1 - c1[j]
        out[j] = base[j] + ((a2 - c2[j]) - d * d / (tf - starts[j]))


# --------------------------------------------------------------------------- 'meanvar'


@njit(cache=True, error_model="numpy")
def _prepare_meanvar(y, p, m, stats, work) -> bool:
    centre, sd = _std(y, m)
    if not sd > _rounding(y, m):
        return False
    _standardised_sums(y, m, centre, sd, stats)
    return True


@njit(cache=True, error_model="numpy")
def _cost_meanvar(stats, rows, starts, base, m, t, out) -> None:
    """L log(var + floor), the series scaled to unit variance (floor = VARIANCE_FLOOR)."""
    a1 = stats[0, t]
    a2 = stats[1, t]
    c1 = rows[0]
    c2 = rows[1]
    tf = float(t)
    for j in range(m):
        length = tf - starts[j]
        inv = 1.0 / length
        mean = (a1 - c1[j]) * inv
        var = max((a2 - c2[j]) * inv - mean * mean, 0.0)
        out[j] = base[j] + length * math.log(var + VARIANCE_FLOOR)


# --------------------------------------------------------------------------- 'trend'


@njit(cache=True, error_model="numpy")
def _prepare_trend(y, p, m, stats, work) -> bool:
    sigma = _second_difference_sigma(y, p, m, work)
    if not sigma > 0.0:
        return False
    centre = _std(y, m)[0]
    st = 0.0
    stt = 0.0
    sx = 0.0
    sxx = 0.0
    stx = 0.0
    for k in range(5):
        stats[k, 0] = 0.0
    for i in range(m):
        # positions are integers: their sums stay exact in float64 up to ~2e5 elements
        t = float(p[i])
        z = (y[i] - centre) / sigma
        st += t
        stt += t * t
        sx += z
        sxx += z * z
        stx += t * z
        stats[0, i + 1] = st
        stats[1, i + 1] = stt
        stats[2, i + 1] = sx
        stats[3, i + 1] = sxx
        stats[4, i + 1] = stx
    return True


@njit(cache=True, error_model="numpy")
def _cost_trend(stats, rows, starts, base, m, t, out) -> None:
    """RSS about the segment's least-squares line, in units of sigma^2."""
    a_t = stats[0, t]
    a_tt = stats[1, t]
    a_x = stats[2, t]
    a_xx = stats[3, t]
    a_tx = stats[4, t]
    c_t = rows[0]
    c_tt = rows[1]
    c_x = rows[2]
    c_xx = rows[3]
    c_tx = rows[4]
    tf = float(t)
    for j in range(m):
        # with L the length and S the sums over the segment, L times the centred sums:
        # tt = L Stt - St^2 (integer-exact for positions), tx = L Stx - St Sx, xx = L Sxx - Sx^2;
        # RSS = (xx - tx^2 / tt) / L, with one division
        length = tf - starts[j]
        dt = a_t - c_t[j]
        dx = a_x - c_x[j]
        tt = length * (a_tt - c_tt[j]) - dt * dt
        tx = length * (a_tx - c_tx[j]) - dt * dx
        xx = length * (a_xx - c_xx[j]) - dx * dx
        # a one-point segment (tt == 0) has no residual
        rss = (xx * tt - tx * tx) / (tt * length) if tt > 0.0 else 0.0
        out[j] = base[j] + max(rss, 0.0)


@njit(cache=True, error_model="numpy")
def _prepare(code, y, p, m, stats, work) -> bool:
    """Fill ``stats[:, :m + 1]`` for model ``code``; False if the series has no scale.

    ``work`` needs ``2 * m`` elements of scratch.
    """
    if code == MEAN:
        return _prepare_mean(y, p, m, stats, work)
    if code == MEANVAR:
        return _prepare_meanvar(y, p, m, stats, work)
    return _prepare_trend(y, p, m, stats, work)


#: smallest ``min_size`` each model accepts
MIN_SIZE: dict[str, int] = {name: model.min_size for name, model in MODELS.items()}

#: named penalties; a finite number >= 0 is also accepted
PENALTIES = ("bic", "mbic")

_BIC, _MBIC, _FIXED = 0, 1, 2

#: PELT keeps a candidate unless it is worse than the optimum by more than this
#: share of ``1 + |F(t)|``: a margin for rounding, so pruning never drops the optimum.
_PRUNE_MARGIN = 1e-9

#: functional pruning ('mean') also leaves this share of the series' sum of squared
#: standardised values, a bound on every segment's (some 4,500 ulps of it)
_SQUARES_MARGIN = 1e-12

#: steps between pruning passes
PRUNE_EVERY = 4


# --------------------------------------------------------------------------- search


@njit(cache=True, error_model="numpy")
def _narrow_mean(stats, m, rows, starts, f_start, bounds, n, c, f_c, length_term, use_length_term, min_size) -> int:
    """Functional pruning for 'mean' (FPOP) as start ``c`` becomes usable; returns how many starts it retires.

    With ``g_s(mu, t) = F(s) + sum_{s<i<=t} (z_i - mu)^2``, start ``s`` totals
    ``min_mu g_s(mu, t)`` at ``t``, reached at ``mu_s(t)``, the mean of
    ``(s, t]``; if ``s`` is best at ``t`` then ``g_s(mu_s(t), t) <= g_c(mu_s(t), t)``
    for every other start ``c``. For an older start ``s`` and every ``t`` from
    now on, ``g_s(mu, t) - g_c(mu, t) = L (mu - a)^2 - gap`` does not depend on
    ``t`` (``L = c - s``, ``a`` the mean of ``(s, c]``,
    ``gap = F(c) - F(s) - C(s, c)``). So ``s`` can be best (or tied) again
    only with ``mu_s(t)`` within ``sqrt(gap / L)`` of ``a``, and ``c`` only
    with ``mu_c(t)`` not strictly within it. Each start keeps the hull
    ``[lo, hi]`` (``bounds[0:2]``) of where its mean may still be, cut by every
    newer start, and one interval where it may not (``bounds[2:4]``: the union
    of overlapping exclusions by older starts, else the one with the largest
    ``gap``, mostly that of its own segment's start), cut from the hull; a
    start whose hull is empty is retired. A hull holds more than the set it
    bounds, so no start that can be best is dropped.

    Both cuts leave a margin for rounding (``_PRUNE_MARGIN``,
    ``_SQUARES_MARGIN``). With 'mbic' the length term ``log((t - s) / m)``
    grows with the segment, which only makes an older start worse, so the first
    cut holds as it is; the second allows for the most a newer start can gain
    by it, ``log((L + min_size) / min_size)`` (at ``t = c + min_size``).
    """
    a1 = stats[0, c]
    a2 = stats[1, c]
    c1 = rows[0]
    c2 = rows[1]
    lo = bounds[0]
    hi = bounds[1]
    out_lo = bounds[2]
    out_hi = bounds[3]
    cf = float(c)
    # rounding in F and in the costs, now or at any later t, is a few ulps of |F| and of the
    # sums of squares, at most the series' whole sum
    base = _PRUNE_MARGIN * (1.0 + abs(f_c)) + _SQUARES_MARGIN * stats[1, m]
    excl_lo = np.inf
    excl_hi = -np.inf
    excl_gap = -np.inf
    retired = 0
    for j in range(n):
        fs = f_start[j]
        if fs == np.inf:
            continue
        length = cf - starts[j]
        inv = 1.0 / length
        s1 = a1 - c1[j]
        mean = s1 * inv
        gap = f_c - fs - ((a2 - c2[j]) - s1 * mean)
        margin = base + _PRUNE_MARGIN * abs(fs)
        room = gap + margin
        half = math.sqrt(max(room, 0.0) * inv)
        low = max(lo[j], mean - half)
        high = min(hi[j], mean + half)
        if out_lo[j] < low and out_hi[j] > high:
            low = np.inf
        elif out_lo[j] < low:
            low = max(low, out_hi[j])
        elif out_hi[j] > high:
            high = min(high, out_lo[j])
        lo[j] = low
        hi[j] = high
        if not (room >= 0.0 and low <= high):
            f_start[j] = np.inf
            retired += 1
        # the open interval where s beats c by more than the margin
        shut = gap - margin
        if use_length_term:
            shut -= length_term[int(length) + min_size] - length_term[min_size]
        if shut > 0.0:
            half = math.sqrt(shut * inv)
            e_lo = mean - half
            e_hi = mean + half
            if e_lo < excl_hi and e_hi > excl_lo:
                excl_lo = min(excl_lo, e_lo)
                excl_hi = max(excl_hi, e_hi)
                excl_gap = max(excl_gap, shut)
            elif shut > excl_gap:
                excl_lo = e_lo
                excl_hi = e_hi
                excl_gap = shut
    lo[n] = -np.inf
    hi[n] = np.inf
    out_lo[n] = excl_lo
    out_hi[n] = excl_hi
    return retired


@njit(cache=True, error_model="numpy")
def _pelt(
    code,
    n_stats,
    stats,
    m,
    beta,
    length_term,
    use_length_term,
    min_size,
    F,
    last,
    starts,
    cand,
    f_start,
    until,
    vals,
    bounds,
) -> None:
    """PELT over ``m`` present values: fills ``F[t]`` and ``last[t]`` for ``t <= m``.

    ``F[t]`` is the least total cost of the first ``t`` values, ``F[0] = -beta``;
    ``last[t]`` is where the last segment of that optimum starts. Among equal
    totals the earliest start wins.

    The candidate starts are kept in order, with their ``F(s)`` and their
    copies of ``stats[:, s]``, in contiguous arrays. A start ``s`` is pruned at
    ``t`` when ``F(s) + C(s, t) > F(t)`` (K = 0), tested every PRUNE_EVERY
    steps (the rule holds at any step). PELT's argument for dropping it needs
    a last segment from ``t``, at least ``min_size`` long, so a start pruned
    at ``t`` stays usable up to ``t + min_size - 1``; the first pruning pass
    after that retires it (its ``F(s)`` reads as infinite) and a later
    compaction removes it. Keeping a pruned start longer is harmless: from
    ``t + min_size`` on it is strictly worse than the best segmentation with a
    change at ``t``.

    For 'mean' the pruning is functional instead (:func:`_narrow_mean`, with
    ``bounds`` its four intervals' ends per start): a start is compared with
    each newer one ``c`` as ``c`` is admitted (at ``t = c + min_size``, where
    PELT's grace ends) and retired at once when it cannot be best again.
    PELT's rule is the case where it cannot be best at any segment mean.
    """
    F[0] = -beta
    last[0] = 0
    for t in range(1, min_size):
        F[t] = np.inf
        last[t] = 0
    rows = (cand[0], cand[1], cand[2], cand[3], cand[4])
    functional = code == MEAN
    n_cand = 0
    n_pruned = 0
    next_prune = 0
    next_compaction = 0
    for t in range(min_size, m + 1):
        # admit the newest start; F is infinite (never a segment end) for 0 < s < min_size
        s = t - min_size
        if s == 0 or s >= min_size:
            if functional:
                n_pruned += _narrow_mean(
                    stats, m, rows, starts, f_start, bounds, n_cand, s, F[s], length_term, use_length_term, min_size
                )
            starts[n_cand] = s
            f_start[n_cand] = F[s]
            until[n_cand] = np.inf
            for k in range(n_stats):
                cand[k, n_cand] = stats[k, s]
            n_cand += 1
        # vals[j] = F(s_j) + C(s_j, t); one branch per model (see the cost models above)
        if code == MEAN:
            _cost_mean(stats, rows, starts, f_start, n_cand, t, vals)
        elif code == MEANVAR:
            _cost_meanvar(stats, rows, starts, f_start, n_cand, t, vals)
        else:
            _cost_trend(stats, rows, starts, f_start, n_cand, t, vals)
        if use_length_term:
            for j in range(n_cand):
                vals[j] += length_term[t - int(starts[j])]
        # least value, with four running minima so the loop is not one long dependency chain
        b0 = np.inf
        b1 = np.inf
        b2 = np.inf
        b3 = np.inf
        j = 0
        while j + 4 <= n_cand:
            v0 = vals[j]
            v1 = vals[j + 1]
            v2 = vals[j + 2]
            v3 = vals[j + 3]
            b0 = v0 if v0 < b0 else b0
            b1 = v1 if v1 < b1 else b1
            b2 = v2 if v2 < b2 else b2
            b3 = v3 if v3 < b3 else b3
            j += 4
        while j < n_cand:
            v0 = vals[j]
            b0 = v0 if v0 < b0 else b0
            j += 1
        best = min(min(b0, b1), min(b2, b3))
        j = 0
        while j < n_cand - 1 and vals[j] != best:
            j += 1
        F[t] = best + beta
        last[t] = int(starts[j])
        # prune, every PRUNE_EVERY steps (any step may prune; a pass costs about as much as
        # the costs themselves), and retire the starts whose grace has run out
        if not functional and t >= next_prune:
            next_prune = t + PRUNE_EVERY
            tf = float(t)
            bound = F[t] + _PRUNE_MARGIN * (1.0 + abs(F[t]))
            expiry = tf + (min_size - 1)
            n_pruned = 0
            for j in range(n_cand):
                u = min(until[j], expiry if vals[j] > bound else np.inf)
                until[j] = u
                f_start[j] = np.inf if u < tf + 1.0 else f_start[j]
                n_pruned += u != np.inf
        if 2 * n_pruned > n_cand and t >= next_compaction:
            # drop retired starts, keeping the order; starts still in their grace
            # cannot go before min_size more steps, so do not try again sooner
            next_compaction = t + min_size
            kept = 0
            for j in range(n_cand):
                if f_start[j] != np.inf:
                    starts[kept] = starts[j]
                    f_start[kept] = f_start[j]
                    until[kept] = until[j]
                    for k in range(n_stats):
                        cand[k, kept] = cand[k, j]
                    for k in range(4):
                        bounds[k, kept] = bounds[k, j]
                    kept += 1
            n_cand = kept
            n_pruned = 0


@njit(cache=True, error_model="numpy")
def _segment_stats(y, p, lo, hi) -> tuple[float, float]:
    """Mean and least-squares slope (per sample) of ``y[lo:hi]`` at positions ``p``."""
    k = hi - lo
    my = 0.0
    mp = 0.0
    for i in range(lo, hi):
        my += y[i]
        mp += p[i]
    my /= k
    mp /= k
    sxy = 0.0
    sxx = 0.0
    for i in range(lo, hi):
        dp = p[i] - mp
        sxy += dp * (y[i] - my)
        sxx += dp * dp
    return my, (sxy / sxx if sxx > 0.0 else np.nan)


@njit(cache=True, error_model="numpy")
def _segment_row(
    r,
    values,
    offsets,
    valid,
    code,
    n_stats,
    params_per_change,
    penalty_kind,
    penalty_value,
    min_size,
    out_first,
    out_last,
    out_mean,
    out_slope,
    counts,
    row_ok,
) -> None:
    """Segment row ``r``: its segments go to ``out_*[offsets[r]:]``, their number to ``counts[r]``.

    A row of ``n`` values has at most ``n`` segments, so the rows' output slots do
    not overlap. ``row_ok[r]`` is False when the row has no answer (NULL, no present
    value, or an infinite one). Every work buffer is the row's own, so the answer
    does not depend on what else runs, before, after or at the same time.
    """
    counts[r] = 0
    row_ok[r] = False
    if not valid[r]:
        return
    lo = offsets[r]
    n = offsets[r + 1] - lo
    y = np.empty(n)
    p = np.empty(n, dtype=np.int64)
    m = 0
    finite = True
    for i in range(n):
        v = values[lo + i]
        if not np.isnan(v):
            finite = finite and np.isfinite(v)
            y[m] = v
            p[m] = i
            m += 1
    if m == 0 or not finite:
        return
    row_ok[r] = True
    seg = np.empty(m + 1, dtype=np.int64)
    n_seg = 1
    seg[0] = 0
    lowest = y[0]
    highest = y[0]
    for i in range(m):
        lowest = min(lowest, y[i])
        highest = max(highest, y[i])
    if m >= 2 * min_size and lowest < highest:
        work = np.empty(2 * m + 2)
        stats = np.empty((MAX_STATS, m + 1))
        if _prepare(code, y, p, m, stats, work):
            log_m = math.log(m)
            if penalty_kind == _BIC:
                beta = params_per_change * log_m
            elif penalty_kind == _MBIC:
                beta = 3.0 * log_m
            else:
                beta = penalty_value
            use_length_term = penalty_kind == _MBIC
            length_term = np.empty(m + 1)
            if use_length_term:
                length_term[0] = 0.0
                for k in range(1, m + 1):
                    length_term[k] = math.log(k) - log_m
            F = np.empty(m + 1)
            last = np.empty(m + 1, dtype=np.int64)
            _pelt(
                code,
                n_stats,
                stats,
                m,
                beta,
                length_term,
                use_length_term,
                min_size,
                F,
                last,
                np.empty(m + 1),
                np.empty((MAX_STATS, m + 1)),
                np.empty(m + 1),
                np.empty(m + 1),
                np.empty(m + 1),
                np.empty((4, m + 1)),
            )
            # walk back from the end: the starts of the optimum's segments, last first
            n_seg = 0
            t = m
            while t > 0:
                t = last[t]
                seg[n_seg] = t
                n_seg += 1
            for k in range(n_seg // 2):
                a = seg[k]
                seg[k] = seg[n_seg - 1 - k]
                seg[n_seg - 1 - k] = a
    for k in range(n_seg):
        a = seg[k]
        b = seg[k + 1] if k + 1 < n_seg else m
        w = lo + k
        out_first[w] = 1 if k == 0 else p[a] + 1
        out_last[w] = p[b] if k + 1 < n_seg else n
        out_mean[w], out_slope[w] = _segment_stats(y, p, a, b)
    counts[r] = n_seg


# numba releases the GIL around a parallel region (nogil or not), so two Python threads
# (DuckDB runs a UDF from several of its own) could enter the threading layer at once, which
# its 'workqueue' layer (used where neither TBB nor OpenMP loads) answers by aborting the
# process. Calls therefore go through _KERNEL_LOCK (see _run).
@njit(cache=True, error_model="numpy", parallel=True)
def _segment_rows(
    values,
    offsets,
    valid,
    code,
    n_stats,
    params_per_change,
    penalty_kind,
    penalty_value,
    min_size,
    out_first,
    out_last,
    out_mean,
    out_slope,
    counts,
    row_ok,
) -> None:
    """Segment every row (see :func:`_segment_row`), the rows in parallel."""
    for r in prange(len(offsets) - 1):
        _segment_row(
            r,
            values,
            offsets,
            valid,
            code,
            n_stats,
            params_per_change,
            penalty_kind,
            penalty_value,
            min_size,
            out_first,
            out_last,
            out_mean,
            out_slope,
            counts,
            row_ok,
        )


@njit(cache=True, error_model="numpy")
def _segment_rows_in_order(
    values,
    offsets,
    valid,
    code,
    n_stats,
    params_per_change,
    penalty_kind,
    penalty_value,
    min_size,
    out_first,
    out_last,
    out_mean,
    out_slope,
    counts,
    row_ok,
) -> None:
    """:func:`_segment_rows` on this thread alone, for where numba's parallel layer cannot run."""
    for r in range(len(offsets) - 1):
        _segment_row(
            r,
            values,
            offsets,
            valid,
            code,
            n_stats,
            params_per_change,
            penalty_kind,
            penalty_value,
            min_size,
            out_first,
            out_last,
            out_mean,
            out_slope,
            counts,
            row_ok,
        )


def _openmp_layer_loaded() -> bool:
    try:
        return numba.threading_layer() == "omp"
    except ValueError:  # no parallel function has run in this process yet
        return False


#: True in a process forked from one that had loaded numba's OpenMP threading layer: GNU
#: OpenMP cannot run after such a fork (numba terminates the process), so there the rows
#: run on the calling thread. Inherited by further forks.
_FORKED_AFTER_OPENMP = False

#: one batch at a time: calls from several Python threads take turns (see _segment_rows);
#: the kernel already keeps every core busy
_KERNEL_LOCK = threading.Lock()


def _after_fork_in_child() -> None:
    global _FORKED_AFTER_OPENMP, _KERNEL_LOCK
    _FORKED_AFTER_OPENMP = _FORKED_AFTER_OPENMP or _openmp_layer_loaded()
    _KERNEL_LOCK = threading.Lock()  # another thread of the parent may have held it


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_after_fork_in_child)


# --------------------------------------------------------------------------- public


def _run(
    batch: Ragged, model: str, penalty: str | float, min_size: int
) -> tuple[dict[str, np.ndarray], np.ndarray, np.ndarray, np.ndarray]:
    """Validate the arguments and segment the batch.

    Returns the segment columns as the kernel left them (row r's ``counts[r]``
    segments from ``slots[r]`` on, with unused space between rows), ``counts``,
    ``slots`` and the rows' validity.
    """
    if model not in MODELS:
        raise ValueError(f"model must be one of {sorted(MODELS)}, not {model!r}")
    spec = MODELS[model]
    if isinstance(penalty, str):
        if penalty not in PENALTIES:
            raise ValueError(f"penalty must be one of {PENALTIES} or a number >= 0, not {penalty!r}")
        kind, value = (_BIC if penalty == "bic" else _MBIC), 0.0
    else:
        value = float(penalty)
        if not (math.isfinite(value) and value >= 0):
            raise ValueError(f"a numeric penalty must be finite and >= 0, not {penalty!r}")
        kind = _FIXED
    if int(min_size) != min_size or min_size < spec.min_size:
        raise ValueError(f"min_size must be an integer >= {spec.min_size} for model {model!r}, not {min_size!r}")
    values = np.ascontiguousarray(batch.values, dtype=np.float64)
    offsets = np.ascontiguousarray(batch.offsets, dtype=np.int64)
    valid = np.ascontiguousarray(batch.row_valid, dtype=np.bool_)
    n_rows = batch.n_rows
    # row r's slot starts at offsets[r] and a row of n values has at most n segments
    capacity = len(values)
    fields = {
        "first": np.empty(capacity, dtype=np.int64),
        "last": np.empty(capacity, dtype=np.int64),
        "mean": np.empty(capacity),
        "slope": np.empty(capacity),
    }
    counts = np.empty(n_rows, dtype=np.int64)
    row_ok = np.empty(n_rows, dtype=np.bool_)
    kernel = _segment_rows_in_order if _FORKED_AFTER_OPENMP else _segment_rows
    with _KERNEL_LOCK:
        kernel(
            values,
            offsets,
            valid,
            spec.code,
            spec.n_stats,
            float(spec.params_per_change),
            kind,
            value,
            int(min_size),
            fields["first"],
            fields["last"],
            fields["mean"],
            fields["slope"],
            counts,
            row_ok,
        )
    return fields, counts, offsets[:-1], row_ok


def _gather(counts: np.ndarray, slots: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Where each of ``counts[r]`` items starting at ``slots[r]`` lands when packed, and where it is now.

    Returns the packed offsets (``n_rows + 1``) and the source index of every packed item.
    """
    packed = np.zeros(len(counts) + 1, dtype=np.int64)
    np.cumsum(counts, out=packed[1:])
    source = np.arange(packed[-1], dtype=np.int64) + np.repeat(slots - packed[:-1], counts)
    return packed, source


def segments(batch: Ragged, model: str = "mean", penalty: str | float = "bic", min_size: int = 2) -> RaggedRecords:
    """The segments of each series' optimal segmentation.

    The segmentation minimises ``sum_i C(segment_i) + beta * (number of
    changes)`` exactly, by PELT (Killick, Fearnhead & Eckley 2012) with
    ``K = 0``, for 'mean' with functional pruning (FPOP, Maidstone et al.
    2017), so that few changes in a long series cost about ``n``. With ``y``
    the ``m`` present values of a row, ``L`` a segment's number of present
    values and "0" meaning at most 1000 ulps of ``max |y|`` (rounding, not
    noise), the costs are:

    * ``'mean'``: Gaussian shifts of the mean, common variance:
      ``RSS / sigma^2`` about the segment mean, with
      ``sigma = 1.4826 * MAD(diff(y)) / sqrt(2)``, which the shifts
      themselves barely move (Hampel 1974; differences as in Rice 1984). If
      that is 0 (e.g. piecewise-constant data): ``std(diff(y)) / sqrt(2)``;
      if that is 0 too (a straight ramp): ``std(y)``.
    * ``'meanvar'``: mean and variance both change:
      ``L * log(var / V + 1e-4)``, with ``var`` the segment's
      maximum-likelihood variance and ``V`` the whole row's: a floor of 1e-4 of
      ``V``, added rather than a ``max`` so the cost stays sub-additive
      (K = 0). Two-point segments have very noisy variances; ``min_size`` of
      5 or more is advisable.
    * ``'trend'``: piecewise linear, own intercept and slope per segment:
      ``RSS`` of the segment's least-squares line against the positions,
      ``/ sigma^2``, with ``sigma`` = 1.4826 * MAD of the second differences,
      each normalised to unit noise variance (``diff(y, 2) / sqrt(6)`` on an
      even grid; with gaps, each value's residual from the line through its
      present neighbours): unlike first differences they do not see the
      slope, and a change of slope disturbs only one of them. Fallbacks as for
      'mean', with their standard deviation, then ``std(y)``.

    Penalty ``beta``, in the cost's units (twice a negative log-likelihood):

    * ``'bic'`` (Schwarz 1978): (parameters a change adds) x ``log m``:
      ``2 log m`` for 'mean' (position, mean), ``3 log m`` for 'meanvar'
      (position, mean, variance) and 'trend' (position, intercept, slope).
    * ``'mbic'`` (Zhang & Siegmund 2007): ``3 log m`` per change, plus
      ``sum_i log(L_i / m)`` over the segments. That second part is not a
      price per change but a sum over segments, so it is folded into each
      segment's cost, ``C'(s, t) = C(s, t) + log((t - s) / m)``, which is
      still sub-additive (``L1 L2 <= m (L1 + L2)``), so K = 0 holds. The same
      form is used for every model; as the length term is <= 0, it is
      stricter than 'bic' for 'mean' but more lenient for 'meanvar' and
      'trend', whose 'bic' is already ``3 log m``.
    * a number: ``beta`` itself, added per change.

    Ties (equal totals) go to the segmentation whose last segment starts
    earliest, and so on backwards.

    Parameters
    ----------
    batch : Ragged
        The series; NaN elements are missing.
    model : {'mean', 'meanvar', 'trend'}
    penalty : {'bic', 'mbic'} or float >= 0
    min_size : int
        Least number of present values in a segment: >= 1 for 'mean', >= 2 for
        'meanvar' (a variance needs two values) and 'trend' (a line needs two).

    Returns
    -------
    RaggedRecords
        Per row, one record per segment, in order: ``first`` and ``last``
        (int64, 1-based, inclusive; the first segment starts at 1 and the last
        ends at the list's length, so missing elements at either end belong
        to them), ``mean`` of the segment's present values, and ``slope``, the
        least-squares slope per sample against their positions (NaN with fewer
        than two present values). NULL, empty and all-missing rows, and rows
        with an infinite value, are invalid. A row with fewer than
        ``2 * min_size`` present values, or whose values are all equal (up to
        rounding), is one segment.

    Examples
    --------
    >>> s = segments(Ragged.from_list([[0.0, 0.1, -0.1, 0.0, 5.0, 5.1, 4.9, 5.0]]))
    >>> s.row(0)["first"], s.row(0)["last"]
    (array([1, 5]), array([4, 8]))
    """
    fields, counts, slots, row_ok = _run(batch, model, penalty, min_size)
    offsets, source = _gather(counts, slots)
    return RaggedRecords({name: column[source] for name, column in fields.items()}, offsets, row_ok)


def change_points(batch: Ragged, model: str = "mean", penalty: str | float = "bic", min_size: int = 2) -> Ragged:
    """Positions where each series' optimal segmentation starts a new segment.

    The same segmentation as :func:`segments` (see there for the costs, the
    penalties and the rules for short, constant and missing data).

    Returns
    -------
    Ragged
        Per row, the 1-based positions (float64, integral, increasing) of the
        first element of every segment but the first; empty when there is no
        change; ``row_valid`` False for NULL, empty and all-missing rows.

    Examples
    --------
    >>> change_points(Ragged.from_list([[0.0, 0.1, -0.1, 0.0, 5.0, 5.1, 4.9, 5.0]])).values
    array([5.])
    """
    fields, counts, slots, row_ok = _run(batch, model, penalty, min_size)
    # every segment but a row's first starts a change
    offsets, source = _gather(np.maximum(counts - 1, 0), slots + 1)
    return Ragged(fields["first"][source].astype(np.float64), offsets, row_ok)
