"""Change points: where a series' level, spread or trend changes, by exact penalised segmentation.

A series is cut where ``sum of segment costs + penalty x number of changes``
is least. The search is exact and kept apart from the cost models: PELT
(Killick, Fearnhead & Eckley 2012), pruned functionally for 'mean' (FPOP,
Maidstone et al. 2017) and geometrically for 'meanvar' and 'trend' (boxes of
the parameters where a start can still be best; Pishchagina, Rigaill & Runge
2024): for 'mean' one change in a long series costs little more than its length (for
'meanvar' and 'trend' the starts kept still grow about as its square root, but most of them
are set aside by PELT's own inequality against the leading start and costed again only when
a change could let them win; see :func:`_pelt`); :func:`segments` and
:func:`change_points` give the optimum at one penalty (optionally with at most ``max_changes``
changes), :func:`change_points_path` every optimum as the penalty varies.
Cycles are removed first (``seasonal``). How the costs, noise scale and
penalties are defined and chosen is in :func:`segments`, Notes.

Adding a model: ``_prepare_x`` (cumulative sums ``stats[k, i]`` over the first
``i`` present values of the scaled series; it returns the scale, 0 if there is none),
``_cost_x`` (``base[j] + C(s_j, t)`` for all candidate starts at once) and a
:class:`CostModel` entry, plus one branch in :func:`_prepare`, in the step of
:func:`_pelt` and in :func:`_neighbourhood`. Every cost satisfies
``C(a, b) + C(b, c) <= C(a, c)`` (PELT prunes with ``K = 0``) and is in units
of twice a negative Gaussian log-likelihood. The models and the search share
one module because numba's cache checks only the source file of the function
it loads.

Rows are independent: each row is read, segmented and written by itself, into
output slots fixed by its position, so an answer depends neither on the other
rows nor on the threads ('mean' searches rows with the same number of present
values together, one per vector lane, each lane doing exactly what the search
of its row alone does: :func:`_fpop_lanes`). The compiled search releases the
GIL: DuckDB's threads segment their batches at once.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit, types
from numba.extending import intrinsic
from scipy.stats import chi2

from tsql.kernels.normal_equations import cholesky, solve
from tsql.kernels.ragged import Ragged, RaggedRecords, magnitudes

__all__ = ["MODELS", "MIN_SIZE", "PENALTIES", "SEASONAL", "change_points", "change_points_path", "segments"]

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

#: Share of the squared differences the semivariogram keeps (the smallest ones).
TRIM_KEEP = 0.9

#: 1 / E[X | X <= its 90 % quantile] for X ~ chi2(1): the trimmed mean of squared
#: Gaussian differences times this is their variance (x f_1(x) is the chi2(3) density).
TRIM_CONSISTENCY = TRIM_KEEP / chi2.cdf(chi2.ppf(TRIM_KEEP, 1), 3)

#: Fewest present values from which the long-run factor is estimated (below it: 1), and
#: the fewest effective observations it may leave (``m / factor``): a series is never
#: taken for less evidence than this many independent values.
LONG_RUN_MIN = 20

#: Largest lag-one autocorrelation the long-run factor believes: a series whose robust
#: semivariogram grows faster than an AR(1)'s (drift, random walk, smooth trend) is
#: treated as this persistent, so only shifts far beyond its wandering count.
LONG_RUN_RHO = 0.99

#: Most cumulative sums any model keeps (rows of the ``stats`` table).
MAX_STATS = 6

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
    "trend": CostModel("trend", TREND, n_stats=6, params_per_change=3, min_size=2),
}


# --------------------------------------------------------------------------- noise scale


@njit(cache=True, error_model="numpy")
def _select(a: np.ndarray, k: int, n: int, index: np.ndarray) -> float:
    """The k-th smallest of ``a[:n]`` (0-based), reordering ``a`` (Hoare 1961, FIND); ``index``: ``2 n`` scratch.

    Median-of-three pivots; afterwards every ``a[i]`` with ``i < k`` is at most
    the answer.

    Each partition makes Hoare's exchanges, in his order, without his data-dependent
    branches: his left scan stops, in turn, at the positions (ascending) whose value is
    not below the pivot, his right one at those (descending) whose value is not above
    it, so the ``q``-th exchange swaps the ``q``-th of each list, for as long as the
    two have not crossed; both lists are made first, branch-free, and where the scans
    end follows from them. The array ends as his does (the callers sum parts of it).
    """
    left = index[:n]
    right = index[n : 2 * n]
    lo = 0
    hi = n - 1
    while lo < hi:
        x = a[lo]
        y = a[(lo + hi) // 2]
        z = a[hi]
        pivot = max(min(x, y), min(max(x, y), z))
        n_left = 0
        n_right = 0
        for i in range(lo, hi + 1):
            j = hi + lo - i
            left[n_left] = i
            right[n_right] = j
            n_left += not (a[i] < pivot)
            n_right += not (a[j] > pivot)
        q = 0
        while q < n_left and q < n_right and left[q] <= right[q]:
            i = left[q]
            j = right[q]
            a[i], a[j] = a[j], a[i]
            q += 1
        if q == 0:
            i = left[0]
            j = right[0]
        else:
            # after the last exchange: the scans run again only if the two ends have not met
            i = left[q - 1] + 1
            j = right[q - 1] - 1
            if i <= j:
                # positions i..j are as they were; beyond them lie the values just exchanged,
                # where each scan stops at the latest
                end_i = j + 1
                end_j = i - 1
                i = left[q] if q < n_left and left[q] <= end_i - 1 else end_i
                j = right[q] if q < n_right and right[q] >= end_j + 1 else end_j
        # a[lo..j] <= pivot <= a[i..hi], and a[j + 1..i - 1] == pivot
        if k <= j:
            hi = j
        elif k >= i:
            lo = i
        else:
            return a[k]
    return a[k]


@njit(cache=True, error_model="numpy")
def _median(a: np.ndarray, n: int, index: np.ndarray) -> float:
    """Median of ``a[:n]`` as numpy.median defines it; reorders ``a`` (``index``: scratch, see :func:`_select`)."""
    upper = _select(a, n // 2, n, index)
    if n % 2:
        return upper
    lower = a[0]
    for i in range(1, n // 2):
        lower = max(lower, a[i])
    return (lower + upper) / 2.0


@njit(cache=True, error_model="numpy")
def _std(y: np.ndarray, m: int, total: float) -> tuple[float, float]:
    """Mean and standard deviation (ddof 0) of ``y[:m]``, whose sum (from 0, in order) is ``total``."""
    mean = total / m
    acc = 0.0
    for i in range(m):
        acc += (y[i] - mean) ** 2
    return mean, math.sqrt(acc / m)


@njit(cache=True, error_model="numpy")
def _rounding(lowest: float, highest: float) -> float:
    """The scale below which a spread in values from ``lowest`` to ``highest`` is rounding: ROUNDING_ULPS ulps
    of their largest magnitude."""
    return ROUNDING_ULPS * np.finfo(np.float64).eps * max(abs(lowest), abs(highest))


@njit(cache=True, error_model="numpy")
def _line_residual_sd(y: np.ndarray, p: np.ndarray, m: int) -> tuple[float, float, float]:
    """Mean of ``y[:m]``, least-squares slope against the positions ``p``, and the residuals' sd (ddof 0)."""
    my = 0.0
    mp = 0.0
    for i in range(m):
        my += y[i]
        mp += p[i]
    my /= m
    mp /= m
    sxy = 0.0
    sxx = 0.0
    syy = 0.0
    for i in range(m):
        dp = p[i] - mp
        dy = y[i] - my
        sxy += dp * dy
        sxx += dp * dp
        syy += dy * dy
    slope = sxy / sxx if sxx > 0.0 else 0.0
    rss = max(syy - slope * sxy, 0.0)
    return my, slope, math.sqrt(rss / m)


@njit(cache=True, error_model="numpy")
def _trimmed_half_mean(s: np.ndarray, k: int, index: np.ndarray) -> float:
    """Half the mean of the smallest 90 % of ``s[:k]``, times TRIM_CONSISTENCY; reorders ``s``."""
    keep = max(1, int(math.ceil(TRIM_KEEP * k)))
    bound = _select(s, keep - 1, k, index)
    total = 0.0
    for i in range(keep - 1):
        total += s[i]
    total += bound
    return 0.5 * TRIM_CONSISTENCY * total / keep


@njit(cache=True, error_model="numpy")
def _centred_scale(y: np.ndarray, m: int, lag: int, work: np.ndarray, index: np.ndarray) -> float:
    """:func:`_difference_scales` at one ``lag``, centred: the differences go to ``work[m:]``, their squares to
    ``work[:m]``."""
    k = m - lag
    d = work[m:]
    for i in range(k):
        d[i] = y[i + lag] - y[i]
    centre = _median(d, k, index)
    for i in range(k):
        work[i] = (d[i] - centre) ** 2
    return _trimmed_half_mean(work, k, index)


@njit(cache=True, error_model="numpy")
def _difference_scales(y: np.ndarray, m: int, centred: bool, work: np.ndarray, index: np.ndarray):
    """Trimmed semivariograms at lags 1 and 2: half the mean of the smallest 90 % of ``(d - c)^2``.

    ``d = y[i + lag] - y[i]``; ``c`` is the median of ``d`` when ``centred``
    (blind to a straight line), else 0 (a trend then counts as drift). The
    largest tenth, where the level shifts' differences are, is left out; the
    factor TRIM_CONSISTENCY makes the rest a consistent Gaussian estimate.
    Uses ``work[:2 m]`` and ``index[:2 m]``; uncentred, both lags' squares in one pass.
    """
    if centred:  # int64 lags, not two literal types: one compile
        return _centred_scale(y, m, np.int64(1), work, index), _centred_scale(y, m, np.int64(2), work, index)
    for i in range(m - 2):
        d1 = y[i + 1] - y[i]
        d2 = y[i + 2] - y[i]
        work[i] = d1**2
        work[m + i] = d2**2
    work[m - 2] = (y[m - 1] - y[m - 2]) ** 2
    return _trimmed_half_mean(work, m - 1, index), _trimmed_half_mean(work[m:], m - 2, index)


@njit(cache=True, error_model="numpy")
def _long_run_factor(y, m, variance, centred, work, index) -> float:
    """How much serial dependence inflates the noise: ``max(1, s2_LR / variance)``, at most ``m / 20``.

    AR(1) read off a robust semivariogram (see :func:`segments`, Notes):
    ``gamma(k) = gamma0 (1 - rho^k)``, so ``rho = gamma(2) / gamma(1) - 1``,
    clipped to [0, LONG_RUN_RHO]; the long-run variance is
    ``gamma0 (1 + rho) / (1 - rho) = gamma(1) (1 + rho) / (1 - rho)^2``.
    Level shifts barely move the medians of the differences; drift, trends
    and autocorrelation raise ``gamma(2)`` above ``gamma(1)``.
    """
    if m < LONG_RUN_MIN or not variance > 0.0:
        return 1.0
    g1, g2 = _difference_scales(y, m, centred, work, index)
    if not g1 > 0.0:
        return 1.0
    rho = min(max(g2 / g1 - 1.0, 0.0), LONG_RUN_RHO)
    long_run = g1 * (1.0 + rho) / ((1.0 - rho) * (1.0 - rho))
    return min(max(long_run / variance, 1.0), max(1.0, m / LONG_RUN_MIN))


# --------------------------------------------------------------------------- 'mean'


@njit(cache=True, error_model="numpy")
def _accumulate(s, c, x) -> tuple[float, float]:
    """One step of compensated summation (Neumaier 1974): ``s + c`` is the running sum, ``c`` its rounding."""
    t = s + x
    if abs(s) >= abs(x):
        c += (s - t) + x
    else:
        c += (x - t) + s
    return t, c


@njit(cache=True, error_model="numpy")
def _standardised_sums(y, m, centre, scale, stats) -> None:
    """Cumulative sums of z and z^2, z = (y - centre) / scale, into stats[0] and stats[1].

    Compensated: each is the exact sum of its terms to within an ulp or two (not
    ``m`` ulps), which :func:`_rounding_scale` relies on.
    """
    s1 = 0.0
    e1 = 0.0
    s2 = 0.0
    e2 = 0.0
    stats[0, 0] = 0.0
    stats[1, 0] = 0.0
    for i in range(m):
        z = (y[i] - centre) / scale
        s1, e1 = _accumulate(s1, e1, z)
        s2, e2 = _accumulate(s2, e2, z * z)
        stats[0, i + 1] = s1 + e1
        stats[1, i + 1] = s2 + e2


@njit(cache=True, error_model="numpy")
def _prepare_mean(y, p, m, lowest, highest, total, stats) -> float:
    centre, sd = _std(y, m, total)
    if not sd > _rounding(lowest, highest):
        return 0.0
    _standardised_sums(y, m, centre, sd, stats)
    return sd


@njit(cache=True, error_model="numpy")
def _cost_mean_one(a1, a2, t, base, s, c1, c2) -> float:
    """``base + C(s, t)`` for 'mean' from the sums at ``t`` (``a1``, ``a2``) and at ``s`` (``c1``, ``c2``)."""
    d = a1 - c1
    return base + ((a2 - c2) - d * d / (t - s))


@njit(cache=True, error_model="numpy")
def _cost_mean(stats, rows, starts, base, idx, m, t, out) -> None:
    """RSS about the segment mean, in units of sigma^2 (``out[k]`` for candidate ``idx[k]``, ``k < m``)."""
    a1 = stats[0, t]
    a2 = stats[1, t]
    c1 = rows[0]
    c2 = rows[1]
    tf = float(t)
    for k in range(m):
        j = idx[k]
        out[k] = _cost_mean_one(a1, a2, tf, base[j], starts[j], c1[j], c2[j])


# --------------------------------------------------------------------------- 'meanvar'


@njit(cache=True, error_model="numpy")
def _prepare_meanvar(y, p, m, lowest, highest, total, stats) -> float:
    centre, sd = _std(y, m, total)
    if not sd > _rounding(lowest, highest):
        return 0.0
    _standardised_sums(y, m, centre, sd, stats)
    return sd


@njit(cache=True, error_model="numpy")
def _cost_meanvar(stats, rows, starts, base, idx, m, t, out) -> None:
    """L log(var + floor), the series scaled to unit variance (floor = VARIANCE_FLOOR)."""
    a1 = stats[0, t]
    a2 = stats[1, t]
    c1 = rows[0]
    c2 = rows[1]
    tf = float(t)
    for k in range(m):
        j = idx[k]
        length = tf - starts[j]
        inv = 1.0 / length
        mean = (a1 - c1[j]) * inv
        var = max((a2 - c2[j]) * inv - mean * mean, 0.0)
        out[k] = base[j] + length * math.log(var + VARIANCE_FLOOR)


# --------------------------------------------------------------------------- 'trend'


#: the sum of squared positions is kept as an integer split in two exact float64 rows: the multiple
#: of this power of two, and the rest
_SQUARES_SPLIT = 1 << 24


@njit(cache=True, error_model="numpy")
def _prepare_trend(y, p, m, lowest, highest, stats) -> float:
    """Sums over the positions ``u`` (centred on the middle one) and ``z``, the values' residuals
    about the whole series' line in units of their standard deviation.

    Rows: ``sum u`` (0), ``sum u^2`` as an exact multiple of ``_SQUARES_SPLIT`` (1) and the
    rest (5), ``sum z`` (2), ``sum z^2`` (3), ``sum u z`` (4). A segment's least-squares line
    does not change its residuals when a line is taken from the values, so the costs are
    those of the raw values; the small ``u`` and ``z`` keep the sums well-conditioned, the
    positions' sums are exact (:func:`_trend_local`) and the others compensated
    (:func:`_accumulate`).
    """
    centre, slope, sigma = _line_residual_sd(y, p, m)
    if not sigma > _rounding(lowest, highest):
        return 0.0
    mp = 0.0
    for i in range(m):
        mp += p[i]
    mp /= m
    origin = p[m // 2]
    st = np.int64(0)
    stt = np.int64(0)
    sx = 0.0
    ex = 0.0
    sxx = 0.0
    exx = 0.0
    stx = 0.0
    etx = 0.0
    for k in range(6):
        stats[k, 0] = 0.0
    for i in range(m):
        u = p[i] - origin
        z = (y[i] - centre - slope * (p[i] - mp)) / sigma
        st += u
        stt += u * u
        sx, ex = _accumulate(sx, ex, z)
        sxx, exx = _accumulate(sxx, exx, z * z)
        stx, etx = _accumulate(stx, etx, float(u) * z)
        rest = stt % _SQUARES_SPLIT
        stats[0, i + 1] = float(st)
        stats[1, i + 1] = float(stt - rest)
        stats[5, i + 1] = float(rest)
        stats[2, i + 1] = sx + ex
        stats[3, i + 1] = sxx + exx
        stats[4, i + 1] = stx + etx
    return sigma


@njit(cache=True, error_model="numpy")
def _trend_local(length, o, dt, dtt_high, dtt_rest, dx, dtx) -> tuple[float, float, float]:
    """A segment's ``sum (u - o)``, ``sum (u - o)^2`` and ``sum (u - o) z`` from its differences of
    the cumulative sums, ``o`` an integral position near it.

    The positions' sums are integers, combined exactly in int64 (two's complement: exact
    whenever the result fits, whatever the intermediate products).
    """
    n = np.int64(length)
    c = np.int64(o)
    t1 = np.int64(dt)
    t2 = np.int64(dtt_high) + np.int64(dtt_rest)
    s1 = t1 - n * c
    s2 = t2 - 2 * c * t1 + n * c * c
    return float(s1), float(s2), dtx - o * dx


@njit(cache=True, error_model="numpy")
def _cost_trend(stats, rows, starts, base, idx, m, t, out) -> None:
    """RSS about the segment's least-squares line, in units of sigma^2."""
    a_t = stats[0, t]
    a_tt = stats[1, t]
    a_x = stats[2, t]
    a_xx = stats[3, t]
    a_tx = stats[4, t]
    a_rest = stats[5, t]
    o = a_t - stats[0, t - 1]  # the segment's last position
    c_t = rows[0]
    c_tt = rows[1]
    c_x = rows[2]
    c_xx = rows[3]
    c_tx = rows[4]
    c_rest = rows[5]
    tf = float(t)
    for k in range(m):
        j = idx[k]
        # with L the length and S the sums over the segment (positions less o), L times the
        # centred sums: tt = L Stt - St^2, tx = L Stx - St Sx, xx = L Sxx - Sx^2;
        # RSS = (xx - tx^2 / tt) / L, with one division
        length = tf - starts[j]
        dx = a_x - c_x[j]
        st, stt, stx = _trend_local(length, o, a_t - c_t[j], a_tt - c_tt[j], a_rest - c_rest[j], dx, a_tx - c_tx[j])
        tt = length * stt - st * st
        tx = length * stx - st * dx
        xx = length * (a_xx - c_xx[j]) - dx * dx
        # a one-point segment (tt == 0) has no residual
        rss = (xx * tt - tx * tx) / (tt * length) if tt > 0.0 else 0.0
        out[k] = base[j] + max(rss, 0.0)


@njit(cache=True, error_model="numpy")
def _prepare(code, y, p, m, lowest, highest, total, stats) -> float:
    """Fill ``stats[:, :m + 1]`` for model ``code``; the scale the series is standardised by, 0 if it has none
    (the standard deviation about its mean, for 'trend' about its line).

    ``lowest``, ``highest`` and ``total``: the smallest and largest values and their sum (see :func:`_present`).
    """
    if code == MEAN:
        return _prepare_mean(y, p, m, lowest, highest, total, stats)
    if code == MEANVAR:
        return _prepare_meanvar(y, p, m, lowest, highest, total, stats)
    return _prepare_trend(y, p, m, lowest, highest, stats)


@njit(cache=True, error_model="numpy")
def _noise_factor(code, y, m, scale, work, index) -> float:
    """The long-run factor (>= 1) that multiplies a named penalty for model ``code``.

    Against the variance the cost is scaled by, ``scale ** 2`` (``scale`` as :func:`_prepare`
    returns it): the series' own for 'mean' and 'meanvar' (trends count as drift), the
    residuals' about the series' line for 'trend' (its semivariogram centred, blind to the line).
    """
    centred = code == TREND  # one call site: a literal True / False would compile the callee twice
    return _long_run_factor(y, m, scale**2, centred, work, index)


#: smallest ``min_size`` each model accepts
MIN_SIZE: dict[str, int] = {name: model.min_size for name, model in MODELS.items()}

#: named penalties; a finite number >= 0 is also accepted
PENALTIES = ("bic", "mbic")

#: named choices for ``seasonal``; a period in samples (>= 2) is also accepted
SEASONAL = ("auto", "none")

#: 'auto' removes a cycle whose Fisher's g p-value is below this
SEASONAL_LEVEL = 0.01

#: fewest whole cycles in the record for 'auto' to take a cycle as one (residuals of a drift
#: have their power at the longest periods, where Fisher's white-noise null does not hold)
SEASONAL_CYCLES = 4

#: most harmonics of a period a removed cycle has (all of them, up to Nyquist, for periods up to 13)
MAX_HARMONICS = 6

#: most present values of a row the segment-neighbourhood programme (``O(k m^2)``) runs on: a
#: longer row gets no answer from ``change_points_path``, nor from ``max_changes`` when the
#: penalised optimum has too many changes (10,000 values and 10 changes: about 5e8 segment costs)
MAX_PROGRAMME = 10_000

_BIC, _MBIC, _FIXED = 0, 1, 2

#: PELT keeps a candidate unless it is worse than the optimum by more than this
#: share of ``1 + |F(t)|``: a margin for rounding, so pruning never drops the optimum.
_PRUNE_MARGIN = 1e-9

#: functional pruning ('mean') also leaves this share of the series' sum of squared
#: standardised values, a bound on every segment's (some 4,500 ulps of it)
_SQUARES_MARGIN = 1e-12

#: steps between pruning passes
PRUNE_EVERY = 4

#: geometric functional pruning ('meanvar', 'trend'): a start of age ``a`` is narrowed again
#: after ``_WAIT + a * _REVISIT`` steps: old ones change little, and young ones seldom go (a short
#: segment leaves its slope, or its variance, nearly free: on a calm million points, 'trend' retired
#: a start in fewer than 1 of 100 narrowings below age 128, which were half of all narrowings),
#: while a narrowing costs about as much as keeping a start a few hundred steps longer
_REVISIT = 1.0 / 8.0
_WAIT = 64.0

#: ... and each time tested against this many older starts' regions of victory: the one it
#: remembers and others drawn by a fixed rule from those kept
_EXCLUSIONS = 3

#: 'meanvar': ... and clipped to where it beats this many newer kept starts as well (besides the
#: newest), drawn by a fixed rule: on a calm million points this halves the starts kept (a start's
#: box shrinks to where it beats every newer start only by many clips; with every newer start's
#: and every older one's regions, boxes would keep a tenth of them, exact regions a hundredth).
#: With the remembered region that of the start's own last segment (see :func:`_narrow_box`), 1, 2
#: or 3 newer clips (none: 5% more) and 2 or 3 exclusions (before it, 3, 5 or 8) took the same time on
#: a calm million points within the noise: fewer starts kept cost dearer narrowings. The time went to
#: clips (the bounding boxes: about half, before the table of :func:`_log_variance_bounds` a
#: quarter of it in ``exp``), the narrowing loop (a quarter), logs (an eighth), segment costs; most
#: starts went in the cut of an older start's region, at ages 256 to 2,048, after 4 to 10 narrowings
#: (the first, at age 1, never retires one, but leaving it out took 5% more: its clip seeds the box)
_NEWER_CLIPS = 2

#: lazy evaluation: the starts looked at every step may grow by this many plus the cube root of
#: twice the starts kept before those are sorted again (a new group set aside), and there may be as
#: many groups (at most ``_GROUPS``) before all starts are looked at again (k new starts between
#: groups, k groups between full passes over n: about k / 2 + k / 2 + n / k^2 costs per step)
_NEAR_GROWTH = 2
_GROUPS = 32

#: geometric functional pruning ('meanvar', 'trend'): the newest starts (slots) looked for every step,
#: and the steps between looks for the older ones due to be narrowed
_YOUNG = 64
_SWEEP_EVERY = 32

#: 'meanvar' pruning: a log variance this far above a fit's leaves its means uncut (``exp`` overflows near 709)
_EXP_RANGE = 700.0

#: geometric functional pruning ('meanvar', 'trend') widens its boxes by this share, for
#: rounding in their own arithmetic
_BOX_SLACK = 1e-9


# --------------------------------------------------------------------------- search


@njit(cache=True, error_model="numpy")
def _fpop(stats, m, beta, length_term, use_length_term, min_size, F, last, starts, cand, f_start, bounds) -> None:
    """The search of :func:`_pelt` for 'mean', pruned functionally (FPOP): fills ``F`` and ``last`` from ``min_size``.

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
    newer start ``c`` as it is admitted (at ``t = c + min_size``, where PELT's
    grace ends), and one interval where it may not (``bounds[2:4]``: the union
    of overlapping exclusions by older starts, else the one with the largest
    ``gap``, mostly that of its own segment's start), cut from the hull; a
    start whose hull is empty is retired. A hull holds more than the set it
    bounds, so no start that can be best is dropped.

    Both cuts leave a margin for rounding (``_PRUNE_MARGIN``,
    ``_SQUARES_MARGIN``). With 'mbic' the length term ``log((t - s) / m)``
    grows with the segment, which only makes an older start worse, so the first
    cut holds as it is; the second allows for the most a newer start can gain
    by it, ``log((L + min_size) / min_size)`` (at ``t = c + min_size``).

    The slots hold only the starts still kept, in order: one pass per step
    narrows them by the newest start, moves the kept ones down over the retired,
    and costs them at ``t`` (the least total, the earliest start among equal ones).
    About seven starts are costed per step on white noise: too few for vectors within
    a row (a vectorised narrowing pass followed by an in-order merge measured 1.4x
    slower); :func:`_fpop_lanes` runs this search on several rows at once instead.
    """
    c1 = cand[0]
    c2 = cand[1]
    lows = bounds[0]
    highs = bounds[1]
    out_lows = bounds[2]
    out_highs = bounds[3]
    squares = _SQUARES_MARGIN * stats[1, m]
    # the reciprocals of the segment lengths, each divided once (a division per start and step is
    # the costliest step of the pass; looked up, the value is the same)
    reciprocal = np.empty(m + 1)
    for length in range(1, m + 1):
        reciprocal[length] = 1.0 / float(length)
    n = 0
    for t in range(min_size, m + 1):
        a1 = stats[0, t]
        a2 = stats[1, t]
        tf = float(t)
        best = np.inf
        k = 0
        # admit the newest start; F is infinite (never a segment end) for 0 < c < min_size
        c = t - min_size
        admit = c == 0 or c >= min_size
        f_c = F[c]
        ca1 = stats[0, c]
        ca2 = stats[1, c]
        cf = float(c)
        # rounding in F and in the costs, now or at any later t, is a few ulps of |F| and of the
        # sums of squares, at most the series' whole sum
        base = _PRUNE_MARGIN * (1.0 + abs(f_c)) + squares
        excl_lo = np.inf
        excl_hi = -np.inf
        excl_gap = -np.inf
        kept = 0
        # Written for speed, same arithmetic: selects instead of branches (which way a start goes
        # is data, and mispredictions cost more than computing both ways), ``x if x > y else y``
        # for max (the builtin is a call); a retired start is written too, then written over.
        for j in range(n):
            fs = f_start[j]
            sj = starts[j]
            s1_j = c1[j]
            s2_j = c2[j]
            keep = True
            if admit:
                length = cf - sj
                inv = reciprocal[int(length)]
                s1 = ca1 - s1_j
                mean = s1 * inv
                gap = f_c - fs - ((ca2 - s2_j) - s1 * mean)
                margin = base + _PRUNE_MARGIN * abs(fs)
                room = gap + margin
                half = math.sqrt((0.0 if 0.0 > room else room) * inv)
                low = mean - half
                low = low if low > lows[j] else lows[j]
                high = mean + half
                high = high if high < highs[j] else highs[j]
                # the exclusion cuts the hull where it reaches past an end, and empties it when it covers it
                out_lo = out_lows[j]
                out_hi = out_highs[j]
                below = out_lo < low
                above = out_hi > high
                low_cut = out_hi if out_hi > low else low
                high_cut = out_lo if out_lo < high else high
                low = np.inf if below & above else (low_cut if below else low)
                high = high_cut if above & (not below) else high
                keep = (room >= 0.0) & (low <= high)
                lows[kept] = low
                highs[kept] = high
                out_lows[kept] = out_lo
                out_highs[kept] = out_hi
                # the open interval where s beats c by more than the margin
                shut = gap - margin
                if use_length_term:
                    shut -= length_term[int(length) + min_size] - length_term[min_size]
                half = math.sqrt((0.0 if 0.0 > shut else shut) * inv)
                e_lo = mean - half
                e_hi = mean + half
                shut_out = shut > 0.0
                merge = shut_out & (e_lo < excl_hi) & (e_hi > excl_lo)
                take = shut_out & (not merge) & (shut > excl_gap)
                merged_lo = e_lo if e_lo < excl_lo else excl_lo
                merged_hi = e_hi if e_hi > excl_hi else excl_hi
                merged_gap = shut if shut > excl_gap else excl_gap
                excl_lo = merged_lo if merge else (e_lo if take else excl_lo)
                excl_hi = merged_hi if merge else (e_hi if take else excl_hi)
                excl_gap = merged_gap if merge else (shut if take else excl_gap)
                starts[kept] = sj
                f_start[kept] = fs
                c1[kept] = s1_j
                c2[kept] = s2_j
            value = _cost_mean_one(a1, a2, tf, fs, sj, s1_j, s2_j)
            if use_length_term:
                value += length_term[t - int(sj)]
            lower = keep & (value < best)
            best = value if lower else best
            k = kept if lower else k
            kept += keep
        n = kept
        if admit:
            starts[n] = cf
            f_start[n] = f_c
            c1[n] = ca1
            c2[n] = ca2
            lows[n] = -np.inf
            highs[n] = np.inf
            out_lows[n] = excl_lo
            out_highs[n] = excl_hi
            value = _cost_mean_one(a1, a2, tf, f_c, cf, ca1, ca2)
            if use_length_term:
                value += length_term[t - c]
            if value < best:
                best = value
                k = n
            n += 1
        F[t] = best + beta
        last[t] = int(starts[k])


#: rows searched at once by :func:`_fpop_lanes`, one per vector lane (8 doubles: one AVX-512 register)
LANES = 8

#: most present values of a row searched in lanes: a group holds its rows' arrays all at once (about 56
#: bytes per value each), a longer row is searched by itself (where a row's fixed costs matter little)
LANE_POINTS = 100_000

#: admitted steps between compactions of the lanes' slots (retired starts are masked until then)
_COMPACT_EVERY = 4

# the lane search's per-slot fields (``slots[(j * _SLOT_FIELDS + field) * LANES + lane]``) and per-lane
# ones (``lane[field * LANES + lane]``): flat, with constant strides, so that the vectoriser sees
# fields a constant distance apart and needs no run-time check between them
_START, _F_START, _C1, _C2, _LOW, _HIGH, _OUT_LO, _OUT_HI, _TERM = range(9)
_SLOT_FIELDS = 9
# (``_ZERO`` is -0.0, read at run time: see :func:`_pick`)
_BEST, _BEST_START, _EX_LO, _EX_HI, _EX_GAP, _BASE, _A1, _A2, _CA1, _CA2, _FC, _TERM0, _ZERO = range(13)
_LANE_FIELDS = 13


@intrinsic
def _pick(typingctx, keep, a, b):
    """``a if keep else b`` as one select instruction, never a branch.

    Python's conditional expression compiles to a branch; where its value is stored back over
    the value it was loaded from (``x = y if c else x``), the vectoriser turns the store into a
    masked one, which AMD processors with AVX2 only (Zen 1 to 3) run in microcode, many times
    slower than a plain store (cheap on AVX-512, where the plain store is as cheap). With a
    select, and the loaded value added to ``-0.0`` read from memory (exactly itself, but no
    longer provably the loaded value), the store is a plain one: :func:`_lanes_pass` took about
    a tenth less time on an AVX2 machine.
    """
    if not (isinstance(keep, types.Boolean) and a == b):
        return None

    def codegen(context, builder, signature, args):
        return builder.select(args[0], args[1], args[2])

    return a(keep, a, b), codegen


@njit(cache=True, error_model="numpy", inline="always")  # the index of a slot's field: no wrap-around
def _at(j, field, lane):
    return np.uint64((j * _SLOT_FIELDS + field) * LANES + lane)


@njit(cache=True, error_model="numpy", inline="always")  # the index of a lane's field: no wrap-around
def _of(field, lane):
    return np.uint64(field * LANES + lane)


@njit(cache=True, error_model="numpy")
def _fpop_lanes(stats, m, beta, length_term, use_length_term, min_size, F, last) -> None:
    """:func:`_fpop` on ``LANES`` rows of ``m`` present values at once, one row per vector lane.

    ``stats[w]``, ``beta[w]``, ``length_term[w]`` are row ``w``'s as :func:`_fpop` takes them;
    fills ``F[w]`` and ``last[w]`` as :func:`_pelt` does. The search is FPOP (Maidstone, Hocking,
    Rigaill & Fearnhead 2017) as :func:`_fpop` prunes it, run in lockstep: step ``t`` of every row
    at once, the inner loop over the lanes without branches (selects only, and :func:`_pick` where a
    value may be stored back over itself, so that no store is masked), so that the compiler turns it
    into vector instructions (two square roots and two divisions per slot and step for all lanes
    together).

    It stays exact, bit for bit: every lane does the same operations on its own starts in the
    same order as :func:`_fpop` (its slots keep its starts in order; the exclusion is merged and the
    least total taken along them, the earliest start among equal totals). A start retired in a lane
    is not moved out at once but marked, its ``F(s)`` set to infinity: its cuts then leave the
    hull, the exclusion and the least total as they are (each of its selects is off), and every
    ``_COMPACT_EVERY`` admitted steps the lanes are compacted in order. Lanes keep different
    numbers of starts; the pass runs to the largest, the others' extra slots marked retired.
    The one division :func:`_fpop` looks up (``1 / length``) is divided here, the same value.

    References
    ----------
    .. [1] R. Maidstone, T. Hocking, G. Rigaill and P. Fearnhead, "On optimal multiple changepoint
       algorithms for large data", Statistics and Computing 27:519-533, 2017.
    """
    lanes = F.shape[0]  # LANES, read at run time: a constant trip count is unrolled, not vectorised
    cap = 64
    slots = np.empty(cap * _SLOT_FIELDS * LANES)
    lane = np.empty(_LANE_FIELDS * LANES)
    squares = np.empty(LANES)
    for w in range(lanes):
        squares[w] = _SQUARES_MARGIN * stats[w, 1, m]
        F[w, 0] = -beta[w]
        last[w, 0] = 0
        for t in range(1, min_size):
            F[w, t] = np.inf
            last[w, t] = 0
        lane[_of(_TERM0, w)] = length_term[w, min_size] if use_length_term else -0.0
        lane[_of(_ZERO, w)] = -0.0
    n = 0
    due = _COMPACT_EVERY
    for t in range(min_size, m + 1):
        tf = float(t)
        c = t - min_size
        admit = c == 0 or c >= min_size
        cf = float(c)
        for w in range(lanes):
            f_c = F[w, c]
            lane[_of(_A1, w)] = stats[w, 0, t]
            lane[_of(_A2, w)] = stats[w, 1, t]
            lane[_of(_CA1, w)] = stats[w, 0, c]
            lane[_of(_CA2, w)] = stats[w, 1, c]
            lane[_of(_FC, w)] = f_c
            lane[_of(_BASE, w)] = _PRUNE_MARGIN * (1.0 + abs(f_c)) + squares[w]
            lane[_of(_BEST, w)] = np.inf
            lane[_of(_BEST_START, w)] = 0.0
            lane[_of(_EX_LO, w)] = np.inf
            lane[_of(_EX_HI, w)] = -np.inf
            lane[_of(_EX_GAP, w)] = -np.inf
        if use_length_term:  # looked up apart: an index read from data keeps the pass below from vectors
            for j in range(n):
                for w in range(lanes):
                    slots[_at(j, _TERM, w)] = length_term[w, t - int(slots[_at(j, _START, w)])]
        if admit:
            _lanes_pass(slots, lane, n, lanes, tf, cf)
        else:
            _lanes_costs(slots, lane, n, lanes, tf)
        if admit:
            if n == cap:
                cap *= 2
                grown = np.empty(cap * _SLOT_FIELDS * LANES)
                grown[: len(slots)] = slots
                slots = grown
            for w in range(lanes):
                f_c = lane[_of(_FC, w)]
                ca1 = lane[_of(_CA1, w)]
                ca2 = lane[_of(_CA2, w)]
                slots[_at(n, _START, w)] = cf
                slots[_at(n, _F_START, w)] = f_c
                slots[_at(n, _C1, w)] = ca1
                slots[_at(n, _C2, w)] = ca2
                slots[_at(n, _LOW, w)] = -np.inf
                slots[_at(n, _HIGH, w)] = np.inf
                slots[_at(n, _OUT_LO, w)] = lane[_of(_EX_LO, w)]
                slots[_at(n, _OUT_HI, w)] = lane[_of(_EX_HI, w)]
                slots[_at(n, _TERM, w)] = -0.0  # the length term while unused (see _lanes_pass)
                value = _cost_mean_one(lane[_of(_A1, w)], lane[_of(_A2, w)], tf, f_c, cf, ca1, ca2)
                if use_length_term:
                    value += length_term[w, t - c]
                if value < lane[_of(_BEST, w)]:
                    lane[_of(_BEST, w)] = value
                    lane[_of(_BEST_START, w)] = cf
            n += 1
            due -= 1
        for w in range(lanes):
            F[w, t] = lane[_of(_BEST, w)] + beta[w]
            last[w, t] = int(lane[_of(_BEST_START, w)])
        if due == 0:
            n = _compact_lanes(slots, n, lanes)
            due = _COMPACT_EVERY


@njit(cache=True, error_model="numpy")
def _lanes_pass(slots, lane, n, lanes, tf, cf) -> None:
    """A pruning step of :func:`_fpop_lanes` over slots ``0..n-1`` of every lane: :func:`_fpop`'s pass, with selects.

    The length term is added whether or not it is in use: unused, it is -0.0, which leaves every
    sum as it is (``x + -0.0 == x``, and ``x - 0.0 == x``, for every ``x``, signed zeros included).
    """
    for j in range(n):
        for w in range(lanes):
            fs = slots[_at(j, _F_START, w)]
            sj = slots[_at(j, _START, w)]
            s1_j = slots[_at(j, _C1, w)]
            s2_j = slots[_at(j, _C2, w)]
            term = slots[_at(j, _TERM, w)]
            length = cf - sj
            inv = 1.0 / length
            s1 = lane[_of(_CA1, w)] - s1_j
            mean = s1 * inv
            gap = lane[_of(_FC, w)] - fs - ((lane[_of(_CA2, w)] - s2_j) - s1 * mean)
            margin = lane[_of(_BASE, w)] + _PRUNE_MARGIN * abs(fs)
            room = gap + margin
            half = math.sqrt((0.0 if 0.0 > room else room) * inv)
            low = mean - half
            old = slots[_at(j, _LOW, w)]
            low = low if low > old else old
            high = mean + half
            old = slots[_at(j, _HIGH, w)]
            high = high if high < old else old
            out_lo = slots[_at(j, _OUT_LO, w)]
            out_hi = slots[_at(j, _OUT_HI, w)]
            below = out_lo < low
            above = out_hi > high
            low_cut = out_hi if out_hi > low else low
            high_cut = out_lo if out_lo < high else high
            low = np.inf if below & above else (low_cut if below else low)
            high = high_cut if above & (not below) else high
            keep = (fs < np.inf) & (room >= 0.0) & (low <= high)  # a retired start's F(s) is infinite
            slots[_at(j, _LOW, w)] = low
            slots[_at(j, _HIGH, w)] = high
            zero = lane[_of(_ZERO, w)]
            slots[_at(j, _F_START, w)] = _pick(keep, fs + zero, np.inf)
            shut = (gap - margin) - (term - lane[_of(_TERM0, w)])
            half = math.sqrt((0.0 if 0.0 > shut else shut) * inv)
            e_lo = mean - half
            e_hi = mean + half
            excl_lo = lane[_of(_EX_LO, w)]
            excl_hi = lane[_of(_EX_HI, w)]
            excl_gap = lane[_of(_EX_GAP, w)]
            shut_out = shut > 0.0
            merge = shut_out & (e_lo < excl_hi) & (e_hi > excl_lo)
            take = shut_out & (not merge) & (shut > excl_gap)
            merged_lo = e_lo if e_lo < excl_lo else excl_lo
            merged_hi = e_hi if e_hi > excl_hi else excl_hi
            merged_gap = shut if shut > excl_gap else excl_gap
            lane[_of(_EX_LO, w)] = _pick(merge, merged_lo, _pick(take, e_lo, excl_lo))
            lane[_of(_EX_HI, w)] = _pick(merge, merged_hi, _pick(take, e_hi, excl_hi))
            lane[_of(_EX_GAP, w)] = _pick(merge, merged_gap, _pick(take, shut, excl_gap))
            value = _cost_mean_one(lane[_of(_A1, w)], lane[_of(_A2, w)], tf, fs, sj, s1_j, s2_j) + term
            best = lane[_of(_BEST, w)]
            lower = keep & (value < best)
            lane[_of(_BEST, w)] = _pick(lower, value, best + zero)
            lane[_of(_BEST_START, w)] = _pick(lower, sj, lane[_of(_BEST_START, w)] + zero)


@njit(cache=True, error_model="numpy")
def _lanes_costs(slots, lane, n, lanes, tf) -> None:
    """A step of :func:`_fpop_lanes` before pruning begins (``t < 2 min_size``): every start costed, none retired."""
    for j in range(n):
        for w in range(lanes):
            sj = slots[_at(j, _START, w)]
            value = _cost_mean_one(
                lane[_of(_A1, w)], lane[_of(_A2, w)], tf, slots[_at(j, _F_START, w)], sj,
                slots[_at(j, _C1, w)], slots[_at(j, _C2, w)],
            ) + slots[_at(j, _TERM, w)]  # fmt: skip
            if value < lane[_of(_BEST, w)]:
                lane[_of(_BEST, w)] = value
                lane[_of(_BEST_START, w)] = sj


@njit(cache=True, error_model="numpy")
def _compact_lanes(slots, n, lanes) -> int:
    """Move each lane's kept starts down over its retired ones, in order; the slots the lanes now use.

    A lane's slots past its own kept ones, up to the most any lane keeps, are marked retired
    (``F(s)`` infinite: every later cut of theirs is off; the rest of such a slot is what an
    earlier start left there, finite, so its arithmetic reads only defined values).
    """
    most = 0
    for w in range(lanes):
        kept = 0
        for j in range(n):
            if slots[_at(j, _F_START, w)] < np.inf:
                if kept < j:
                    for field in range(_SLOT_FIELDS):
                        slots[_at(kept, field, w)] = slots[_at(j, field, w)]
                kept += 1
        for j in range(kept, n):
            slots[_at(j, _F_START, w)] = np.inf
        most = max(most, kept)
    return most


# Geometric functional pruning for the two-parameter models. Both costs are a minimum over a
# segment's parameters theta of a sum of per-point losses (for 'meanvar' with
# l(z; mu, v) = log v + ((z - mu)^2 + floor) / v - 1, whose minimum over a segment is
# L log(var + floor)), so with g_s(theta, t) = F(s) + sum_{s<=i<t} l(z_i; theta) the difference
# g_s - g_c = D_sc(theta) = F(s) - F(c) + sum_{s<=i<c} l(z_i; theta) of an older start s and a
# newer c does not depend on t. If s is best (or tied) at t, then at its own optimum theta_s(t),
# g_s <= min g_c <= g_c: theta_s(t) lies in every R_sc = {D_sc <= 0} (s needs c's parameters to
# be beaten by its own), and outside every {D_es < 0} of an older e (where e beats s). Each
# start keeps a box holding what is left of its parameter plane, and goes when it is empty.

#: rows of the pruning state per start: the box (4), an older start, its region (6), position
_BOX_ROWS = 12


@njit(cache=True, error_model="numpy")
def _rounding_scale(code, stats, m) -> float:
    """A bound on the rounding of any segment cost computed from the sums, against the
    least over the segment's parameters of the loss those sums define.

    The pruning argues on the sums as stored, so a rounding that went into them is part
    of the data; what is bounded is the rounding of a cost's own arithmetic (differences
    of two sums, the fit from them) and, where a cost is clipped at zero variance or
    residual, how far the stored sums may be from sums of one set of values (compensated
    sums: a couple of ulps of their largest values, :func:`_accumulate`). Every term is a
    few ulps of a segment's own sums, bounded over all segments by the largest squared
    value ``Z`` (``|slope| <= 4 sqrt(Z)`` and ``|slope| sum |z| <= 4 Z`` for distinct
    integer positions), the sum of squares, the largest position from the origin ``U``
    and the widest gap between positions ``g`` ('trend': positions' sums about a
    segment's last one are ill-conditioned by at most ``min(L, 12 g^2)``); doubled.
    'mean' keeps its share of the sum of squares (:func:`_fpop`).
    """
    eps = np.finfo(np.float64).eps
    if code == MEAN:
        return _SQUARES_MARGIN * stats[1, m]
    if code == TREND:
        own, drift_xx, drift_x, drift_tx, drift = _trend_rounding(stats, m)
        return 2.0 * (own + drift)
    total = stats[1, m]
    top = 0.0
    reach_x = 0.0
    for i in range(m):
        top = max(top, stats[1, i + 1] - stats[1, i])
        reach_x = max(reach_x, abs(stats[0, i + 1]))
    top += 4.0 * eps * total
    zmax = math.sqrt(top)
    abs_x = math.sqrt(m * total)  # sum |z| (Cauchy-Schwarz)
    drift_x = 2.0 * eps * reach_x + 2.0 * m * eps * eps * abs_x
    drift_xx = 2.0 * eps * total + 2.0 * m * eps * eps * total
    # L log(var + floor): d cost / d sum z^2 = 1 / v <= 1 / floor, d / d sum z <= 2 |mean| / floor
    logs = max(-math.log(VARIANCE_FLOOR), math.log(top + VARIANCE_FLOOR))
    own = eps * (12.0 * total / VARIANCE_FLOOR + 4.0 * m * (1.0 + logs))
    drift = (2.0 * drift_xx + 4.0 * zmax * drift_x) / VARIANCE_FLOOR
    return 2.0 * (own + drift)


@njit(cache=True, error_model="numpy")
def _trend_rounding(stats, m) -> tuple[float, float, float, float, float]:
    """The parts of :func:`_rounding_scale` for 'trend': ``own``, the rounding of a cost's own
    arithmetic; ``drift_xx``, ``drift_x``, ``drift_tx``, how far a difference of two stored sums of
    ``z^2``, ``z``, ``u z`` may be from the exact sum of the values between them; ``drift``, the
    most that moves a segment's least RSS (about its own line). The scale is ``2 (own + drift)``.
    """
    eps = np.finfo(np.float64).eps
    total = stats[3, m]
    top = 0.0
    reach_x = 0.0
    reach_tx = 0.0
    gap = 1.0
    for i in range(m):
        top = max(top, stats[3, i + 1] - stats[3, i])
        reach_x = max(reach_x, abs(stats[2, i + 1]))
        reach_tx = max(reach_tx, abs(stats[4, i + 1]))
        if i > 0:
            gap = max(gap, (stats[0, i + 1] - stats[0, i]) - (stats[0, i] - stats[0, i - 1]))
    top += 4.0 * eps * total
    zmax = math.sqrt(top)
    abs_x = math.sqrt(m * total)  # sum |z| (Cauchy-Schwarz)
    drift_x = 2.0 * eps * reach_x + 2.0 * m * eps * eps * abs_x
    drift_xx = 2.0 * eps * total + 2.0 * m * eps * eps * total
    far = max(abs(stats[0, 1]), abs(stats[0, m] - stats[0, m - 1]))
    drift_tx = 2.0 * eps * reach_tx + 2.0 * m * eps * eps * far * abs_x
    own = eps * (48.0 * far * top + (16.0 + 6.0 * min(float(m), 12.0 * gap * gap)) * total)
    # RSS: d / d sum z^2 = 1, d / d sum z <= 2 |mean| + 2 |slope| U, d / d sum u z = 2 |slope|
    drift = 2.0 * drift_xx + 2.0 * (2.0 + 8.0 * far) * zmax * drift_x + 16.0 * zmax * drift_tx
    return own, drift_xx, drift_x, drift_tx, drift


@njit(cache=True, error_model="numpy")
def _log_variance_range(g, below, above) -> tuple[float, float]:
    """Outer bounds on the two roots of ``u + exp(-u) = 1 + g``, ``g >= 0``, where they may
    be tighter than ``[below, above]`` (else infinite: nothing to cut on that side).

    ``f(u) = u + exp(-u) - 1 - g`` is convex with least value ``-g`` at 0, so Newton's
    steps from a point outside a root (``f >= 0``) stay outside it, each nearer than the
    last. Starts: on the left ``max(-sqrt(2 g), -log(1 + g) - 1)`` (there
    ``exp(-u) >= 1 - u + u^2/2``, and ``exp(-u) >= e (1 + g)``), or ``below`` if nearer;
    on the right ``r (1 + r)`` with ``r = sqrt(2 g)`` for ``g <= 1/4``
    (``exp(-u) >= 1 - u + u^2/2 - u^3/6``), else ``1 + g``, or ``above`` if nearer. A
    side whose start is inside the roots (``f <= 0``: ``below >= 0`` or ``above <= 0``
    at once) stops there, and so does one inside by the bounds ``f(u) <= e u^2 / 2 - g``
    on ``[-1, 0]`` and ``f(u) <= u^2 / 2 - g`` on ``[0, inf)`` (Taylor, Lagrange's remainder),
    before any ``exp``. Every iterate is a bound; the last is widened for rounding.
    """
    if not g > 0.0:
        return -1e-12, 1e-12
    r = math.sqrt(2.0 * g)
    lo = -np.inf
    if below < 0.0 and not (below >= -1.0 and 1.3591409142295225 * below * below <= g):
        # -log(1 + g) - 1 <= -r for g <= 2
        u = max(max(-r, -math.log1p(g) - 1.0) if g > 2.0 else -r, below)
        for _ in range(3):
            e = math.expm1(-u)
            f = u + e - g
            if not f > 0.0:
                break
            u += f / e
        if u > below:
            lo = u - (_BOX_SLACK * (1.0 - u) + 1e-12)
    hi = np.inf
    if above > 0.0 and not 0.5 * above * above <= g:
        u = min(r * (1.0 + r) if g <= 0.25 else 1.0 + g, above)
        for _ in range(3):
            e = math.expm1(-u)
            f = u + e - g
            if not f > 0.0:
                break
            u += f / e
        if u < above:
            hi = u + (_BOX_SLACK * (1.0 + u) + 1e-12)
    return lo, hi


#: :func:`_log_variance_bounds`: its table's points per doubling of ``g``, and its range of ``g``
_ROOTS_PER_OCTAVE = 32
_ROOTS_OCTAVES = (-60, 8)


def _log_variance_table() -> np.ndarray:
    """Points on the two branches of ``g = u + exp(-u) - 1`` and the slopes ``du / dg`` there.

    Columns: ``g`` and ``u`` on the left branch (``u < 0``), the slope there, then the same on
    the right (one row is one cache line's reach); one row per ``2^(k / _ROOTS_PER_OCTAVE)``
    in ``_ROOTS_OCTAVES``. Each
    ``u`` is a root found by Newton's steps from outside it (see :func:`_log_variance_range`)
    and its ``g`` is computed back from it, so the point lies on the curve within the
    rounding of that sum.
    """
    first, last = _ROOTS_OCTAVES
    g = 2.0 ** (np.arange(first * _ROOTS_PER_OCTAVE, last * _ROOTS_PER_OCTAVE + 1) / _ROOTS_PER_OCTAVE)
    r = np.sqrt(2.0 * g)
    table = np.empty((len(g), 6))
    starts = (np.where(g > 2.0, np.maximum(-r, -np.log1p(g) - 1.0), -r), np.where(g <= 0.25, r * (1.0 + r), 1.0 + g))
    for side, u in enumerate(starts):
        for _ in range(100):
            e = np.expm1(-u)
            f = u + e - g
            u = np.where(f > 0.0, u + f / e, u)
        table[:, 3 * side] = u + np.expm1(-u)
        table[:, 3 * side + 1] = u
        table[:, 3 * side + 2] = -1.0 / np.expm1(-u)
    return table


_ROOTS = _log_variance_table()


@njit(cache=True, error_model="numpy")
def _log_variance_bounds(g, below, above) -> tuple[float, float]:
    """Outer bounds on the two roots of ``u + exp(-u) = 1 + g``, as :func:`_log_variance_range`, without ``exp``.

    The roots' curve ``u(g)`` is convex on the left branch and concave on the right
    (``d2u/dg2 = -g''(u) / g'(u)^3`` with ``g(u) = u + exp(-u) - 1``, ``g'' > 0`` and ``g'``
    of ``u``'s sign), so its tangent at any point of a branch lies below it on the left and
    above it on the right, everywhere: a bound whatever point the table gives, tight (about
    ``6e-5`` of the root) at the nearest one. Widened for rounding as there; outside the
    table's range of ``g``, :func:`_log_variance_range`.
    """
    first, last = _ROOTS_OCTAVES
    if not (g >= 2.0**first and g <= 2.0**last):
        return _log_variance_range(g, below, above)
    k = min(max(int((math.log2(g) - first) * _ROOTS_PER_OCTAVE + 0.5), 0), _ROOTS.shape[0] - 1)
    lo = _ROOTS[k, 1] + _ROOTS[k, 2] * (g - _ROOTS[k, 0])
    hi = _ROOTS[k, 4] + _ROOTS[k, 5] * (g - _ROOTS[k, 3])
    return lo - (_BOX_SLACK * (1.0 - lo) + 1e-12), hi + (_BOX_SLACK * (1.0 + hi) + 1e-12)


@njit(cache=True, error_model="numpy")
def _meanvar_fit(length, s1, s2) -> tuple[float, float, float, float]:
    """Mean, variance + floor, its log and cost ``L log(var + floor)`` of a segment (as :func:`_cost_meanvar`)."""
    inv = 1.0 / length
    mean = s1 * inv
    v = max(s2 * inv - mean * mean, 0.0) + VARIANCE_FLOOR
    log_v = math.log(v)
    return mean, v, log_v, length * log_v


@njit(cache=True, error_model="numpy")
def _trend_fit(length, dt, dtt, dx, dxx, dtx) -> tuple[float, float, float, float, float]:
    """Mean position, mean value, slope, ``sum (p - mean p)^2`` and RSS of a segment from its sums.

    The sums are :func:`_trend_local`'s, over positions less an origin, and so is the mean
    position. RSS as :func:`_cost_trend` computes it, but not clipped at zero: within the
    rounding of its own arithmetic of the least loss the sums define, even where that is
    below zero (the pruning's margins rely on it, see :func:`_trend_margins`); slope 0 and
    spread 0 for one value.
    """
    tt = length * dtt - dt * dt
    tx = length * dtx - dt * dx
    xx = length * dxx - dx * dx
    inv = 1.0 / length
    if tt > 0.0:
        return dt * inv, dx * inv, tx / tt, tt * inv, (xx * tt - tx * tx) / (tt * length)
    return dt * inv, dx * inv, 0.0, 0.0, 0.0


@njit(cache=True, error_model="numpy")
def _clip_interval(box, j, k, lo, hi) -> bool:
    """Side ``k`` of box ``j`` cut to ``[lo, hi]``; False if nothing is left."""
    box[k, j] = max(box[k, j], lo)
    box[k + 1, j] = min(box[k + 1, j], hi)
    return box[k, j] <= box[k + 1, j]


@njit(cache=True, error_model="numpy")
def _cut_interval(box, j, k, p, q) -> bool:
    """``[p, q]`` cut from side ``k`` of box ``j`` where it reaches an end; True if nothing is left."""
    lo = box[k, j]
    hi = box[k + 1, j]
    if not p <= q:
        return False
    if p <= lo and hi <= q:
        return True
    if p <= lo <= q:
        box[k, j] = q
    elif p <= hi <= q:
        box[k + 1, j] = p
    return False


@njit(cache=True, error_model="numpy")
def _clip_ellipse(box, j, c0, c1, a00, a01, a11, r) -> bool:
    """Box ``j`` shrunk to the bounding box of its meet with ``(x - c)' A (x - c) <= r``; False if empty.

    Over the box's range of ``x1`` the least ``x0`` of the ellipse,
    ``c0 - a01 / a00 d - sqrt((r - det / a00 d^2) / a00)`` with ``d = x1 - c1``, is convex
    in ``d``: least at the ellipse's leftmost point or at the range's nearer end. Likewise
    the greatest, and the same for ``x1``. ``A`` positive definite.
    """
    det = a00 * a11 - a01 * a01
    lo0 = box[0, j]
    hi0 = box[1, j]
    lo1 = box[2, j]
    hi1 = box[3, j]
    widen = 1.0 + _BOX_SLACK
    # three divisions, the rest products (rounding: a few ulps, well inside the slack)
    q = r / det
    i00 = 1.0 / a00
    i11 = 1.0 / a11
    reach = widen * math.sqrt(q * a00)
    d_lo = max(lo1 - c1, -reach)
    d_hi = min(hi1 - c1, reach)
    if d_lo > d_hi:
        return False
    tilt = a01 * i00
    squeeze = det * i00
    turn = a01 * math.sqrt(q * i11)
    d = min(max(turn, d_lo), d_hi)
    new_lo0 = c0 - tilt * d - widen * math.sqrt(max(r - squeeze * d * d, 0.0) * i00)
    d = min(max(-turn, d_lo), d_hi)
    new_hi0 = c0 - tilt * d + widen * math.sqrt(max(r - squeeze * d * d, 0.0) * i00)
    reach = widen * math.sqrt(q * a11)
    d_lo = max(lo0 - c0, -reach)
    d_hi = min(hi0 - c0, reach)
    if d_lo > d_hi:
        return False
    tilt = a01 * i11
    squeeze = det * i11
    turn = a01 * math.sqrt(q * i00)
    d = min(max(turn, d_lo), d_hi)
    new_lo1 = c1 - tilt * d - widen * math.sqrt(max(r - squeeze * d * d, 0.0) * i11)
    d = min(max(-turn, d_lo), d_hi)
    new_hi1 = c1 - tilt * d + widen * math.sqrt(max(r - squeeze * d * d, 0.0) * i11)
    pad0 = _BOX_SLACK * (abs(new_lo0) + abs(new_hi0))
    pad1 = _BOX_SLACK * (abs(new_lo1) + abs(new_hi1))
    return _clip_interval(box, j, 0, new_lo0 - pad0, new_hi0 + pad0) and _clip_interval(
        box, j, 2, new_lo1 - pad1, new_hi1 + pad1
    )


@njit(cache=True, error_model="numpy")
def _cut_ellipse(box, j, c0, c1, a00, a01, a11, r) -> bool:
    """The ellipse ``(x - c)' A (x - c) < r`` cut out of box ``j``; True if nothing is left.

    A cross-section of the box lies in the (convex) ellipse when both its ends do, so
    the box's edges decide: the strip of the box where both are inside goes.
    """
    det = a00 * a11 - a01 * a01
    if not (r > 0.0 and det > 0.0):
        return False
    shrink = 1.0 - _BOX_SLACK
    i00 = 1.0 / a00
    d_a = box[2, j] - c1
    d_b = box[3, j] - c1
    squeeze = det * i00
    h_a = r - squeeze * d_a * d_a
    h_b = r - squeeze * d_b * d_b
    if h_a > 0.0 and h_b > 0.0:
        h_a = shrink * math.sqrt(h_a * i00)
        h_b = shrink * math.sqrt(h_b * i00)
        tilt = a01 * i00
        m_a = c0 - tilt * d_a
        m_b = c0 - tilt * d_b
        pad = _BOX_SLACK * (abs(m_a) + abs(m_b))
        if _cut_interval(box, j, 0, max(m_a - h_a, m_b - h_b) + pad, min(m_a + h_a, m_b + h_b) - pad):
            return True
    i11 = 1.0 / a11
    d_a = box[0, j] - c0
    d_b = box[1, j] - c0
    squeeze = det * i11
    h_a = r - squeeze * d_a * d_a
    h_b = r - squeeze * d_b * d_b
    if h_a > 0.0 and h_b > 0.0:
        h_a = shrink * math.sqrt(h_a * i11)
        h_b = shrink * math.sqrt(h_b * i11)
        tilt = a01 * i11
        m_a = c1 - tilt * d_a
        m_b = c1 - tilt * d_b
        pad = _BOX_SLACK * (abs(m_a) + abs(m_b))
        return _cut_interval(box, j, 2, max(m_a - h_a, m_b - h_b) + pad, min(m_a + h_a, m_b + h_b) - pad)
    return False


@njit(cache=True, error_model="numpy")
def _trend_ellipse(length, p_mean, z_mean, slope, spread, x0) -> tuple[float, float, float, float, float]:
    """Centre and matrix of ``sum (z - level - b (p - x0))^2 - RSS`` in (level at ``x0``, slope ``b``).

    About the fitted line it is ``L (level + b h - mean z)^2 + S (b - slope)^2``, ``h`` the
    mean position's distance from ``x0`` and ``S = sum (p - mean p)^2``.
    """
    lever = p_mean - x0
    a01 = length * lever
    return z_mean - slope * lever, slope, length, a01, spread + a01 * lever


@njit(cache=True, error_model="numpy")
def _clip_meanvar(box, j, mean, v, log_v, g) -> bool:
    """Box ``j`` (mean, log variance) shrunk to the bounding box of its meet with ``R``; False if empty.

    ``R``: ``u + (1 + d^2 / V) e^-u <= 1 + g`` with ``d = mu - mean``, ``u = w - log V``.
    Over the box's means (``|d| >= d_min``) ``w`` lies within ``log V + log k`` plus the
    roots for ``g - log k``, ``k = 1 + d_min^2 / V`` (:func:`_log_variance_bounds`); then
    over the log variances left ``d^2 <= V (e^u (1 + g - u) - 1)``, unimodal in ``u``, peak
    at ``g``.
    """
    lo0 = box[0, j]
    hi0 = box[1, j]
    d_min = lo0 - mean if lo0 > mean else (mean - hi0 if hi0 < mean else 0.0)
    shift = math.log1p(d_min * d_min / v) if d_min > 0.0 else 0.0
    if not g - shift >= 0.0:
        return False
    centre = log_v + shift
    u_lo, u_hi = _log_variance_bounds(g - shift, box[2, j] - centre, box[3, j] - centre)
    pad = _BOX_SLACK * abs(log_v)
    if not _clip_interval(box, j, 2, centre + u_lo - pad, centre + u_hi + pad):
        return False
    u = min(max(g, box[2, j] - log_v), box[3, j] - log_v)
    # beyond exp's range (a penalty far above the data's costs) the means are left as they are
    room = math.expm1(u) * (1.0 + g - u) + (g - u) if u < _EXP_RANGE else np.inf
    if not room >= 0.0:
        return False
    half = (1.0 + _BOX_SLACK) * math.sqrt(v * room) + _BOX_SLACK * abs(mean)
    return _clip_interval(box, j, 0, mean - half, mean + half)


@njit(cache=True, error_model="numpy")
def _meanvar_cut_misses(box, j, mean, v, g) -> bool:
    """True if :func:`_cut_meanvar` with ``g = room / L`` surely cuts nothing from box ``j`` (no ``exp``).

    Its cut is at most ``|mu - mean| < sqrt(V (e^g - 1))`` wide (``e^u (1 + g - u)`` peaks at
    ``u = g``), ``e^g - 1 <= g / (1 - g)`` for ``g < 1``, and it needs more than ``1e-6`` under the
    root and a reach to an end of the box's means.
    """
    if not g < 0.5:
        return not g > 0.0
    top = g / (1.0 - g)
    d = min(abs(box[0, j] - mean), abs(box[1, j] - mean))
    return not (top > 1e-6 and v * top >= d * d)


@njit(cache=True, error_model="numpy")
def _cut_meanvar(box, j, mean, v, log_v, length, room) -> bool:
    """The region where ``sum over L values of l - L log V < room`` cut from box ``j``; True if nothing is left.

    There ``d^2 < V (e^u (1 + g - u) - 1)`` (``g = room / L``, ``u = w - log V``), an
    interval of means for each ``w``, and an interval of ``w`` for each mean (convex in
    ``w``): the box's two ``w`` edges decide which means go; ``w`` is left as it is.
    """
    if not (room > 0.0 and box[2, j] > -np.inf and box[3, j] < np.inf):
        return False
    g = room / length
    if _meanvar_cut_misses(box, j, mean, v, g):
        return False
    u_a = box[2, j] - log_v
    u_b = box[3, j] - log_v
    if not max(u_a, u_b) < _EXP_RANGE:
        return False
    h = min(math.exp(u_a) * (1.0 + g - u_a), math.exp(u_b) * (1.0 + g - u_b)) - 1.0
    # below that the cut is too thin to be worth its rounding
    if not h > 1e-6:
        return False
    half = (1.0 - _BOX_SLACK) * math.sqrt(v * h) - _BOX_SLACK * abs(mean)
    return _cut_interval(box, j, 0, mean - half, mean + half)


#: 'trend' pruning: its margins hold for the segments of a start at least this long (shorter ones
#: are left to PELT's grace: a start narrowed younger is not retired before its next narrowing,
#: at least ``_WAIT`` steps later), so they may take its lines' slopes as those of this many values
_STEEP_AFTER = int(_WAIT)

#: 'trend' pruning: ulps of the largest total ``F(s) + C(s, t)`` (and length term) allowed for
#: the rounding of the totals compared at any step and of the rooms computed from them (about 15
#: would do: two sums on each side of a comparison, three in a room, then doubled twice)
_TOTAL_ULPS = 64.0


@njit(cache=True, error_model="numpy")
def _trend_margins(code, stats, m, beta, length_term) -> np.ndarray:
    """The margins of the 'trend' pruning: ``[fixed, xx, x, tx, whole, steep]`` (zeros for the other models).

    A comparison of the pruning (:func:`_narrow_box`) leaves ``fixed`` plus, for the start
    ``s`` it narrows, ``min(xx + x A + tx B, whole)`` (:func:`_box_drift`), ``B`` the
    least of ``steep`` and the box's largest ``|slope|``, ``A`` the box's largest
    ``|level|`` plus ``B`` times the distance of ``s``'s first position from position 0.

    Notes
    -----
    The pruning keeps ``s`` where ``D(theta) = F(s) - F(c) + Q_sc(theta)`` is at most the
    margin, ``Q_sc`` the loss that the stored sums of ``(s, c]`` define (their differences
    taken exactly), and cuts where ``D_es = F(e) - F(s) + Q_es < -margin`` for an older
    ``e``. If ``s`` is best at a later ``t`` (in floating point), at its line ``theta_s``
    (in its box: every narrowing keeps it there)
    ``D(theta_s) = F(s) + Q_st(theta_s) - F(c) - Q_ct(theta_s)`` with
    ``Q_st(theta_s) = min Q_st``; so the margin must cover four things:

    1. the rounding of the totals compared and of the rooms: a few ulps of the largest
       total, ``F(t) <= C(0, t) + beta + |length term|`` and ``F(t) >= -beta`` (costs and
       ``beta`` plus the length term are never negative): ``_TOTAL_ULPS`` ulps of
       ``sum z^2 + beta + max |length term|``;
    2. ``min Q_st - C(s, t)``: the rounding of the cost's arithmetic, ``2 own`` of
       :func:`_trend_rounding` (the clip at zero only raises ``C``);
    3. the cost of the present pair from its unclipped RSS (:func:`_trend_fit`): again
       ``2 own``;
    4. ``C(c, t) - Q_ct(theta_s)``: ``2 own`` where ``C(c, t)`` is not clipped. Where it
       is (the stored sums say a little less than zero, an exact line), ``Q_ct = Q* + P``:
       ``Q*`` the loss of the exact sums of the values each sum adds up (``z``, the rounded
       ``z^2`` and ``u z``), whose least is above ``-own`` (the rounded products, at the
       segment's own slope), and ``P(theta) = e_xx - 2 a e_x - 2 b e_tx`` (``Q`` is linear in
       the sums), ``e`` how far the stored differences are from those exact sums (at most
       ``drift_xx``, ``drift_x``, ``drift_tx``), ``a`` the level at position 0 and ``b`` the
       slope. At ``theta_s``, ``|a| <= A`` and ``|b| <= B`` from the box, so
       ``|P| <= drift_xx + 2 A drift_x + 2 B drift_tx`` (exact: ``P`` is linear; the drifts
       are already twice the rounding of the stored sums); else the whole-series bound
       ``2 drift``, which holds too (``Q_ct(theta_s) >= min Q_ct``) and is used while the box
       is open. The cuts (``e`` for ``c``) are the same with ``Q_et``. Whatever the box,
       ``theta_s`` is the least-squares line of the ``L = t - s`` values at distinct
       integer positions, so (Cauchy-Schwarz) ``|b| <= sqrt(sum (z - mean z)^2 / S) <=
       sqrt(max z^2 * 12 / (L^2 - 1))`` (``S = sum (p - mean p)^2 >= L (L^2 - 1) / 12``);
       ``steep`` is that for ``L = _STEEP_AFTER``, plus ``1e-3`` for the stored sums' own
       drift. The margins so hold for ``t >= s + _STEEP_AFTER``: :func:`_narrow_box` retires
       no start narrowed younger than that (``c - s + 2 < _STEEP_AFTER``, as ``min_size >= 2``)
       but leaves it to its next narrowing, ``_WAIT >= _STEEP_AFTER`` steps on at least (PELT's
       grace: a start kept longer than it can win is harmless), and its box, which holds its
       lines from then on, serves no one before.

    So ``fixed = _TOTAL_ULPS eps (sum z^2 + beta + max|length term|) + 6 own``. The
    whole-series bound's largest part is ``|a|`` up to the farthest position times a
    slope of a few ``sqrt(max z^2)`` (a two-point segment at an end of the series); a start
    kept long has a box of slopes near zero, and its margin is that much smaller.
    Floating-point error bounds of sums and products: Higham (2002), chapters 2-4.

    References
    ----------
    1. N. J. Higham, "Accuracy and Stability of Numerical Algorithms", 2nd ed., SIAM, 2002.
    """
    out = np.zeros(6)
    if code != TREND:
        return out
    eps = np.finfo(np.float64).eps
    own, drift_xx, drift_x, drift_tx, drift = _trend_rounding(stats, m)
    reach = 0.0
    for k in range(m + 1):
        reach = max(reach, abs(length_term[k]))
    out[0] = _TOTAL_ULPS * eps * (stats[3, m] + 2.0 * own + beta + reach + 1.0) + 6.0 * own
    out[1] = drift_xx
    out[2] = 2.0 * drift_x
    out[3] = 2.0 * drift_tx
    out[4] = 2.0 * drift
    top = 0.0
    for i in range(m):
        top = max(top, stats[3, i + 1] - stats[3, i])
    shortest = float(_STEEP_AFTER)
    out[5] = math.sqrt((top + 4.0 * eps * stats[3, m]) * 12.0 / (shortest * shortest - 1.0)) + 1e-3
    return out


@njit(cache=True, error_model="numpy", inline="always")  # called only by _clip_trend
def _box_drift(box, j, margins) -> float:
    """The part of a 'trend' margin that depends on box ``j`` (:func:`_trend_margins`)."""
    slope = min(max(abs(box[2, j]), abs(box[3, j])), margins[5])
    level = max(abs(box[0, j]), abs(box[1, j])) + slope * abs(box[11, j])
    drift = margins[1] + margins[2] * level + margins[3] * slope
    # an open box (infinite levels) leaves the whole-series bound
    return drift if drift < margins[4] else margins[4]


@njit(cache=True, error_model="numpy", inline="always")  # one call site: no library of its own
def _clip_trend(box, j, length, p_mean, z_mean, slope, spread, gap, margins) -> tuple[bool, float]:
    """Box ``j`` shrunk to its meet with ``R_sc`` ('trend', room ``gap`` plus the margin); False if empty.

    Returns whether the box is left and the part of the margin from it (:func:`_box_drift`):
    from the box before; where that was open (a start's first narrowings: the whole-series
    part) and the box left gives a much smaller one, clipped again with that (the box left
    bounds the start's line as well as the one before).
    """
    drift = _box_drift(box, j, margins)
    opened = not drift < margins[4]
    for _ in range(2):
        room = gap + margins[0] + drift
        if not room >= 0.0:
            return False, drift
        if spread > 0.0:
            e0, e1, e00, e01, e11 = _trend_ellipse(length, p_mean, z_mean, slope, spread, box[11, j])
            live = _clip_ellipse(box, j, e0, e1, e00, e01, e11, room)
        else:  # one value: the level within sqrt(room) of it, any slope
            half = (1.0 + _BOX_SLACK) * math.sqrt(room) + _BOX_SLACK * abs(z_mean)
            live = _clip_interval(box, j, 0, z_mean - half, z_mean + half)
        if not live or not opened:
            return live, drift
        opened = False
        tighter = _box_drift(box, j, margins)
        if not tighter < 0.5 * drift:
            break
        drift = tighter
    return True, drift


@njit(cache=True, error_model="numpy")
def _remember_region(code, stats, F, e, s, box, k, rounding) -> None:
    """Keep in ``box[4:11, k]`` where older start ``e`` beats ``s`` (slot ``k``), and ``s``'s first position.

    ``box[10]``: ``F(s) - F(e) - C(e, s)`` less the margin, the room of the region.
    """
    x0 = stats[0, s + 1] - stats[0, s]
    box[11, k] = x0
    box[4, k] = e
    if e < 0:
        return
    length = float(s - e)
    if code == TREND:
        dx = stats[2, s] - stats[2, e]
        st, stt, stx = _trend_local(
            length,
            x0,
            stats[0, s] - stats[0, e],
            stats[1, s] - stats[1, e],
            stats[5, s] - stats[5, e],
            dx,
            stats[4, s] - stats[4, e],
        )
        p_mean, z_mean, slope, spread, cost = _trend_fit(length, st, stt, dx, stats[3, s] - stats[3, e], stx)
        c0, c1, a00, a01, a11 = _trend_ellipse(length, p_mean, z_mean, slope, spread, 0.0)
        box[5, k] = c0
        box[6, k] = c1
        box[7, k] = a00
        box[8, k] = a01
        box[9, k] = a11
        # 'trend': ``rounding`` is the fixed part of its margin (:func:`_trend_margins`); the part
        # that depends on the box is taken off when the region is cut
        box[10, k] = F[s] - F[e] - cost - rounding
        return
    else:
        mean, v, log_v, cost = _meanvar_fit(length, stats[0, s] - stats[0, e], stats[1, s] - stats[1, e])
        box[5, k] = mean
        box[6, k] = v
        box[7, k] = length
        box[8, k] = log_v
    box[10, k] = F[s] - F[e] - cost - (_PRUNE_MARGIN * (2.0 + abs(F[s]) + abs(F[e])) + rounding)


@njit(cache=True, error_model="numpy")
def _narrow_box(
    code,
    rows,
    starts,
    f_start,
    box,
    visit,
    oldest,
    n,
    c,
    f_c,
    stats_c,
    x0_c,
    t,
    length_term,
    use_length_term,
    rounding,
    margins,
) -> tuple[int, int]:
    """Geometric functional pruning (Pishchagina, Rigaill & Runge 2024) for 'meanvar' and 'trend', by start ``c``.

    Each kept start ``s`` has a box (``box[0:4]``) holding the parameters at which it can
    still be best: for 'meanvar' (segment mean, log of variance + floor), for 'trend'
    (the line's level at ``s``'s first position, slope). ``c`` (usable from step ``t``
    on, newer than every start here) shrinks the box to the bounding box of its meet
    with ``R_sc`` (:func:`_clip_ellipse` / :func:`_clip_meanvar`; the room is
    ``gap = F(c) - F(s) - C(s, c)``); then the regions where two older starts beat ``s``
    are cut out (:func:`_cut_ellipse` / :func:`_cut_meanvar`): the one remembered
    (``box[4:11]``, :func:`_remember_region`) and one drawn by a fixed rule from the
    starts kept. 'meanvar' remembers the region of the start ``l`` of ``s``'s own last
    segment: in a calm stretch ``F(s) = F(l) + C(l, s) + penalty``, so ``l`` beats ``s``
    wherever the loss of ``(l, s]`` is within about a penalty of its least, around the
    stretch's parameters, where the box of ``s`` shrinks (on a calm million points it
    retires half the starts and halves those kept; the region of the start that beats
    ``s`` most among those narrowed when ``s`` came, which 'trend' keeps, retired one in
    sixteen). Any older start with a finite ``F`` may be the one. For 'meanvar' the box
    is first clipped to ``R_si`` of ``_NEWER_CLIPS`` newer kept starts ``i`` too, drawn
    by a fixed rule: any start with a finite ``F`` admitted by ``t`` is a competitor as
    ``c`` is. A start whose box is empty can never
    be best again and is retired.

    ``x0_c`` is ``c``'s first position ('trend': the origin of the sums of ``(s, c]``).
    Starts in slots before ``oldest`` wait for a later call, however due.
    Margins as in :func:`_fpop`, with ``rounding`` (:func:`_rounding_scale`) for
    the costs; 'trend' has its own, ``margins`` (:func:`_trend_margins`), one per start
    from its box. With 'mbic' an older start only loses more by its length term, so the
    first cut holds as it is; in the second a newer start gains at most
    ``log((t - e) / (t - s))`` from step ``t`` on.

    Returns how many starts it retired and the slot of the start whose region of victory
    over ``c`` is largest (-1 if none), for ``c`` to remember.
    """
    base = _PRUNE_MARGIN * (1.0 + abs(f_c)) + rounding
    cf = float(c)
    a0 = stats_c[0]
    a1 = stats_c[1]
    a2 = stats_c[2]
    a3 = stats_c[3]
    a4 = stats_c[4]
    a5 = stats_c[5]
    c0 = rows[0]
    c1 = rows[1]
    c2 = rows[2]
    c3 = rows[3]
    c4 = rows[4]
    c5 = rows[5]
    trend = code == TREND
    best = -1
    best_shut = 0.0
    retired = 0
    tf = float(t)
    for j in range(oldest, n):
        fs = f_start[j]
        if fs == np.inf or tf < visit[j]:
            continue
        length = cf - starts[j]
        visit[j] = tf + 1.0 + _WAIT + _REVISIT * length
        margin = base + _PRUNE_MARGIN * abs(fs)
        drift = 0.0
        if trend:
            dx = a2 - c2[j]
            st, stt, stx = _trend_local(length, x0_c, a0 - c0[j], a1 - c1[j], a5 - c5[j], dx, a4 - c4[j])
            p_mean, z_mean, slope, spread, cost = _trend_fit(length, st, stt, dx, a3 - c3[j], stx)
            p_mean += x0_c
        else:
            z_mean, v, log_v, cost = _meanvar_fit(length, a0 - c0[j], a1 - c1[j])
        gap = f_c - fs - cost
        room = gap + margin
        if trend:
            live, drift = _clip_trend(box, j, length, p_mean, z_mean, slope, spread, gap, margins)
            margin = margins[0] + drift
        elif not room >= 0.0:
            live = False
        else:
            live = _clip_meanvar(box, j, z_mean, v, log_v, room / length)
            # a kept start i newer than s is a competitor as c is (its room without the length term)
            for pick in range(_NEWER_CLIPS):
                if not (live and j + 1 < n):
                    break
                i = j + 1 + (c * 7451 + j * 6143 + pick * 104723) % (n - j - 1)
                fi = f_start[i]
                if fi == np.inf:
                    continue
                mean, v, log_v, cost = _meanvar_fit(starts[i] - starts[j], c0[i] - c0[j], c1[i] - c1[j])
                r = fi - fs - cost + (_PRUNE_MARGIN * (1.0 + abs(fi) + abs(fs)) + rounding)
                live = r >= 0.0 and _clip_meanvar(box, j, mean, v, log_v, r / (starts[i] - starts[j]))
        s = int(starts[j])
        for pick in range(_EXCLUSIONS):
            if not live:
                break
            if pick == 0:
                e = int(box[4, j])
                if e < 0:
                    continue
                r = box[10, j] - drift if trend else box[10, j]
                if use_length_term:
                    r -= length_term[t - e] - length_term[t - s]
                if trend:
                    live = not _cut_ellipse(box, j, box[5, j], box[6, j], box[7, j], box[8, j], box[9, j], r)
                else:
                    live = not _cut_meanvar(box, j, box[5, j], box[6, j], box[8, j], box[7, j], r)
                continue
            if j == 0:
                break
            i = (c * 40503 + j * 7919 + pick * 104729) % j
            fe = f_start[i]
            if fe == np.inf:
                continue
            e = int(starts[i])
            e_len = float(s - e)
            r = fs - fe - (margin if trend else _PRUNE_MARGIN * (2.0 + abs(fs) + abs(fe)) + rounding)
            if use_length_term:
                r -= length_term[t - e] - length_term[t - s]
            if trend:
                dx = c2[j] - c2[i]
                st, stt, stx = _trend_local(
                    e_len, box[11, j], c0[j] - c0[i], c1[j] - c1[i], c5[j] - c5[i], dx, c4[j] - c4[i]
                )
                p_mean, z_mean, slope, spread, cost = _trend_fit(e_len, st, stt, dx, c3[j] - c3[i], stx)
                e0, e1, e00, e01, e11 = _trend_ellipse(e_len, p_mean, z_mean, slope, spread, 0.0)
                live = not _cut_ellipse(box, j, e0, e1, e00, e01, e11, r - cost)
            else:
                # log V >= 1 - 1 / V: a room that cannot be positive or reach the box costs no log
                inv = 1.0 / e_len
                mean = (c0[j] - c0[i]) * inv
                v = max((c1[j] - c1[i]) * inv - mean * mean, 0.0) + VARIANCE_FLOOR
                if _meanvar_cut_misses(box, j, mean, v, (r - e_len * (1.0 - 1.0 / v)) * inv):
                    continue
                mean, v, log_v, cost = _meanvar_fit(e_len, c0[j] - c0[i], c1[j] - c1[i])
                live = not _cut_meanvar(box, j, mean, v, log_v, e_len, r - cost)
        # 'trend': a young start's margins hold from step s + _STEEP_AFTER on (_trend_margins), so
        # it stays until its next narrowing, due after that, which finds its box empty
        if not live and trend and length + 2.0 < _STEEP_AFTER:
            box[0, j] = np.inf
            box[1, j] = -np.inf
        elif not live:
            f_start[j] = np.inf
            retired += 1
        # where s beats c by more than the margin (and the most 'mbic' lets c gain back)
        shut = gap - margin
        if use_length_term:
            shut -= length_term[t - s] - length_term[t - c]
        if shut > best_shut:
            best_shut = shut
            best = j
    return retired, best


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
    functional=True,
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

    With ``functional`` (the default) the pruning is functional instead, for
    'mean' by :func:`_fpop`, a search of its own (``bounds[0:4]`` its four
    intervals' ends per start, the slots kept dense), for 'meanvar' and
    'trend' by :func:`_narrow_box` (``bounds``
    a box, an older start's region and the start's first position per start;
    ``until`` when to narrow it next): a start is compared with newer ones
    ``c`` as they are admitted (at ``t = c + min_size``, where PELT's grace
    ends) and retired at once when it cannot be best again. PELT's rule is the
    case where it cannot be best at any segment parameters. Both give the
    exact optimum's answer, except that PELT's margin can be smaller than the
    rounding of 'trend' costs on exact lines (zero residuals, penalty 0),
    where it may drop an optimal start; ``functional=False`` is kept for the
    benchmark and the tests that compare them.

    With ``functional`` the kept starts of 'meanvar' and 'trend' are also
    looked at lazily ('mean' keeps few, each cheap to cost). Every cost
    here is a least sum of per-point losses, so ``C(s, t) >= C(s, tau) +
    C(tau, t)`` for ``s < tau < t`` (PELT's own inequality, Killick et al.
    2012), and the length term only grows. A pass at step ``tau`` sets
    aside the starts it looks at whose total exceeds the least, ``A(tau)``,
    by more than half a penalty, as a group; at a later ``t`` each of them
    totals at least ``A(tau) + excess + C(tau, t)``, while the optimum is at
    most ``B(t)``, the least total of the starts looked at. So they cannot be
    best (nor tied) while ``B(t) - A(tau) - C(tau, t)`` (the gain from a
    change at ``tau``) stays below their least excess less the margin; the
    other starts and those admitted since are costed every step, with one
    segment cost per group. When those grow by ``_NEAR_GROWTH`` plus the
    cube root of twice the starts kept, a pass over them alone sets aside a
    new group; a full pass, over every start, comes when a group's gain gets
    there (a change), when the groups are as many as that growth, or after
    a compaction. The answer is the same bit for bit; on a long calm
    stretch a step costs a few dozen segment costs instead of one per kept
    start.
    """
    F[0] = -beta
    last[0] = 0
    for t in range(1, min_size):
        F[t] = np.inf
        last[t] = 0
    if functional and code == MEAN:
        _fpop(stats, m, beta, length_term, use_length_term, min_size, F, last, starts, cand, f_start, bounds)
        return
    rows = (cand[0], cand[1], cand[2], cand[3], cand[4], cand[5])
    # a pruning rule compares up to three computed costs (the pair's now, both starts' at a later
    # step; the lazy pass doubles it for four), each within the scale of its exact value
    rounding = 3.0 * _rounding_scale(code, stats, m)
    margins = _trend_margins(code, stats, m, beta, length_term)
    n_cand = np.int64(0)  # not a literal 0: the callees that take it compile once
    n_pruned = 0
    next_prune = 0
    next_compaction = 0
    next_sweep = 0
    # lazy evaluation (see Notes): the starts looked at every step (``near``, in order), and per
    # group set aside its pass's step (and the sums there), least value and least excess
    ident = np.arange(m + 1)
    near = np.empty(m + 1, dtype=np.int64)
    n_near = 0
    near_limit = 0
    growth = 0
    full = True
    n_groups = 0
    most_groups = 0
    group_sums = np.zeros((MAX_STATS, _GROUPS))
    group_rows = (group_sums[0], group_sums[1], group_sums[2], group_sums[3], group_sums[4], group_sums[5])
    group_step = np.empty(_GROUPS)
    group_zero = np.zeros(_GROUPS)
    group_at = np.empty(_GROUPS)
    group_far = np.empty(_GROUPS)
    group_cost = np.empty(_GROUPS)
    for t in range(min_size, m + 1):
        # admit the newest start; F is infinite (never a segment end) for 0 < s < min_size
        s = t - min_size
        if s == 0 or s >= min_size:
            if functional:
                # the region of defeat the newest start remembers: 'trend', that of the start that
                # beats it most, found by a pass, else that of the start of its own last segment;
                # 'meanvar', always the latter (see _narrow_box)
                # the youngest starts are due most often, the others seldom: those are looked
                # for only every _SWEEP_EVERY steps (a start narrowed late is only pruned later)
                oldest = 0 if t >= next_sweep else max(0, n_cand - _YOUNG)
                if oldest == 0:
                    next_sweep = t + _SWEEP_EVERY
                retired, beater = _narrow_box(
                    code,
                    rows,
                    starts,
                    f_start,
                    bounds,
                    until,
                    oldest,
                    n_cand,
                    s,
                    F[s],
                    stats[:, s],
                    stats[0, s + 1] - stats[0, s],
                    t,
                    length_term,
                    use_length_term,
                    rounding,
                    margins,
                )
                n_pruned += retired
                own = last[s] if s > 0 else -1
                excluder = int(starts[beater]) if beater >= 0 and code == TREND else own
                bounds[0, n_cand] = -np.inf
                bounds[1, n_cand] = np.inf
                bounds[2, n_cand] = -np.inf
                bounds[3, n_cand] = np.inf
                _remember_region(code, stats, F, excluder, s, bounds, n_cand, margins[0] if code == TREND else rounding)
            starts[n_cand] = s
            f_start[n_cand] = F[s]
            until[n_cand] = 0.0 if functional else np.inf
            for k in range(n_stats):
                cand[k, n_cand] = stats[k, s]
            near[n_near] = n_cand
            n_near += 1
            n_cand += 1
        partial = False
        if not full:
            # the starts of a group set aside at tau stay worse than the best start looked at by
            # more than the margin while its segment gains less than their excess by a change at tau
            _costs(code, stats, rows, starts, f_start, near, n_near, t, length_term, use_length_term, vals)
            _costs(
                code,
                stats,
                group_rows,
                group_step,
                group_zero,
                ident,
                n_groups,
                t,
                length_term,
                np.bool_(False),
                group_cost,
            )
            at_t = np.inf
            for j in range(n_near):
                at_t = min(at_t, vals[j])
            for g in range(n_groups):
                gain = at_t - group_at[g] - group_cost[g]
                margin = _PRUNE_MARGIN * (2.0 + abs(group_at[g]) + abs(at_t)) + 2.0 * rounding
                full = full or not gain + margin < group_far[g]
            partial = not full and n_near > near_limit
            full = full or (partial and n_groups == most_groups)
            partial = partial and not full
        # vals[k] = F(s_j) + C(s_j, t) (+ length term) for the k-th start j looked at
        if full:
            _costs(code, stats, rows, starts, f_start, ident, n_cand, t, length_term, use_length_term, vals)
            idx = ident
            count = n_cand
        else:
            idx = near
            count = n_near
        # least value, with four running minima so the loop is not one long dependency chain
        b0 = np.inf
        b1 = np.inf
        b2 = np.inf
        b3 = np.inf
        j = 0
        while j + 4 <= count:
            v0 = vals[j]
            v1 = vals[j + 1]
            v2 = vals[j + 2]
            v3 = vals[j + 3]
            b0 = v0 if v0 < b0 else b0
            b1 = v1 if v1 < b1 else b1
            b2 = v2 if v2 < b2 else b2
            b3 = v3 if v3 < b3 else b3
            j += 4
        while j < count:
            v0 = vals[j]
            b0 = v0 if v0 < b0 else b0
            j += 1
        best = min(min(b0, b1), min(b2, b3))
        k = 0
        while k < count - 1 and vals[k] != best:
            k += 1
        F[t] = best + beta
        last[t] = int(starts[idx[k]])
        if (full or partial) and functional and code != MEAN:
            # set aside the starts looked at (all of them after a full pass) worse than the best
            # by more than half a penalty, as a new group
            if full:
                n_groups = 0
            far = np.inf
            looked = n_near if partial else n_cand
            n_near = 0
            threshold = 0.5 * beta
            for i in range(looked):
                j = idx[i]
                excess = vals[i] - best
                if excess <= threshold:
                    near[n_near] = j
                    n_near += 1
                else:
                    far = min(far, excess)
            if far < np.inf:
                group_step[n_groups] = float(t)
                group_at[n_groups] = best
                group_far[n_groups] = far
                for r in range(MAX_STATS):
                    group_sums[r, n_groups] = stats[r, t]
                n_groups += 1
            if full:
                growth = _NEAR_GROWTH + int((2.0 * n_cand) ** (1.0 / 3.0))
                most_groups = min(growth, _GROUPS)
            near_limit = n_near + growth
            full = False
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
                    for k in range(_BOX_ROWS):
                        bounds[k, kept] = bounds[k, j]
                    kept += 1
            n_cand = kept
            n_pruned = 0
            full = True


@njit(cache=True, error_model="numpy")
def _costs(code, stats, rows, starts, base, idx, count, t, length_term, use_length_term, out) -> None:
    """``out[k] = base[j] + C(s_j, t)`` (plus the length term) for the ``count`` starts ``j = idx[k]``."""
    if code == MEAN:
        _cost_mean(stats, rows, starts, base, idx, count, t, out)
    elif code == MEANVAR:
        _cost_meanvar(stats, rows, starts, base, idx, count, t, out)
    else:
        _cost_trend(stats, rows, starts, base, idx, count, t, out)
    if use_length_term:
        for k in range(count):
            out[k] += length_term[t - int(starts[idx[k]])]


# --------------------------------------------------------------------------- at most k changes


@njit(cache=True, error_model="numpy")
def _neighbourhood(code, stats, m, length_term, use_length_term, min_size, k_max, D, back) -> None:
    """Segment neighbourhood (Auger & Lawrence 1989): the least cost with exactly j changes.

    ``D[j, t]`` is the least total segment cost of the first ``t`` values cut
    into ``j + 1`` segments of at least ``min_size`` (inf where impossible),
    ``back[j, t]`` where the last of them starts (the earliest among equal
    totals). No penalty and no pruning: ``O(k_max m^2)`` segment costs.
    """
    D[:, :] = np.inf
    back[:, :] = 0
    place = np.arange(m + 1).astype(np.float64)
    ident = np.arange(m + 1)
    vals = np.empty(m + 1)
    zero = np.zeros(m + 1)
    for j in range(k_max + 1):
        for t in range((j + 1) * min_size, m + 1):
            lo = j * min_size if j > 0 else 0
            hi = t - min_size if j > 0 else 0
            count = hi - lo + 1
            base = D[j - 1, lo:] if j > 0 else zero
            rows = (stats[0, lo:], stats[1, lo:], stats[2, lo:], stats[3, lo:], stats[4, lo:], stats[5, lo:])
            if code == MEAN:
                _cost_mean(stats, rows, place[lo:], base, ident, count, t, vals)
            elif code == MEANVAR:
                _cost_meanvar(stats, rows, place[lo:], base, ident, count, t, vals)
            else:
                _cost_trend(stats, rows, place[lo:], base, ident, count, t, vals)
            best = np.inf
            arg = lo
            for i in range(count):
                v = vals[i] + (length_term[t - lo - i] if use_length_term else 0.0)
                if v < best:
                    best = v
                    arg = lo + i
            D[j, t] = best
            back[j, t] = arg


@njit(cache=True, error_model="numpy")
def _walk_back(back, j, m, last) -> None:
    """Chain ``last[t]`` (start of the segment ending at ``t``) along the ``j``-change optimum."""
    t = m
    while j >= 0:
        s = back[j, t]
        last[t] = s
        t = s
        j -= 1


@njit(cache=True, error_model="numpy")
def _changes(last, m) -> int:
    """The number of changes of the segmentation ``last`` describes (see :func:`_walk_back`)."""
    n = 0
    t = last[m]
    while t > 0:
        t = last[t]
        n += 1
    return n


@njit(cache=True, error_model="numpy")
def _at_most(code, stats, m, beta, length_term, use_length_term, min_size, max_changes, last) -> None:
    """The least ``cost + beta * changes`` over segmentations with at most ``max_changes`` changes.

    Fills ``last`` along that optimum (see :func:`_walk_back`); among equal totals the
    fewest changes win.
    """
    k_max = min(max_changes, m // min_size - 1)
    D = np.empty((k_max + 1, m + 1))
    back = np.empty((k_max + 1, m + 1), dtype=np.int64)
    _neighbourhood(code, stats, m, length_term, use_length_term, min_size, k_max, D, back)
    best = np.inf
    chosen = np.int64(0)
    for j in range(k_max + 1):
        v = D[j, m] + beta * j
        if v < best:
            best = v
            chosen = j
    _walk_back(back, chosen, m, last)


@njit(cache=True, error_model="numpy")
def _present(values, lo, n):
    """The present (non-NaN) values of ``values[lo:lo + n]``, their 0-based positions, their count, all finite?

    And, when they are all finite, the smallest, the largest and their sum (from 0, in order).
    """
    y = np.empty(n)
    p = np.empty(n, dtype=np.int64)
    m = 0
    finite = True
    lowest = np.inf
    highest = -np.inf
    total = 0.0
    for i in range(n):
        v = values[lo + i]
        if not np.isnan(v):
            finite = finite and np.isfinite(v)
            lowest = min(lowest, v)
            highest = max(highest, v)
            total += v
            y[m] = v
            p[m] = i
            m += 1
    return y, p, m, finite, lowest, highest, total


@njit(cache=True, error_model="numpy", inline="always")  # one call site: no library of its own
def _path_row(r, values, offsets, valid, code, min_size, k_max, changes, cost, p_from, p_to, places, counts, row_ok):
    """The optimal segmentations of row ``r`` as the penalty runs over [0, inf), at most ``k_max`` changes.

    Row ``r`` writes records from ``r * (k_max + 1)`` and positions from
    ``r * k_max * (k_max + 1) / 2`` on (``places`` holds a record's 1-based change
    positions, each record ``changes`` of them, in record order).
    """
    counts[r] = 0
    row_ok[r] = False
    if not valid[r]:
        return
    lo = offsets[r]
    n = offsets[r + 1] - lo
    y, p, m, finite, lowest, highest, total = _present(values, lo, n)
    if m == 0 or not finite or m > MAX_PROGRAMME:
        return
    row_ok[r] = True
    slot = r * (k_max + 1)
    spot = r * (k_max * (k_max + 1) // 2)
    changes[slot] = 0
    cost[slot] = np.nan
    p_from[slot] = 0.0
    p_to[slot] = np.inf
    counts[r] = 1
    if m < 2 * min_size or not lowest < highest:
        return
    stats = np.empty((MAX_STATS, m + 1))
    if not _prepare(code, y, p, m, lowest, highest, total, stats) > 0.0:
        return
    k_eff = min(k_max, m // min_size - 1)
    D = np.empty((k_eff + 1, m + 1))
    back = np.empty((k_eff + 1, m + 1), dtype=np.int64)
    _neighbourhood(code, stats, m, np.zeros(m + 1), False, min_size, k_eff, D, back)
    # the lower convex hull of (j, C_j) up to the least C_j (fewest changes among equal ones)
    top = 0
    for j in range(1, k_eff + 1):
        if D[j, m] < D[top, m]:
            top = j
    hull = np.empty(k_eff + 1, dtype=np.int64)
    h = 0
    for j in range(top + 1):
        c = D[j, m]
        if not c < np.inf:
            continue
        while h >= 2:
            a = hull[h - 2]
            b = hull[h - 1]
            # drop b unless it lies strictly below the chord from a to j
            if (D[b, m] - D[a, m]) * (j - a) >= (c - D[a, m]) * (b - a):
                h -= 1
            else:
                break
        hull[h] = j
        h += 1
    last = np.empty(m + 1, dtype=np.int64)
    for i in range(h):
        j = hull[i]
        w = slot + i
        changes[w] = j
        cost[w] = D[j, m]
        p_to[w] = np.inf if i == 0 else (D[hull[i - 1], m] - D[j, m]) / (j - hull[i - 1])
        p_from[w] = 0.0 if i == h - 1 else (D[j, m] - D[hull[i + 1], m]) / (hull[i + 1] - j)
        _walk_back(back, j, m, last)
        t = m
        for k in range(j, 0, -1):
            t = last[t]
            places[spot + k - 1] = p[t] + 1
        spot += j
    counts[r] = h


@njit(cache=True, error_model="numpy", nogil=True)
def _path_rows(values, offsets, valid, code, min_size, k_max, changes, cost, p_from, p_to, places, counts, row_ok):
    """:func:`_path_row` for every row."""
    for r in range(len(offsets) - 1):
        _path_row(r, values, offsets, valid, code, min_size, k_max, changes, cost, p_from, p_to, places, counts, row_ok)


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
def _row_start(
    r,
    values,
    offsets,
    valid,
    code,
    params_per_change,
    penalty_kind,
    penalty_value,
    min_size,
    residual,
    least_factor,
    stats,
):
    """Read row ``r`` and prepare its search: ``y, p, m, beta, length_term, use_length_term, state``.

    ``state`` is 0 when the row has no answer (NULL, no present value, or an infinite one), 1 when
    it is one segment (too short, constant, or no scale), 2 when it is searched: then ``stats``
    (at least ``m + 1`` columns) holds its sums.
    """
    lo = offsets[r]
    n = offsets[r + 1] - lo
    if len(residual):
        residual[lo : lo + n] = np.nan
    no_term = np.zeros(1)
    if not valid[r]:
        return np.empty(0), np.empty(0, dtype=np.int64), 0, 0.0, no_term, False, 0
    y, p, m, finite, lowest, highest, total = _present(values, lo, n)
    if m == 0 or not finite:
        return y, p, m, 0.0, no_term, False, 0
    if not (m >= 2 * min_size and lowest < highest):
        return y, p, m, 0.0, no_term, False, 1
    scale = _prepare(code, y, p, m, lowest, highest, total, stats)
    if not scale > 0.0:
        return y, p, m, 0.0, no_term, False, 1
    log_m = math.log(m)
    # a named penalty grows with the serial dependence of the noise (see segments, Notes)
    factor = 1.0
    if penalty_kind != _FIXED:
        factor = _noise_factor(code, y, m, scale, np.empty(2 * m), np.empty(2 * m, dtype=np.int64))
    if penalty_kind != _FIXED:
        factor = max(factor, least_factor[r])  # a removed cycle's degrees of freedom (see _cycle_factor)
    if penalty_kind == _BIC:
        beta = params_per_change * log_m * factor
    elif penalty_kind == _MBIC:
        beta = 3.0 * log_m * factor
    else:
        beta = penalty_value
    use_length_term = penalty_kind == _MBIC
    length_term = np.zeros(m + 1)
    if use_length_term:
        for k in range(1, m + 1):
            length_term[k] = (math.log(k) - log_m) * factor
    return y, p, m, beta, length_term, use_length_term, 2


@njit(cache=True, error_model="numpy")
def _row_end(
    r,
    y,
    p,
    m,
    state,
    stats,
    beta,
    length_term,
    use_length_term,
    last,
    offsets,
    code,
    min_size,
    max_changes,
    out_first,
    out_last,
    out_mean,
    out_slope,
    counts,
    row_ok,
    residual,
) -> None:
    """Write row ``r``'s segments to ``out_*[offsets[r]:]``, their number to ``counts[r]`` (see :func:`_segment_row`).

    ``last`` is the search's answer when ``state`` is 2 (see :func:`_row_start`).
    """
    counts[r] = 0
    row_ok[r] = state > 0
    if state == 0:
        return
    lo = offsets[r]
    n = offsets[r + 1] - lo
    seg = np.empty(m + 1, dtype=np.int64)
    n_seg = 1
    seg[0] = 0
    if state == 2:
        if max_changes >= 0 and _changes(last, m) > max_changes:
            # PELT's optimum is the least cost + beta * changes over all segmentations, so when
            # it has at most max_changes changes it is also the least over those that do (a
            # subset holding it); only otherwise the O(max_changes m^2) programme runs
            if m > MAX_PROGRAMME:
                row_ok[r] = False
                return
            _at_most(code, stats, m, beta, length_term, use_length_term, min_size, max_changes, last)
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
        if len(residual):
            _residual(y, p, a, b, out_mean[w], out_slope[w], code == TREND, residual[lo:])
    counts[r] = n_seg


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
    max_changes,
    out_first,
    out_last,
    out_mean,
    out_slope,
    counts,
    row_ok,
    residual,
    least_factor,
) -> None:
    """Segment row ``r``: its segments go to ``out_*[offsets[r]:]``, their number to ``counts[r]``.

    A row of ``n`` values has at most ``n`` segments, so the rows' output slots do
    not overlap. ``row_ok[r]`` is False when the row has no answer (NULL, no present
    value, or an infinite one). Unless ``residual`` is empty, ``residual[offsets[r]:offsets[r + 1]]``
    gets each value minus its segment's level (for 'trend', its line; NaN where missing and in
    rows without an answer). Every work buffer is the row's own, so the answer
    does not depend on what else runs, before, after or at the same time.
    """
    n = offsets[r + 1] - offsets[r]
    stats = np.empty((MAX_STATS, n + 1))
    y, p, m, beta, length_term, use_length_term, state = _row_start(
        r,
        values,
        offsets,
        valid,
        code,
        params_per_change,
        penalty_kind,
        penalty_value,
        min_size,
        residual,
        least_factor,
        stats,
    )
    last = np.empty(m + 1, dtype=np.int64)
    if state == 2:
        _search_row(code, n_stats, stats, m, beta, length_term, use_length_term, min_size, np.empty(m + 1), last)
    _row_end(
        r, y, p, m, state, stats, beta, length_term, use_length_term, last, offsets, code, min_size, max_changes,
        out_first, out_last, out_mean, out_slope, counts, row_ok, residual,
    )  # fmt: skip


@njit(cache=True, error_model="numpy", inline="always")
def _search_row(code, n_stats, stats, m, beta, length_term, use_length_term, min_size, F, last) -> None:
    """:func:`_pelt` on one row with work buffers of its own (so no answer depends on another row's)."""
    _pelt(
        code, n_stats, stats, m, beta, length_term, use_length_term, min_size, F, last, np.empty(m + 1),
        np.empty((MAX_STATS, m + 1)), np.empty(m + 1), np.empty(m + 1), np.empty(m + 1), np.empty((_BOX_ROWS, m + 1)),
    )  # fmt: skip


@njit(cache=True, error_model="numpy")
def _residual(y, p, a, b, level, slope, trend, out) -> None:
    """``out[p[i]] = y[i] -`` its segment's level (for 'trend', its line) for ``a <= i < b``."""
    if trend and not np.isnan(slope):
        centre = 0.0
        for i in range(a, b):
            centre += float(p[i])
        centre /= b - a
        for i in range(a, b):
            out[p[i]] = y[i] - (level + slope * (float(p[i]) - centre))
    else:
        for i in range(a, b):
            out[p[i]] = y[i] - level


@njit(cache=True, error_model="numpy", nogil=True)
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
    max_changes,
    out_first,
    out_last,
    out_mean,
    out_slope,
    counts,
    row_ok,
    residual,
    least_factor,
) -> None:
    """Segment every row (see :func:`_segment_row`).

    For 'mean', the rows with the same number of present values (at most ``LANE_POINTS``) are
    searched ``LANES`` at a time (:func:`_segment_group`), the rest one by one; the answers are the
    same either way.
    """
    n_rows = len(offsets) - 1
    present = np.zeros(n_rows, dtype=np.int64)
    for r in range(n_rows):
        if valid[r]:
            for i in range(offsets[r], offsets[r + 1]):
                present[r] += not np.isnan(values[i])
    order = np.argsort(present, kind="mergesort")
    first = 0
    while first < n_rows:
        m = present[order[first]]
        stop = first + 1
        while stop < n_rows and present[order[stop]] == m:
            stop += 1
        if code == MEAN and stop - first >= LANES and m <= LANE_POINTS:
            _segment_group(
                order[first:stop], m, values, offsets, valid, code, n_stats, params_per_change, penalty_kind,
                penalty_value, min_size, max_changes, out_first, out_last, out_mean, out_slope, counts, row_ok,
                residual, least_factor,
            )  # fmt: skip
        else:
            for i in range(first, stop):
                _segment_row(
                    order[i], values, offsets, valid, code, n_stats, params_per_change, penalty_kind, penalty_value,
                    min_size, max_changes, out_first, out_last, out_mean, out_slope, counts, row_ok, residual,
                    least_factor,
                )  # fmt: skip
        first = stop


@njit(cache=True, error_model="numpy")
def _segment_group(
    rows,
    m,
    values,
    offsets,
    valid,
    code,
    n_stats,
    params_per_change,
    penalty_kind,
    penalty_value,
    min_size,
    max_changes,
    out_first,
    out_last,
    out_mean,
    out_slope,
    counts,
    row_ok,
    residual,
    least_factor,
) -> None:
    """Segment ``rows`` (``code`` 'mean', ``m`` present values each) as :func:`_segment_row` does, ``LANES`` at a time.

    Each row is prepared by itself; every ``LANES`` rows that need a search are searched together
    (:func:`_fpop_lanes`), then each writes its own answer. The rows left over are searched one by one.
    """
    stats = np.empty((LANES, MAX_STATS, m + 1))
    ys = np.empty((LANES, m))
    ps = np.empty((LANES, m), dtype=np.int64)
    betas = np.empty(LANES)
    terms = np.empty((LANES, m + 1))
    members = np.empty(LANES, dtype=np.int64)
    F = np.empty((LANES, m + 1))
    last = np.empty((LANES, m + 1), dtype=np.int64)
    use_length_term = penalty_kind == _MBIC
    searched = np.int64(2)  # the state of a row that is searched (see _row_start); not a literal: one compile
    filled = 0
    i = 0
    while True:
        done = i == len(rows)
        if not done:
            r = rows[i]
            i += 1
            y, p, _, beta, length_term, _, state = _row_start(
                r, values, offsets, valid, code, params_per_change, penalty_kind, penalty_value, min_size, residual,
                least_factor, stats[filled],
            )  # fmt: skip
            if state != searched:
                _row_end(
                    r, y, p, m, state, stats[filled], beta, length_term, use_length_term, last[filled], offsets, code,
                    min_size, max_changes, out_first, out_last, out_mean, out_slope, counts, row_ok, residual,
                )  # fmt: skip
                continue
            ys[filled] = y[:m]
            ps[filled] = p[:m]
            betas[filled] = beta
            terms[filled] = length_term
            members[filled] = r
            filled += 1
            if filled < LANES:
                continue
            _fpop_lanes(stats, m, betas, terms, use_length_term, min_size, F, last)
        else:  # the rows left over
            for k in range(filled):
                _search_row(code, n_stats, stats[k], m, betas[k], terms[k], use_length_term, min_size, F[k], last[k])
        for k in range(filled):
            _row_end(
                members[k], ys[k], ps[k], m, searched, stats[k], betas[k], terms[k], use_length_term, last[k], offsets,
                code, min_size, max_changes, out_first, out_last, out_mean, out_slope, counts, row_ok, residual,
            )  # fmt: skip
        filled = 0
        if done:
            return


# --------------------------------------------------------------------------- public


def _penalty(penalty: str | float) -> tuple[int, float]:
    if isinstance(penalty, str):
        if penalty not in PENALTIES:
            raise ValueError(f"penalty must be one of {PENALTIES} or a number >= 0, not {penalty!r}")
        return (_BIC if penalty == "bic" else _MBIC), 0.0
    value = float(penalty)
    if not (math.isfinite(value) and value >= 0):
        raise ValueError(f"a numeric penalty must be finite and >= 0, not {penalty!r}")
    return _FIXED, value


def _check(model: str, min_size: int, seasonal: str | float, max_changes: int | None) -> CostModel:
    if model not in MODELS:
        raise ValueError(f"model must be one of {sorted(MODELS)}, not {model!r}")
    spec = MODELS[model]
    if int(min_size) != min_size or min_size < spec.min_size:
        raise ValueError(f"min_size must be an integer >= {spec.min_size} for model {model!r}, not {min_size!r}")
    if isinstance(seasonal, str):
        if seasonal not in SEASONAL:
            raise ValueError(f"seasonal must be one of {SEASONAL} or a period >= 2 (in samples), not {seasonal!r}")
    elif not (math.isfinite(float(seasonal)) and float(seasonal) >= 2.0):
        raise ValueError(f"a numeric seasonal period must be finite and >= 2 (samples), not {seasonal!r}")
    if max_changes is not None and (int(max_changes) != max_changes or max_changes < 0):
        raise ValueError(f"max_changes must be an integer >= 0 or None (no limit), not {max_changes!r}")
    return spec


def _run(
    batch: Ragged,
    spec: CostModel,
    kind: int,
    value: float,
    min_size: int,
    max_changes: int | None,
    with_residual: bool = False,
    least_factor: np.ndarray | None = None,
) -> tuple[dict[str, np.ndarray], np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Segment the batch as it is (no cycle removed).

    ``least_factor`` (one per row, default 1) is the least factor a named penalty is
    multiplied by (see :func:`_cycle_factor`).

    Returns the segment columns as the kernel left them (row r's ``counts[r]``
    segments from ``slots[r]`` on, with unused space between rows), ``counts``,
    ``slots``, the rows' validity and, ``with_residual``, each value minus its
    segment's level or line (NaN where missing and in invalid rows; else empty).
    """
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
    residual = np.empty(capacity if with_residual else 0)
    _segment_rows(
        values,
        offsets,
        valid,
        spec.code,
        spec.n_stats,
        float(spec.params_per_change),
        kind,
        value,
        int(min_size),
        -1 if max_changes is None else int(max_changes),
        fields["first"],
        fields["last"],
        fields["mean"],
        fields["slope"],
        counts,
        row_ok,
        residual,
        np.ones(n_rows) if least_factor is None else np.ascontiguousarray(least_factor, dtype=np.float64),
    )
    return fields, counts, offsets[:-1], row_ok, residual


def _gather(counts: np.ndarray, slots: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Where each of ``counts[r]`` items starting at ``slots[r]`` lands when packed, and where it is now.

    Returns the packed offsets (``n_rows + 1``) and the source index of every packed item.
    """
    packed = np.zeros(len(counts) + 1, dtype=np.int64)
    np.cumsum(counts, out=packed[1:])
    source = np.arange(packed[-1], dtype=np.int64) + np.repeat(slots - packed[:-1], counts)
    return packed, source


# --------------------------------------------------------------------------- cycles


#: the harmonics' base rotation is taken from cos and sin afresh every this many positions (between
#: them, by turning the previous one: some 10^-15 of drift, and the fit costs a few multiplications
#: per value instead of 2 MAX_HARMONICS cosines)
_RESYNC = 32


@njit(cache=True, error_model="numpy", inline="always")  # inside the harmonics' loops
def _turn(t, w, c, s, turn_c, turn_s, exact):
    """cos and sin of ``w t``: evaluated at every :data:`_RESYNC`-th position (at every one when
    ``exact``), elsewhere those of ``t - 1`` (``c``, ``s``) turned by ``w`` (``turn_c``, ``turn_s``)."""
    if exact or t % _RESYNC == 0:
        return math.cos(w * t), math.sin(w * t)
    return c * turn_c - s * turn_s, s * turn_c + c * turn_s


@njit(cache=True, error_model="numpy", nogil=True)
def _harmonics(period: float) -> int:
    return int(min(max(math.floor(period / 2.0), 1.0), float(MAX_HARMONICS)))


@njit(cache=True, error_model="numpy")
def _subtract_cycle(residual, period, out, design) -> None:
    """``out -=`` the least-squares sum of the harmonics of ``period`` fitted to ``residual`` (NaN = missing).

    The columns are ``cos(2 pi j t / P)`` then ``sin(...)``, ``j = 1..H``, over the row's
    positions ``t``; a column that is (numerically) zero on the grid (a sine at Nyquist) is
    left out. There is no constant: the cycle is fitted to what a first segmentation leaves,
    whose levels are the segments' to say. Normal equations by Cholesky; a column that
    depends on the others (too few present values) is left out too: every least-squares
    solution fits the present values alike, and only they are written (``out`` is NaN where
    ``residual`` is). ``design`` is scratch of at least ``n * (2 MAX_HARMONICS + 2)`` values.
    """
    n = len(residual)
    h = _harmonics(period)
    k = 2 * h
    wide = (k + 3) // 4 * 4  # the columns in blocks of four (the last padded with zeros)
    w = 2.0 * np.pi / period
    turn_c = math.cos(w)
    turn_s = math.sin(w)
    # only a sine can vanish: every cosine is 1.0 at t = 0 (cos 0 and sin 0 exactly, turned by
    # 1 * c - 0 * s), so its length is at least 1, above the floor for any n below 10^12
    norms = np.zeros(h)
    present = 0
    for t in range(n):
        present += not np.isnan(residual[t])
    # the columns at the present positions, one per row, then the residual there and the fit
    cols = design[: (wide + 2) * present].reshape(wide + 2, present)
    cols[k:wide] = 0.0
    if present == n:
        _harmonic_columns(residual, w, turn_c, turn_s, h, cols, norms)
    else:
        c = 1.0
        sn = 0.0
        i = 0
        for t in range(n):
            c, sn = _turn(t, w, c, sn, turn_c, turn_s, False)
            r = residual[t]
            here = not np.isnan(r)
            cj = c
            sj = sn
            for j in range(h):
                if here:
                    cols[j, i] = cj
                    cols[h + j, i] = sj
                norms[j] += sj * sj
                cj, sj = cj * c - sj * sn, sj * c + cj * sn
            if here:
                cols[wide, i] = r
                i += 1
    # the cross products by blocks of four columns against four (sixteen sums side by side, each over the
    # present positions in order, from 0: the sums a loop over the positions makes)
    gram = np.zeros((k, k))
    rhs = np.zeros(k)
    block = np.empty((4, 4))
    four = np.empty(4)
    for a0 in range(0, wide, 4):
        for b0 in range(0, a0 + 1, 4):
            if b0 == a0:
                # the block on the diagonal: its lower half, and the four columns against the residual
                _cross4_lower(cols, a0, wide, present, block, four)
                for a in range(a0, min(a0 + 4, k)):
                    rhs[a] = four[a - a0]
            else:
                _cross4(cols, a0, b0, present, block)
            for a in range(a0, min(a0 + 4, k)):
                for b in range(b0, min(b0 + 4, a + 1)):
                    gram[a, b] = block[a - a0, b - b0]
    floor = 1e-6 * math.sqrt(n)
    for a in range(h, k):
        if not math.sqrt(norms[a - h]) > floor:  # left out: a zero column has no length to factor
            for b in range(k):
                gram[a, b] = 0.0
                gram[b, a] = 0.0
    coef = solve(cholesky(gram, 1e-12)[0], rhs)
    # each position's fit summed from 0 in order of the columns, column by column over the positions
    fitted = cols[wide + 1]
    fitted[:] = 0.0
    for a in range(k):
        for i in range(present):
            fitted[i] += coef[a] * cols[a, i]
    i = 0
    for t in range(n):
        if not np.isnan(residual[t]):
            out[t] -= fitted[i]
            i += 1


@njit(cache=True, error_model="numpy")
def _harmonic_columns(residual, w, turn_c, turn_s, h, cols, norms) -> None:
    """:func:`_subtract_cycle`'s columns and residual row for a row without gaps, the same values: the fundamental
    turned from position to position, then each harmonic from the one before, one loop over the (independent)
    positions per harmonic. ``norms[j]``: the squared length of the ``j``-th sine, summed in order only until it
    is safely above the floor :func:`_subtract_cycle` tests it against (the sum only grows: the same answer)."""
    n = len(residual)
    k = 2 * h
    wide = (k + 3) // 4 * 4
    base_c = cols[0]
    base_s = cols[h]
    c = 1.0
    sn = 0.0
    for t in range(n):
        c, sn = _turn(t, w, c, sn, turn_c, turn_s, False)
        base_c[t] = c
        base_s[t] = sn
        cols[wide, t] = residual[t]
    for j in range(1, h):
        prev_c, prev_s = cols[j - 1], cols[h + j - 1]
        next_c, next_s = cols[j], cols[h + j]
        for t in range(n):
            cj, sj = prev_c[t], prev_s[t]
            next_c[t] = cj * base_c[t] - sj * base_s[t]
            next_s[t] = sj * base_c[t] + cj * base_s[t]
    safe = 4.0 * (1e-6 * math.sqrt(n)) ** 2  # well above the floor's square: the length is above the floor
    for j in range(h):
        line = cols[h + j]
        top = 0.0
        for t in range(n):
            top += line[t] * line[t]
            if top > safe:
                break
        norms[j] = top


@njit(cache=True, error_model="numpy")
def _cross4(cols, a0, b0, m, out) -> None:
    """``out[i, j] = sum_t cols[a0 + i, t] * cols[b0 + j, t]`` over ``t < m`` in order, the sixteen at once."""
    x0, x1, x2, x3 = cols[a0], cols[a0 + 1], cols[a0 + 2], cols[a0 + 3]
    y0, y1, y2, y3 = cols[b0], cols[b0 + 1], cols[b0 + 2], cols[b0 + 3]
    s00 = s01 = s02 = s03 = s10 = s11 = s12 = s13 = 0.0
    s20 = s21 = s22 = s23 = s30 = s31 = s32 = s33 = 0.0
    for t in range(m):
        p0, p1, p2, p3 = x0[t], x1[t], x2[t], x3[t]
        q0, q1, q2, q3 = y0[t], y1[t], y2[t], y3[t]
        s00 += p0 * q0
        s01 += p0 * q1
        s02 += p0 * q2
        s03 += p0 * q3
        s10 += p1 * q0
        s11 += p1 * q1
        s12 += p1 * q2
        s13 += p1 * q3
        s20 += p2 * q0
        s21 += p2 * q1
        s22 += p2 * q2
        s23 += p2 * q3
        s30 += p3 * q0
        s31 += p3 * q1
        s32 += p3 * q2
        s33 += p3 * q3
    out[0, 0], out[0, 1], out[0, 2], out[0, 3] = s00, s01, s02, s03
    out[1, 0], out[1, 1], out[1, 2], out[1, 3] = s10, s11, s12, s13
    out[2, 0], out[2, 1], out[2, 2], out[2, 3] = s20, s21, s22, s23
    out[3, 0], out[3, 1], out[3, 2], out[3, 3] = s30, s31, s32, s33


@njit(cache=True, error_model="numpy")
def _cross4_lower(cols, a0, b, m, out, four) -> None:
    """``out[i, j] = sum_t cols[a0 + i, t] * cols[a0 + j, t]`` for ``j <= i`` (the ten of :func:`_cross4` with
    ``b0 = a0`` that the Gram matrix uses) and ``four[i] = sum_t cols[a0 + i, t] * cols[b, t]``, each over
    ``t < m`` in order."""
    x0, x1, x2, x3 = cols[a0], cols[a0 + 1], cols[a0 + 2], cols[a0 + 3]
    y = cols[b]
    s00 = s10 = s11 = s20 = s21 = s22 = s30 = s31 = s32 = s33 = 0.0
    r0 = r1 = r2 = r3 = 0.0
    for t in range(m):
        p0, p1, p2, p3 = x0[t], x1[t], x2[t], x3[t]
        q = y[t]
        r0 += p0 * q
        r1 += p1 * q
        r2 += p2 * q
        r3 += p3 * q
        s00 += p0 * p0
        s10 += p1 * p0
        s11 += p1 * p1
        s20 += p2 * p0
        s21 += p2 * p1
        s22 += p2 * p2
        s30 += p3 * p0
        s31 += p3 * p1
        s32 += p3 * p2
        s33 += p3 * p3
    out[0, 0] = s00
    out[1, 0], out[1, 1] = s10, s11
    out[2, 0], out[2, 1], out[2, 2] = s20, s21, s22
    out[3, 0], out[3, 1], out[3, 2], out[3, 3] = s30, s31, s32, s33
    four[0], four[1], four[2], four[3] = r0, r1, r2, r3


@njit(cache=True, error_model="numpy", nogil=True)
def _subtract_cycles(residual, offsets, rows, periods, out, out_offsets) -> None:
    """:func:`_subtract_cycle` for row ``rows[i]`` of ``residual`` into row ``i`` of ``out``."""
    longest = 0
    for i in range(len(rows)):
        longest = max(longest, out_offsets[i + 1] - out_offsets[i])
    design = np.empty(longest * (2 * MAX_HARMONICS + 2))
    for i in range(len(rows)):
        r = rows[i]
        _subtract_cycle(
            residual[offsets[r] : offsets[r + 1]], periods[r], out[out_offsets[i] : out_offsets[i + 1]], design
        )


def _remove_cycles(batch: Ragged, residual: np.ndarray, periods: np.ndarray) -> tuple[np.ndarray, Ragged]:
    """The rows with a finite period and their values minus the cycle fitted to ``residual``."""
    cyclic = np.flatnonzero(np.isfinite(periods))
    values = batch if len(cyclic) == batch.n_rows else batch.take(cyclic)
    out = np.array(values.values, dtype=np.float64, copy=True)
    offsets = np.ascontiguousarray(values.offsets, dtype=np.int64)
    _subtract_cycles(residual, np.ascontiguousarray(batch.offsets, dtype=np.int64), cyclic, periods, out, offsets)
    return cyclic, Ragged(out, values.offsets, values.valid)


def _cycle_factor(adjusted: Ragged, periods: np.ndarray, code: int) -> np.ndarray:
    """The least factor on a named penalty for rows whose cycle was removed: ``(m - k) / (m - k - q)``.

    The costs of 'mean' and 'trend' are in units of the variance about the whole series' mean
    (``k = 1``) or line (``k = 2``); with ``q`` cycle coefficients fitted to the same ``m`` values
    that variance is low by ``(m - k - q) / (m - k)`` in expectation (the residual variance of
    least squares), and every cost high by its inverse. 'meanvar' compares variances with each
    other, so the bias cancels (1). Row by row in compiled code (:func:`_cycle_factors`).
    """
    out = np.ones(adjusted.n_rows)
    if code != MEANVAR:
        _cycle_factors(
            np.ascontiguousarray(adjusted.values, dtype=np.float64),
            np.ascontiguousarray(adjusted.offsets, dtype=np.int64),
            np.ascontiguousarray(periods, dtype=np.float64),
            2 if code == TREND else 1,
            out,
        )
    return out


@njit(cache=True, error_model="numpy", nogil=True)
def _cycle_factors(values, offsets, periods, k, out) -> None:
    """:func:`_cycle_factor` of each row ``r`` of ``values``, whose cycle of period ``periods[r]`` was removed.

    ``q``, the coefficients :func:`_subtract_cycle` fits on a row of ``n`` positions: two per harmonic, less a
    sine at Nyquist, which vanishes on the grid (its rule).
    """
    for r in range(len(offsets) - 1):
        lo, hi = offsets[r], offsets[r + 1]
        n = hi - lo
        if n == 0:
            continue
        m = 0
        for t in range(lo, hi):
            if not np.isnan(values[t]):
                m += 1
        h = _harmonics(periods[r])
        w = 2.0 * np.pi * h / periods[r]
        # the sum only grows: once the top sine has length above the floor, the rest cannot change that
        floor = 1e-6 * math.sqrt(n)
        top = 0.0
        for t in range(n):
            s = math.sin(w * t)
            top += s * s
            if math.sqrt(top) > floor:
                break
        left = m - k - (2 * h - (math.sqrt(top) <= floor))
        if left > 0:
            out[r] = (m - k) / left


def _steady_spread(adjusted: Ragged, periods: np.ndarray, code: int) -> tuple[Ragged, np.ndarray]:
    """The rows whose spread follows their removed cycle, standardised by it; which rows those are.

    Noise that grows with the level (counts, amounts) rises and falls with a strong cycle:
    once the cycle is removed, the months of its peak still vary most, and a run of them
    looks like a short shift to a cost that takes one variance for all. ``r`` is the
    deviation from the whole series' mean (for 'trend', its line), the fit the costs are
    standardised by. The test: Koenker's studentised Breusch-Pagan statistic, ``m R^2`` of
    ``r^2`` regressed on the fundamental of the period, against chi-squared at the 1 % level
    of the cycles themselves. Where it holds, the spread is modelled as multiplicative
    heteroscedasticity, ``log s_t^2`` on the same harmonic, estimated by Harvey's regression
    of ``log r^2`` with one scoring step, and a deviation whose fitted scale ``s_t`` is above
    the row's root-mean-square scale ``s`` is shrunk to it: ``centre + r_t min(1, s / s_t)``.
    None is enlarged: where the noise is least, that would magnify whatever the cycle's fit
    missed (its shape, a second cycle) into shifts. Other rows are returned as they are. The
    caller reports levels from the values, not from this. Row by row in compiled code that
    releases the GIL (:func:`_steady_spreads`).

    References: R. Koenker, "A note on studentizing a test for heteroscedasticity", Journal of
    Econometrics 17(1), 107-112 (1981); A. C. Harvey, "Estimating regression models with
    multiplicative heteroscedasticity", Econometrica 44(3), 461-465 (1976).
    """
    source = np.ascontiguousarray(adjusted.values, dtype=np.float64)
    values = source.copy()
    changed = np.zeros(adjusted.n_rows, dtype=np.bool_)
    _steady_spreads(
        source,
        np.ascontiguousarray(adjusted.offsets, dtype=np.int64),
        np.ascontiguousarray(periods, dtype=np.float64),
        code,
        _SPREAD_CRITICAL,
        values,
        changed,
    )
    return Ragged(values, adjusted.offsets, adjusted.valid), changed


#: the Breusch-Pagan statistic's critical values at SEASONAL_LEVEL by its degrees of freedom (none at 0)
_SPREAD_CRITICAL = np.array([np.inf, chi2.isf(SEASONAL_LEVEL, 1), chi2.isf(SEASONAL_LEVEL, 2)])


@njit(cache=True, error_model="numpy", nogil=True)
def _steady_spreads(values, offsets, periods, code, critical, out, changed) -> None:
    """:func:`_spread_row` of each row ``r`` of ``values`` with period ``periods[r]``, into its place in ``out``
    (which holds the values already); ``changed[r]``: whether row ``r`` was standardised."""
    longest = 0
    for r in range(len(offsets) - 1):
        longest = max(longest, offsets[r + 1] - offsets[r])
    design = np.empty((3, longest))
    work = np.empty((4, longest))
    for r in range(len(offsets) - 1):
        lo, hi = offsets[r], offsets[r + 1]
        if hi > lo:
            changed[r] = _spread_row(values[lo:hi], periods[r], code, critical, out[lo:hi], design, work)


@njit(cache=True, error_model="numpy", inline="always")  # one call site: no library of its own
def _spread_row(y, period, code, critical, out, design, work) -> bool:
    """:func:`_steady_spread` of one row (NaN = missing): whether its spread follows the cycle, and then ``out``
    standardised by it. ``design`` and ``work`` are scratch of at least 3 and 4 rows of ``len(y)`` values."""
    n = len(y)
    m = 0
    total = 0.0
    top = 0.0
    for t in range(n):
        if not np.isnan(y[t]):
            m += 1
            total += y[t]
            top = max(top, abs(y[t]))
    count = max(m, 1)
    level = total / count
    slope = 0.0
    mt = 0.0
    if code == TREND:  # the costs of 'trend' are standardised about the line
        st = 0.0
        for t in range(n):
            if not np.isnan(y[t]):
                st += t
        mt = st / count
        sxx = 0.0
        sxy = 0.0
        for t in range(n):
            if not np.isnan(y[t]):
                d = t - mt
                sxx += d * d
                sxy += d * (y[t] - level)
        if sxx > 0:
            slope = sxy / sxx
    r, fitted, target, log_s2 = work[0, :n], work[1, :n], work[2, :n], work[3, :n]
    sum_r2 = 0.0
    for t in range(n):
        if np.isnan(y[t]):
            r[t] = 0.0
        else:
            r[t] = y[t] - (level + slope * (t - mt))
            sum_r2 += r[t] * r[t]
    # The test runs first on the harmonic turned from one position to the next (cheap, within some
    # 1e-14 of the cosines), which settles a row whose statistic is below the critical value by far
    # more than that can move it; any other row is tested again on the harmonic evaluated, the
    # design the answer is defined with. A column's length is trusted alike only far from its floor.
    w = 2.0 * np.pi / period
    for exact in range(2):
        low, used, statistic, near = _spread_test(y, n, m, count, w, exact == 1, r, sum_r2, design, fitted, target)
        df = used - 1
        if exact == 0 and not near and not statistic * (1.0 + _SPREAD_SETTLED) > critical[max(df, 0)]:
            return False  # also when df, m or the spread leave no test: the exact pass says no as well
    if not (df > 0 and m > df + 1 and statistic > critical[df]):
        return False
    # the scale: Harvey's log-squares fit, its constant set so that mean(r^2 / s_t^2) = 1, then one scoring step
    tiny = (ROUNDING_ULPS * np.finfo(np.float64).eps * top) ** 2 + np.finfo(np.float64).tiny
    for t in range(n):
        target[t] = 0.0 if np.isnan(y[t]) else math.log(max(r[t] * r[t], tiny))
    _harmonic_fit(design, low, target, log_s2)
    ratio = 0.0
    for t in range(n):
        if not np.isnan(y[t]):
            ratio += r[t] * r[t] * math.exp(-log_s2[t])
    shift = math.log(max(ratio / count, np.finfo(np.float64).tiny))
    for t in range(n):
        log_s2[t] += shift
        target[t] = 0.0 if np.isnan(y[t]) else r[t] * r[t] * math.exp(-log_s2[t]) - 1.0
    _harmonic_fit(design, low, target, fitted)
    mean_s2 = 0.0
    for t in range(n):
        log_s2[t] += fitted[t]
        if not np.isnan(y[t]):
            mean_s2 += math.exp(log_s2[t])
    mean_s2 /= count
    for t in range(n):
        if not np.isnan(y[t]):
            out[t] = level + slope * (t - mt) + r[t] * min(math.sqrt(mean_s2 / math.exp(log_s2[t])), 1.0)
    return True


#: the share by which the spread's statistic on the turned harmonic must fall short of the critical value for
#: the test to stand without the exact harmonic (the two differ by some 1e-14 of it)
_SPREAD_SETTLED = 1e-6


@njit(cache=True, error_model="numpy", inline="always")  # one call site: no library of its own
def _spread_test(y, n, m, count, w, exact, r, sum_r2, design, fitted, target):
    """The Breusch-Pagan step of :func:`_spread_row`: a constant and the fundamental of frequency ``w`` in
    ``design`` (evaluated when ``exact``, else turned), their Cholesky factor, the columns used, Koenker's
    statistic ``m R^2`` (0 without a test) and whether a column's length was near its floor.

    One pass builds the design (0 where ``y`` is missing), the columns' lengths, their cross products,
    ``target = r^2`` and the design's products with it, each sum in order of ``t`` from 0 as a loop
    of its own would make it; a second pass makes the fit and the statistic's two sums. A column left
    out (below its floor: a sine at Nyquist) is zeroed and its sums are made again from the zeros."""
    turn_c = math.cos(w)
    turn_s = math.sin(w)
    c = 1.0
    s = 0.0
    norm_c = 0.0
    norm_s = 0.0
    g00 = g10 = g11 = g20 = g21 = g22 = 0.0  # side by side, each in order of t
    v0 = v1 = v2 = 0.0
    for t in range(n):
        c, s = _turn(t, w, c, s, turn_c, turn_s, exact)
        norm_c += c * c
        norm_s += s * s
        here = not np.isnan(y[t])
        d0 = 1.0 if here else 0.0
        d1 = c if here else 0.0
        d2 = s if here else 0.0
        design[0, t] = d0
        design[1, t] = d1
        design[2, t] = d2
        g00 += d0 * d0
        g10 += d1 * d0
        g11 += d1 * d1
        g20 += d2 * d0
        g21 += d2 * d1
        g22 += d2 * d2
        square = r[t] * r[t]
        target[t] = square
        v0 += d0 * square
        v1 += d1 * square
        v2 += d2 * square
    # a column that vanishes on the grid (a sine at Nyquist) is left out; the constant's length is
    # sqrt(n) (n ones summed exactly)
    norms = np.array([float(n), norm_c, norm_s])
    gram = np.zeros((3, 3))
    used = 0
    near = False
    floor = 1e-6 * math.sqrt(n)
    for i in range(3):
        length = math.sqrt(norms[i])
        near |= abs(length - floor) <= _SPREAD_SETTLED * floor
        if length > floor:
            used += 1
        else:
            gram[i, i] = 1.0
            design[i, :n] = 0.0
    if used < 3:
        g00 = g10 = g11 = g20 = g21 = g22 = 0.0
        v0 = v1 = v2 = 0.0
        for t in range(n):
            d0 = design[0, t]
            d1 = design[1, t]
            d2 = design[2, t]
            g00 += d0 * d0
            g10 += d1 * d0
            g11 += d1 * d1
            g20 += d2 * d0
            g21 += d2 * d1
            g22 += d2 * d2
            v0 += d0 * target[t]
            v1 += d1 * target[t]
            v2 += d2 * target[t]
    gram[0, 0] += g00
    gram[1, 0] += g10
    gram[1, 1] += g11
    gram[2, 0] += g20
    gram[2, 1] += g21
    gram[2, 2] += g22
    low, _ = cholesky(gram, 1e-12)
    # Koenker's m R^2 of r^2 on the harmonic (the fit as _harmonic_fit makes it)
    coef = solve(low, np.array([v0, v1, v2]))
    mean_r2 = sum_r2 / count
    explained = 0.0
    spread = 0.0
    for t in range(n):
        fit = ((0.0 + design[0, t] * coef[0]) + design[1, t] * coef[1]) + design[2, t] * coef[2]
        fitted[t] = fit
        if not np.isnan(y[t]):
            explained += (fit - mean_r2) ** 2
            spread += (target[t] - mean_r2) ** 2
    df = used - 1
    statistic = m * explained / spread if df > 0 and m > df + 1 and spread > 0 else 0.0
    return low, used, statistic, near


@njit(cache=True, error_model="numpy")
def _harmonic_fit(design, low, target, out) -> None:
    """``out`` = the least-squares fit of ``target`` on the three rows of ``design``, whose cross products have
    the Cholesky factor ``low`` (a column with a zero pivot has coefficient 0)."""
    n = len(out)
    v0 = v1 = v2 = 0.0  # side by side, each in order of t
    for t in range(n):
        v0 += design[0, t] * target[t]
        v1 += design[1, t] * target[t]
        v2 += design[2, t] * target[t]
    coef = solve(low, np.array([v0, v1, v2]))
    for t in range(n):
        out[t] = ((0.0 + design[0, t] * coef[0]) + design[1, t] * coef[1]) + design[2, t] * coef[2]  # as a sum from 0


@njit(cache=True, error_model="numpy", nogil=True)
def _segment_levels(values, offsets, rows, slots, counts, first, out_mean, out_slope) -> None:
    """Level and slope of each segment of ``rows``, from ``values``: segments ``slots[r]`` to
    ``slots[r] + counts[r]``, each starting at the 1-based position ``first``."""
    for r in rows:
        y, p, m = _present(values, offsets[r], offsets[r + 1] - offsets[r])[:3]
        a = 0
        for k in range(counts[r]):
            w = slots[r] + k
            b = a
            if k + 1 < counts[r]:
                while b < m and p[b] < first[w + 1] - 1:
                    b += 1
            else:
                b = m
            out_mean[w], out_slope[w] = _segment_stats(y, p, a, b)
            a = b


def _periods(batch: Ragged, residual: np.ndarray, row_ok: np.ndarray, seasonal: str | float) -> np.ndarray:
    """The period to remove from each row (NaN: none)."""
    n_rows = batch.n_rows
    if seasonal == "none":
        return np.full(n_rows, np.nan)
    lengths = batch.lengths
    if not isinstance(seasonal, str):
        period = float(seasonal)
        return np.where(row_ok & (lengths >= 2.0 * period), period, np.nan)
    # imported here: periodicity is only needed for 'auto'
    from tsql.kernels.periodicity import cycle_test

    out = np.full(n_rows, np.nan)
    rows = np.flatnonzero(row_ok)
    if len(rows) == 0:
        return out
    # rows that cannot reach the level against white noise alone are left at once, before the
    # refinement of their period and the red background's test
    residuals = Ragged(residual, batch.offsets, batch.valid)
    found = cycle_test(residuals if len(rows) == n_rows else residuals.take(rows), below=SEASONAL_LEVEL)
    # a cycle repeats: at least SEASONAL_CYCLES of it in the record, else it is a slow wander
    significant = (found["p_value"] < SEASONAL_LEVEL) & (found["period"] * SEASONAL_CYCLES <= lengths[rows])
    out[rows] = np.where(significant, found["period"], np.nan)
    return out


def _in_range(batch: Ragged) -> tuple[Ragged, np.ndarray | None]:
    """The batch with each row beyond about 1e120 or below 1e-120 scaled by a power of two near 1, and the
    per-row factors that scale answers in the series' units back (None: no row needed it).

    Scaling by a power of two is exact, so positions, and levels and slopes once scaled back, are those of
    ordinary magnitudes; the costs' sums of squares neither overflow nor underflow.
    """
    values = np.asarray(batch.values, dtype=np.float64)
    if len(values) == 0:
        return batch, None
    lengths = batch.lengths
    magnitude = magnitudes(batch)
    _, exponent = np.frexp(magnitude)
    out_of_range = (magnitude > 0) & ((exponent > 400) | (exponent < -400))
    if not out_of_range.any():
        return batch, None
    shift = np.where(out_of_range, np.clip(exponent, -1020, 1020), 0)
    scaled = values * np.repeat(np.ldexp(1.0, -shift), lengths)
    return Ragged(scaled, batch.offsets, batch.valid), np.ldexp(1.0, shift)


def _segment(batch, model, penalty, min_size, seasonal, max_changes, skip_first: bool):
    """Check the arguments, remove cycles as ``seasonal`` says and segment.

    Returns the packed columns of every row's segments (all but each row's first when
    ``skip_first``: the change points), their row offsets and the rows' validity.
    """
    batch, factors = _in_range(batch)
    fields, offsets, row_ok = _segment_in_range(batch, model, penalty, min_size, seasonal, max_changes, skip_first)
    if factors is not None:
        back = np.repeat(factors, np.diff(offsets))
        fields["mean"] = fields["mean"] * back
        fields["slope"] = fields["slope"] * back
    return fields, offsets, row_ok


def _segment_in_range(batch, model, penalty, min_size, seasonal, max_changes, skip_first: bool):
    """:func:`_segment` on a batch whose magnitudes are in range."""
    spec = _check(model, min_size, seasonal, max_changes)
    kind, value = _penalty(penalty)
    cycles = seasonal != "none" and batch.n_rows > 0
    fields, counts, slots, row_ok, residual = _run(batch, spec, kind, value, min_size, max_changes, cycles)
    skip = int(skip_first)
    first_counts = np.maximum(counts - skip, 0)
    off1, source = _gather(first_counts, slots + skip)
    fields = {name: column[source] for name, column in fields.items()}  # packed: the run's slots are let go
    cyclic = np.empty(0, dtype=np.int64)
    if cycles:
        periods = _periods(batch, residual, row_ok, seasonal)
        if np.isfinite(periods).any():
            cyclic, adjusted = _remove_cycles(batch, residual, periods)
    del residual
    if len(cyclic) == 0:
        return fields, off1, row_ok
    # the rows with a cycle are segmented again without it (and without the spread that follows it);
    # the others keep the first answer
    searched, steady = _steady_spread(adjusted, periods[cyclic], spec.code)
    least = _cycle_factor(adjusted, periods[cyclic], spec.code)
    again, counts2, slots2, ok2, _ = _run(searched, spec, kind, value, min_size, max_changes, False, least)
    if steady.any():  # levels and slopes in the series' units, not the standardised ones
        _segment_levels(
            np.ascontiguousarray(adjusted.values, dtype=np.float64),
            np.ascontiguousarray(adjusted.offsets, dtype=np.int64),
            np.flatnonzero(steady),
            slots2,
            counts2,
            again["first"],
            again["mean"],
            again["slope"],
        )
    row_ok = row_ok.copy()
    row_ok[cyclic] &= ok2  # with max_changes, a long row may have no answer without its cycle
    kept = first_counts.copy()
    kept[cyclic] = 0
    second_counts = np.maximum(counts2 - skip, 0)
    total = kept.copy()
    total[cyclic] = second_counts
    offsets = np.zeros(len(total) + 1, dtype=np.int64)
    np.cumsum(total, out=offsets[1:])
    off_kept, src1 = _gather(kept, off1[:-1])
    off2, src2 = _gather(second_counts, slots2 + skip)
    dest1 = np.arange(off_kept[-1]) + np.repeat(offsets[:-1] - off_kept[:-1], kept)
    dest2 = np.arange(off2[-1]) + np.repeat(offsets[cyclic] - off2[:-1], second_counts)
    out = {}
    for name, column in fields.items():
        packed = np.empty(offsets[-1], dtype=column.dtype)
        packed[dest1] = column[src1]
        packed[dest2] = again[name][src2]
        out[name] = packed
    return out, offsets, row_ok


def segments(
    batch: Ragged,
    model: str = "mean",
    penalty: str | float = "bic",
    min_size: int = 2,
    seasonal: str | float = "auto",
    max_changes: int | None = None,
) -> RaggedRecords:
    """The segments of each series' optimal segmentation, each with its level and slope.

    Which model answers which question:

    * ``'mean'``: where did the level move? Levels of a count or an amount
      (units sold, calls per hour, a sensor's reading).
    * ``'meanvar'``: where did the spread change? Volatility of returns or of
      any series that wanders about a steady level (give it returns, not
      prices).
    * ``'trend'``: where did a trend turn? Piecewise-linear paths (a price's
      trend, a growing user count).

    Parameters
    ----------
    batch : Ragged
        The series; NaN elements are missing.
    model : {'mean', 'meanvar', 'trend'}
    penalty : {'bic', 'mbic'} or float >= 0
        The price of one change: a named penalty (see Notes; it grows with
        the series' serial dependence) or a number in the cost's units.
    min_size : int
        Least number of present values in a segment: >= 1 for 'mean', >= 2
        for 'meanvar' (a variance needs two values) and 'trend' (a line needs
        two). For 'meanvar' 5 or more is advisable.
    seasonal : {'auto', 'none'} or float >= 2
        'auto' removes a significant cycle first (see Notes), 'none' searches
        the values as they are, a number removes the harmonics of that period
        (in samples) from every row at least two periods long.
    max_changes : int >= 0 or None
        At most this many changes: the segmentation with the least
        ``cost + penalty x changes`` among those with at most ``max_changes``
        changes; with ``penalty=0`` the best segmentation with exactly
        ``min(max_changes, possible)`` changes. None: no limit. A row of more
        than :data:`MAX_PROGRAMME` (10,000) present values whose penalised
        optimum has more changes has no answer (invalid; see Notes).

    Returns
    -------
    RaggedRecords
        Per row, one record per segment, in order: ``first`` and ``last``
        (int64, 1-based, inclusive; the first segment starts at 1 and the last
        ends at the list's length, so missing elements at either end belong
        to them), ``mean`` of the segment's present values and ``slope``, the
        least-squares slope per sample against their positions (NaN with
        fewer than two present values), both after the removed cycle (the
        level without the season). NULL, empty and all-missing rows, rows
        with an infinite value, and rows too long for ``max_changes`` (above)
        are invalid. A row with fewer than
        ``2 * min_size`` present values, or whose values are all equal (up to
        1000 ulps of ``max |y|``), is one segment.

    Notes
    -----
    **Search.** The least ``sum_i C(segment_i) + beta * changes`` is found
    exactly by PELT [1]_ with ``K = 0``, for 'mean' with functional pruning
    (FPOP [2]_). With ``max_changes``, PELT runs first: its optimum is the
    least over all segmentations, so when it has at most ``max_changes``
    changes it is the least over those too. Otherwise segment neighbourhood
    [3]_ (a dynamic programme over the number of changes,
    ``O(max_changes m^2)``) finds it, on rows of at most 10,000 present
    values; longer rows get no answer rather than minutes of work. Ties go to
    the segmentation whose last segment starts earliest, and so on backwards;
    with ``max_changes``, to fewer changes. A change point is the original
    position of the first present value of a new segment; missing elements
    are skipped by the costs.

    **Costs**, with ``y`` the ``m`` present values and ``L`` a segment's
    number of them, in units of twice a negative Gaussian log-likelihood:

    * 'mean': ``RSS / s^2`` about the segment mean, ``s`` the standard
      deviation of the whole series: the series is standardised, as the
      benchmark of [6]_ does for its default PELT.
    * 'meanvar': ``L log(var / V + 1e-4)``, ``var`` the segment's
      maximum-likelihood variance and ``V`` the series' (a floor of 1e-4 of
      ``V``, added so the cost stays sub-additive).
    * 'trend': ``RSS / s^2`` about the segment's least-squares line, ``s`` the
      standard deviation of the residuals about the whole series' line.

    **Penalties.** 'bic' [4]_: (parameters a change adds) x ``log m``, i.e.
    ``2 log m`` for 'mean', ``3 log m`` for 'meanvar' and 'trend'. 'mbic'
    [5]_: ``3 log m`` per change plus ``sum_i log(L_i / m)`` over the
    segments, folded into each segment's cost (still sub-additive). A named
    penalty (the length term included) is multiplied by the long-run factor
    ``f`` below; a number is used as it is.

    **The long-run factor.** BIC is calibrated for independent noise; on
    drifting, trending, autocorrelated or seasonal series every wander looks
    like a shift. ``f = max(1, s_LR^2 / s^2)`` with ``s_LR^2`` the long-run
    variance of an AR(1) read off a robust semivariogram, as in [7]_:
    ``gamma(k) = gamma0 (1 - rho^k)`` gives ``rho = gamma(2) / gamma(1) - 1``
    (clipped to [0, 0.99]) and ``s_LR^2 = gamma(1) (1 + rho) / (1 - rho)^2``.
    ``gamma(k)`` is half the mean of the smallest 90 % of the squared lag-k
    differences times the Gaussian consistency factor 1.605 (the largest
    tenth, where level shifts put their differences, is left out); for
    'trend' the differences are centred at their median (blind to the
    line). Level shifts leave ``gamma`` almost untouched, so a shifting
    white-noise series keeps ``f = 1``; a drift or random walk raises
    ``gamma(2)`` to about ``2 gamma(1)`` and ``f`` to its cap ``m / 20``:
    a series is never taken for fewer than 20 independent values, and below
    20 values ``f = 1``.

    **How the defaults were chosen.** On the part of the Turing Change Point
    Dataset [6]_ in the test data (20 annotated real series; the tests score
    with the benchmark's F1 and covering metrics), the earlier noise scale
    from first differences collapsed on smooth series and put hundreds of
    changes where annotators mark two. The whole-series standard deviation
    (the benchmark's default PELT) removed that; the long-run factor made
    drifting series quiet; the cap of 20 effective values was chosen among
    5, 10 and 20 on those series. On the 18 series with a published default
    PELT score: mean F1 0.789 and cover 0.757 against 0.748 and 0.732
    (answering "no change": 0.712 and 0.625). Seeded simulations in the tests:
    white noise of 50-5,000 values gets no change in at least 95 % of runs;
    a 2-sigma shift in 200 values is found within 3 positions in about 95 %.

    **Cycles** ('auto'). A first segmentation (no cycle removed) gives each
    value's segment level (or line); :func:`tsql.kernels.periodicity.seasonality`
    on what is left gives the dominant period and Fisher's g p-value [8]_. A
    cycle with p < 0.01 that repeats at least 4 times in the record (the
    residue of a drift has its power at the longest periods, where Fisher's
    white-noise null fails) is removed: its first ``min(floor(P / 2), 6)``
    harmonics, fitted by least squares to that residue, are subtracted and
    the search runs again on the rest. Other rows keep the first answer.
    Two things make that second search honest on a cycle of counts or amounts
    (noise that grows with the level). Its ``q`` fitted coefficients take
    degrees of freedom from the ``m`` values: the variance the 'mean' and
    'trend' costs are scaled by is low by ``(m - k - q) / (m - k)`` in
    expectation (``k`` = 1 or 2 parameters of the whole series' mean or line;
    the residual variance of least squares [9]_), so a named penalty's factor
    is at least ``(m - k) / (m - k - q)`` (1.2 for 6 years of months);
    'meanvar' compares variances with each other and keeps 1. And where the
    remainder's spread follows the cycle (Koenker's studentised Breusch-Pagan
    test [10]_ of ``r^2`` on the period's fundamental, at 1 %), the noisiest
    phases are shrunk to the row's root-mean-square scale, their scale fitted
    as multiplicative heteroscedasticity [11]_, before the search; levels and
    slopes are still those of the values. On the invented sample warehouse's
    963 yearly-seasonal monthly items (no planted change) the share with a
    change fell from 7.5 % to 4.3 %, about that of its flat items (3.8 %);
    the runs of peak months the equal-variance cost took for short shifts
    were most of the difference. The TCPD scores above did not move.

    References
    ----------
    .. [1] R. Killick, P. Fearnhead and I. A. Eckley, "Optimal detection of
       changepoints with a linear computational cost", JASA 107(500),
       1590-1598 (2012).
    .. [2] R. Maidstone, T. Hocking, G. Rigaill and P. Fearnhead, "On optimal
       multiple changepoint algorithms for large data", Statistics and
       Computing 27(2), 519-533 (2017).
    .. [3] I. E. Auger and C. E. Lawrence, "Algorithms for the optimal
       identification of segment neighborhoods", Bulletin of Mathematical
       Biology 51(1), 39-54 (1989).
    .. [4] G. Schwarz, "Estimating the dimension of a model", Annals of
       Statistics 6(2), 461-464 (1978).
    .. [5] N. R. Zhang and D. O. Siegmund, "A modified Bayes information
       criterion with applications to the analysis of comparative genomic
       hybridization data", Biometrics 63(1), 22-32 (2007).
    .. [6] G. J. J. van den Burg and C. K. I. Williams, "An evaluation of
       change point detection algorithms", arXiv:2003.06222 (2020).
    .. [7] S. Chakar, E. Lebarbier, C. Levy-Leduc and S. Robin, "A robust
       approach for estimating change-points in the mean of an AR(1)
       process", Bernoulli 23(2), 1408-1447 (2017).
    .. [8] R. A. Fisher, "Tests of significance in harmonic analysis",
       Proc. Royal Society A 125, 54-59 (1929).
    .. [9] G. A. F. Seber and A. J. Lee, "Linear Regression Analysis", 2nd
       ed., Wiley (2003), ch. 3 (the unbiased estimate of the variance).
    .. [10] R. Koenker, "A note on studentizing a test for
       heteroscedasticity", Journal of Econometrics 17(1), 107-112 (1981).
    .. [11] A. C. Harvey, "Estimating regression models with multiplicative
       heteroscedasticity", Econometrica 44(3), 461-465 (1976).

    See Also
    --------
    change_points : the same segmentation, as the positions where segments start.
    change_points_path : every optimal segmentation as the penalty varies.

    Examples
    --------
    >>> s = segments(Ragged.from_list([[0.0, 0.1, -0.1, 0.0, 5.0, 5.1, 4.9, 5.0]]))
    >>> s.row(0)["first"], s.row(0)["last"]
    (array([1, 5]), array([4, 8]))
    """
    fields, offsets, row_ok = _segment(batch, model, penalty, min_size, seasonal, max_changes, False)
    return RaggedRecords(fields, offsets, row_ok)


def change_points(
    batch: Ragged,
    model: str = "mean",
    penalty: str | float = "bic",
    min_size: int = 2,
    seasonal: str | float = "auto",
    max_changes: int | None = None,
) -> Ragged:
    """Positions where each series' optimal segmentation starts a new segment.

    The same segmentation as :func:`segments` (see there for the models, the
    noise scale, the penalties, cycles and the rules for short, constant and
    missing data): 'mean' for the level of a count, 'meanvar' for the
    volatility of returns, 'trend' for the turns of a price's trend.

    Parameters
    ----------
    batch : Ragged
        The series; NaN elements are missing.
    model : {'mean', 'meanvar', 'trend'}
    penalty : {'bic', 'mbic'} or float >= 0
    min_size : int
    seasonal : {'auto', 'none'} or float >= 2
    max_changes : int >= 0 or None
        As for :func:`segments`.

    Returns
    -------
    Ragged
        Per row, the 1-based positions (float64, integral, increasing) of the
        first element of every segment but the first; empty when there is no
        change; ``row_valid`` False for NULL, empty and all-missing rows,
        rows with an infinite value and rows too long for ``max_changes``.

    See Also
    --------
    segments : the segments themselves, with their levels and slopes.
    change_points_path : the 1, 2, 3... most important changes, for every penalty.

    Examples
    --------
    >>> change_points(Ragged.from_list([[0.0, 0.1, -0.1, 0.0, 5.0, 5.1, 4.9, 5.0]])).values
    array([5.])
    """
    # every segment but a row's first starts a change
    fields, offsets, row_ok = _segment(batch, model, penalty, min_size, seasonal, max_changes, True)
    return Ragged(fields["first"].astype(np.float64), offsets, row_ok)


def change_points_path(
    batch: Ragged, model: str = "mean", max_changes: int = 10, min_size: int = 2, seasonal: str | float = "auto"
) -> tuple[RaggedRecords, Ragged]:
    """Every optimal segmentation of each series as the penalty runs from 0 to infinity.

    For each row, the segmentations that minimise ``cost + penalty x changes``
    for some penalty ``>= 0`` among those with at most ``max_changes``
    changes, from none (large penalties) to the most (penalty 0): the answer
    to "what are the 1, 2, 3... most important changes?" without choosing a
    penalty (CROPS [1]_ computes the same path by repeated PELT runs; here it
    is exact from the segment-neighbourhood costs [2]_).

    Parameters
    ----------
    batch : Ragged
        The series; NaN elements are missing.
    model : {'mean', 'meanvar', 'trend'}
        As for :func:`segments` (the level of a count, the volatility of
        returns, the turns of a trend).
    max_changes : int >= 0
        Most changes a segmentation on the path may have.
    min_size : int
        Least number of present values in a segment (as for :func:`segments`).
    seasonal : {'auto', 'none'} or float >= 2
        As for :func:`segments`; 'auto' decides on the cycle with the default
        'bic' segmentation.

    Returns
    -------
    records : RaggedRecords
        Per row, one record per segmentation on the path, by increasing number
        of changes: ``changes`` (int64), ``cost`` (float64: its total segment
        cost, in the units of a numeric penalty of :func:`segments`; NaN when
        the row has no noise scale: fewer than ``2 * min_size`` present
        values, or all equal), ``penalty_from`` and ``penalty_to`` (float64:
        it is optimal for penalties in ``[penalty_from, penalty_to]``; the
        first record's ``penalty_to`` is inf, the last one's ``penalty_from``
        0, and each record's ``penalty_from`` is the next one's
        ``penalty_to``, so the ranges tile ``[0, inf)``). Invalid rows as for
        :func:`segments`.
    positions : Ragged
        One row per record, in the records' flat order: the record's change
        positions (1-based, float64, increasing), as :func:`change_points`
        gives them. (For Arrow: a list field of the records' struct, with
        ``positions.offsets`` as its offsets.)

    A row of more than :data:`MAX_PROGRAMME` (10,000) present values is
    invalid: the programme below is quadratic in the row's length. (CROPS
    over PELT runs would be near-linear, but it finds the optimal
    segmentations of every size, and one with more than ``max_changes``
    changes may hide the best of those with fewer from every penalty: the
    path here, the hull of the segmentations with at most ``max_changes``,
    would not be exact.)

    Notes
    -----
    With ``C_j`` the least cost with exactly ``j`` changes (segment
    neighbourhood, exact, ``O(max_changes m^2)`` per row), the path is the
    lower convex hull of the points ``(j, C_j)``, ``j <= max_changes``, up to
    the least ``C_j``: the segmentation with ``j`` changes is optimal for the
    penalties between the slopes of the hull on either side of it. A
    ``j`` that lies on or above a chord of the hull is optimal for no
    penalty and is left out. Where the unconstrained optimum (PELT with a
    numeric penalty) has at most ``max_changes`` changes, it is the path's
    record for that penalty; below the last record's ``penalty_to`` a
    segmentation with more than ``max_changes`` changes may do better.

    References
    ----------
    .. [1] K. Haynes, I. A. Eckley and P. Fearnhead, "Computationally
       efficient changepoint detection for a range of penalties", Journal of
       Computational and Graphical Statistics 26(1), 134-143 (2017).
    .. [2] I. E. Auger and C. E. Lawrence, "Algorithms for the optimal
       identification of segment neighborhoods", Bulletin of Mathematical
       Biology 51(1), 39-54 (1989).

    See Also
    --------
    change_points : the optimum at one penalty, optionally with ``max_changes``.
    segments : its segments, levels and slopes.

    Examples
    --------
    >>> x = [0.0, 0.2, -0.1, 0.1, 5.0, 5.2, 4.9, 5.1, 2.0, 2.1, 1.9, 2.0]
    >>> records, positions = change_points_path(Ragged.from_list([x]), max_changes=2)
    >>> records.row(0)["changes"], positions.row(2)
    (array([0, 1, 2]), array([5., 9.]))
    """
    spec = _check(model, min_size, seasonal, max_changes)
    k_max = int(max_changes)
    batch = _in_range(batch)[0]  # the path has no answer in the series' units
    if seasonal != "none" and batch.n_rows:
        _, _, _, row_ok, residual = _run(batch, spec, _BIC, 0.0, min_size, None, True)
        periods = _periods(batch, residual, row_ok, seasonal)
        if np.isfinite(periods).any():
            cyclic, adjusted = _remove_cycles(batch, residual, periods)
            adjusted = _steady_spread(adjusted, periods[cyclic], spec.code)[0]
            values = np.array(batch.values, dtype=np.float64, copy=True)
            lengths = batch.lengths[cyclic]
            values[np.repeat(batch.offsets[cyclic] - adjusted.offsets[:-1], lengths) + np.arange(lengths.sum())] = (
                adjusted.values
            )
            batch = Ragged(values, batch.offsets, batch.valid)
    n_rows = batch.n_rows
    values = np.ascontiguousarray(batch.values, dtype=np.float64)
    offsets = np.ascontiguousarray(batch.offsets, dtype=np.int64)
    valid = np.ascontiguousarray(batch.row_valid, dtype=np.bool_)
    per_row = k_max + 1
    per_row_places = k_max * (k_max + 1) // 2
    changes = np.empty(n_rows * per_row, dtype=np.int64)
    cost = np.empty(n_rows * per_row)
    p_from = np.empty(n_rows * per_row)
    p_to = np.empty(n_rows * per_row)
    places = np.empty(n_rows * per_row_places, dtype=np.int64)
    counts = np.empty(n_rows, dtype=np.int64)
    row_ok = np.empty(n_rows, dtype=np.bool_)
    _path_rows(
        values, offsets, valid, spec.code, int(min_size), k_max, changes, cost, p_from, p_to, places, counts, row_ok
    )
    record_offsets, source = _gather(counts, np.arange(n_rows, dtype=np.int64) * per_row)
    records = RaggedRecords(
        {"changes": changes[source], "cost": cost[source], "penalty_from": p_from[source], "penalty_to": p_to[source]},
        record_offsets,
        row_ok,
    )
    # a record's positions: its row's place block, records one after another
    n_changes = changes[source]
    place_offsets = np.zeros(len(source) + 1, dtype=np.int64)
    np.cumsum(n_changes, out=place_offsets[1:])
    row_of_record = np.repeat(np.arange(n_rows), counts)
    first_in_row = np.repeat(place_offsets[record_offsets[:-1]], counts)
    start = row_of_record * per_row_places + (place_offsets[:-1] - first_in_row)
    flat = np.repeat(start - place_offsets[:-1], n_changes) + np.arange(place_offsets[-1])
    return records, Ragged(places[flat].astype(np.float64), place_offsets)
