"""Unit-root tests: does a series wander (augmented Dickey-Fuller) or stay put around a level or a
line (KPSS)?

Both take the span from a row's first to its last present value; missing elements inside it are
filled by linear interpolation (:mod:`tsql.kernels.gaps`), and a row with more than a quarter of
its span missing, an infinite value, or all present values equal gets no answer. The KPSS sums are
row reductions of one matrix per length; the augmented Dickey-Fuller regressions run row by row in
compiled code: the cross products of the regression's columns (the lagged differences are shifts
of one series, so they cost ``O(p n)``, not ``O(p^2 n)``), one Cholesky factorisation for the
residual sums of squares of every candidate lag, and a small second one for the test regression
(about 10x faster than a Householder QR of the ``n x p`` design per row).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit
from scipy.special import ndtr

from tsql.kernels.cancel import checkpoint
from tsql.kernels.gaps import fill_inside
from tsql.kernels.normal_equations import cholesky
from tsql.kernels.ragged import Ragged, full, in_safe_range

__all__ = ["adf_test", "kpss_test", "mackinnon_p_value"]

_MAX_MISSING_SHARE = 0.25
_ADF_WORK = 1 << 22  # design elements regressed between two looks at cancellation
_ADF_TRENDS = {"n": 0, "c": 1, "ct": 2, "ctt": 3}

# MacKinnon (1994), table 3 (one variable, N = 1): the tau statistic's cut-offs and the
# coefficients of p = Phi(c0 + c1 tau + c2 tau^2 [+ c3 tau^3]) below and above tau_star
# (the published scaled coefficients, scaling applied).
_MACKINNON = {
    #       tau_min, tau_star, tau_max, small-p coefficients, large-p coefficients
    "n": (-19.04, -1.04, math.inf, (0.6344, 1.2378, 0.032496), (0.4797, 0.93557, -0.06999, 0.033066)),
    "c": (-18.83, -1.61, 2.74, (2.1659, 1.4412, 0.038269), (1.7339, 0.93202, -0.12745, -0.010368)),
    "ct": (-16.18, -2.89, 0.70, (3.2512, 1.6047, 0.049588), (2.5261, 0.61654, -0.37956, -0.060285)),
    "ctt": (-17.17, -3.21, 0.54, (4.0003, 1.658, 0.048288), (3.0778, 0.49529, -0.41477, -0.059359)),
}

# Kwiatkowski et al. (1992), table 1: upper-tail critical values of the KPSS statistic at the
# 10 %, 5 %, 2.5 % and 1 % levels.
_KPSS_LEVELS = np.array([0.10, 0.05, 0.025, 0.01])
_KPSS_CRITICAL = {"c": np.array([0.347, 0.463, 0.574, 0.739]), "ct": np.array([0.119, 0.146, 0.176, 0.216])}


def adf_test(batch: Ragged, max_lag: int | None = None, regression: str = "c") -> dict[str, np.ndarray]:
    """Augmented Dickey-Fuller test of a unit root, the lag chosen by AIC.

    Parameters
    ----------
    batch : Ragged
        The series, one per row, equally spaced; NaN elements are missing.
    max_lag : int or None
        Largest number of lagged differences tried (>= 0). ``None``: ``ceil(12 (n / 100)^(1/4))``
        (Schwert 1989), capped at ``n // 2 - d - 1`` for ``d`` deterministic terms.
    regression : {'c', 'ct', 'ctt', 'n'}
        Deterministic terms of the test regression: constant; constant and trend; constant,
        trend and squared trend; none.

    Returns
    -------
    dict of str to numpy.ndarray
        One value per row, NaN where there is no answer (see the module notes; also a span too
        short for ``max_lag``, i.e. ``max_lag > n // 2 - d - 1``, or a regression without
        residual degrees of freedom):

        ``statistic``
            The t-statistic of the lagged level in the regression of ``diff(x)`` on the
            deterministic terms, the lagged level and ``used_lag`` lagged differences.
        ``p_value``
            MacKinnon's approximate asymptotic p-value of the statistic (:func:`mackinnon_p_value`).
        ``used_lag``
            The number of lagged differences with the smallest AIC, the candidates 0..max_lag all
            fitted on the same observations (the last ``n - 1 - max_lag``); then the test
            regression is refitted on every observation the chosen lag allows.

    Notes
    -----
    Small p-values reject the unit root (the series reverts to its level or line). The answer
    equals ``statsmodels.tsa.stattools.adfuller(x, maxlag=max_lag, regression=regression,
    autolag='AIC')``'s statistic, p-value and lag to rounding.

    References
    ----------
    D. A. Dickey and W. A. Fuller, "Distribution of the estimators for autoregressive time series
    with a unit root", Journal of the American Statistical Association 74, 427-431 (1979).
    S. E. Said and D. A. Dickey, "Testing for unit roots in autoregressive-moving average models
    of unknown order", Biometrika 71(3), 599-607 (1984).
    G. W. Schwert, "Tests for unit roots: a Monte Carlo investigation", Journal of Business &
    Economic Statistics 7(2), 147-159 (1989).
    J. G. MacKinnon, "Approximate asymptotic distribution functions for unit-root and
    cointegration tests", Journal of Business & Economic Statistics 12(2), 167-176 (1994).

    See Also
    --------
    kpss_test : the test with the opposite null hypothesis.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> walk, noise = np.cumsum(rng.standard_normal(300)), rng.standard_normal(300)
    >>> r = adf_test(Ragged.from_list([walk, noise]))
    >>> bool(r["p_value"][0] > 0.1), bool(r["p_value"][1] < 0.01)
    (True, True)
    """
    if regression not in _ADF_TRENDS:
        raise ValueError(f"adf_test: regression must be one of 'c', 'ct', 'ctt', 'n', got {regression!r}")
    if max_lag is not None and (isinstance(max_lag, bool) or int(max_lag) != max_lag or max_lag < 0):
        raise ValueError(f"adf_test: max_lag must be a whole number >= 0 or NULL, got {max_lag!r}")
    result = {key: full(batch.n_rows) for key in ("statistic", "p_value", "used_lag")}
    terms = _ADF_TRENDS[regression]
    for rows, x in _buckets(batch):
        n = x.shape[1]
        cap = n // 2 - terms - 1
        p = min(cap, math.ceil(12.0 * (n / 100.0) ** 0.25)) if max_lag is None else int(max_lag)
        if p < 0 or p > cap:
            continue
        step = max(1, _ADF_WORK // (n * (p + terms + 2)))
        for lo in range(0, len(rows), step):
            out = np.full((min(step, len(rows) - lo), 2), np.nan)
            _adf_rows(np.ascontiguousarray(x[lo : lo + step]), p, terms, out)
            result["statistic"][rows[lo : lo + step]] = out[:, 0]
            result["used_lag"][rows[lo : lo + step]] = out[:, 1]
            checkpoint()
    result["p_value"] = mackinnon_p_value(result["statistic"], regression)
    return result


def kpss_test(batch: Ragged, regression: str = "c") -> dict[str, np.ndarray]:
    """KPSS test of stationarity around a level (or a line), the lag chosen from the data.

    Parameters
    ----------
    batch : Ragged
        The series, one per row, equally spaced; NaN elements are missing.
    regression : {'c', 'ct'}
        The null hypothesis: stationary around a constant, or around a linear trend.

    Returns
    -------
    dict of str to numpy.ndarray
        One value per row, NaN where there is no answer (see the module notes; also fewer than
        3 values):

        ``statistic``
            ``sum_t S_t^2 / (n^2 s^2(l))`` with ``S_t`` the partial sums of the residuals from the
            mean (or the least-squares line) and ``s^2(l)`` the Newey-West long-run variance with
            Bartlett weights ``1 - i / (l + 1)``, ``i = 1..l``.
        ``p_value``
            Interpolated linearly in the published table of critical values (10 %, 5 %, 2.5 %,
            1 %) and bounded by it: a statistic below the 10 % value gives 0.10 (the true p-value
            is larger), one above the 1 % value gives 0.01 (the true p-value is smaller).

    Notes
    -----
    Small p-values reject stationarity. The lag ``l`` is Hobijn, Franses and Ooms' (1998)
    automatic choice: with ``m = floor(n^(2/9))`` autocovariance lags,
    ``l = floor(1.1447 (s1 / s0)^(2/3) n^(1/3))``, ``s0 = c_0 + 2 sum_{i<=m} c_i``,
    ``s1 = 2 sum_{i<=m} i c_i`` (``c_i`` the residuals' autocovariances), at most ``n - 1``.
    The answer equals ``statsmodels.tsa.stattools.kpss(x, regression, nlags='auto')``'s statistic
    and p-value to rounding.

    References
    ----------
    D. Kwiatkowski, P. C. B. Phillips, P. Schmidt and Y. Shin, "Testing the null hypothesis of
    stationarity against the alternative of a unit root", Journal of Econometrics 54, 159-178
    (1992).
    B. Hobijn, P. H. Franses and M. Ooms, "Generalizations of the KPSS-test for stationarity",
    Econometric Institute report 9802/A, Erasmus University Rotterdam (1998).
    W. K. Newey and K. D. West, "A simple, positive semi-definite, heteroskedasticity and
    autocorrelation consistent covariance matrix", Econometrica 55(3), 703-708 (1987).

    See Also
    --------
    adf_test : the test with the opposite null hypothesis.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> walk, noise = np.cumsum(rng.standard_normal(300)), rng.standard_normal(300)
    >>> r = kpss_test(Ragged.from_list([walk, noise]))
    >>> float(r["p_value"][0]), float(r["p_value"][1])
    (0.01, 0.1)
    """
    if regression not in _KPSS_CRITICAL:
        raise ValueError(f"kpss_test: regression must be 'c' or 'ct', got {regression!r}")
    statistic = full(batch.n_rows)
    for rows, x in _buckets(batch):
        n = x.shape[1]
        if n < 3:
            continue
        if regression == "c":
            resid = x - (x.sum(axis=1) / n)[:, None]
        else:
            resid = _line_residuals(x)
        out = np.empty(len(rows))
        _kpss_rows(np.ascontiguousarray(resid), out)
        statistic[rows] = out
        checkpoint()
    p_value = np.full(batch.n_rows, np.nan)
    ok = np.isfinite(statistic)
    p_value[ok] = np.interp(statistic[ok], _KPSS_CRITICAL[regression], _KPSS_LEVELS)
    return {"statistic": statistic, "p_value": p_value}


def mackinnon_p_value(tau: np.ndarray, regression: str = "c") -> np.ndarray:
    """MacKinnon's approximate asymptotic p-value of the Dickey-Fuller tau statistic (one series).

    ``p = Phi(c0 + c1 tau + c2 tau^2)`` at or below ``tau_star`` and
    ``Phi(c0 + c1 tau + c2 tau^2 + c3 tau^3)`` above it, with the published coefficients of the
    regression's deterministic terms; 0 below ``tau_min`` and 1 above ``tau_max``, where the
    approximation ends.

    Parameters
    ----------
    tau : array_like
        The statistics; NaN stays NaN.
    regression : {'c', 'ct', 'ctt', 'n'}
        The deterministic terms of the test regression.

    References
    ----------
    J. G. MacKinnon, "Approximate asymptotic distribution functions for unit-root and
    cointegration tests", Journal of Business & Economic Statistics 12(2), 167-176 (1994).

    Examples
    --------
    >>> float(np.round(mackinnon_p_value(np.array([-2.8615]))[0], 3))
    0.05
    """
    tau = np.asarray(tau, dtype=np.float64)
    tau_min, tau_star, tau_max, small, large = _MACKINNON[regression]
    small_z = small[0] + tau * (small[1] + tau * small[2])
    large_z = large[0] + tau * (large[1] + tau * (large[2] + tau * large[3]))
    p = ndtr(np.where(tau <= tau_star, small_z, large_z))
    p = np.where(tau > tau_max, 1.0, np.where(tau < tau_min, 0.0, p))
    return np.where(np.isnan(tau), np.nan, p)


# --------------------------------------------------------------------------------------------
# shared pieces
# --------------------------------------------------------------------------------------------


def _buckets(batch: Ragged):
    """``(row indices, matrix)`` per span length of the rows that can be tested."""
    spans = fill_inside(batch)
    ok = ~spans.infinite & (spans.length >= 3) & (spans.missing_share() <= _MAX_MISSING_SHARE)
    rows = np.flatnonzero(ok)
    if len(rows) == 0:
        return
    filled = spans.batch(rows)
    for _, group, x in filled.by_length():
        changing = x.max(axis=1) > x.min(axis=1)
        if changing.any():
            yield rows[group[changing]], in_safe_range(x[changing])  # both statistics are scale-free


def _line_residuals(x: np.ndarray) -> np.ndarray:
    """Residuals about each row's least-squares line."""
    n = x.shape[1]
    u = np.arange(n, dtype=np.float64) - 0.5 * (n - 1)
    slope = (x * u).sum(axis=1) / (u * u).sum()
    return x - (x.sum(axis=1) / n)[:, None] - slope[:, None] * u


@njit(cache=True, error_model="numpy", nogil=True)
def _kpss_rows(resid, out):
    """``out[r]``: the KPSS statistic of the residuals ``resid[r]`` (NaN without a long-run variance), row by
    row in cache: the autocovariances for the lag choice, the Bartlett-weighted long-run variance and the
    partial sums."""
    n = resid.shape[1]
    covlags = int(n ** (2.0 / 9.0))
    for r in range(resid.shape[0]):
        x = resid[r]
        squares = 0.0
        for t in range(n):
            squares += x[t] * x[t]
        s0, s1 = squares / n, 0.0
        for i in range(1, covlags + 1):
            product = _lagged_product(x, i) / (n / 2.0)
            s0 += product
            s1 += i * product
        ratio = s1 / s0
        chosen = 1.1447 * (ratio * ratio) ** (1.0 / 3.0) * n ** (1.0 / 3.0)
        lags = min(math.floor(chosen), n - 1) if math.isfinite(chosen) else 0
        partial, eta = 0.0, 0.0
        for t in range(n):
            partial += x[t]
            eta += partial * partial
        eta /= n * n
        s_hat = squares
        for i in range(1, lags + 1):
            s_hat += 2.0 * _lagged_product(x, i) * (1.0 - i / (lags + 1.0))
        s_hat /= n
        out[r] = eta / s_hat if s_hat > 0 else np.nan


@njit(cache=True, nogil=True)
def _lagged_product(x, lag):
    """``sum_t x[t] x[t - lag]``."""
    total = 0.0
    for t in range(lag, len(x)):
        total += x[t] * x[t - lag]
    return total


# --------------------------------------------------------------------------------------------
# the ADF regressions, row by row (compiled): cross products, Cholesky, nested residual sums of squares
# --------------------------------------------------------------------------------------------


@njit(cache=True, error_model="numpy", nogil=True)
def _adf_rows(x, p, terms, out):
    """``out[r] = (statistic, used lag)`` of each row of ``x`` (NaN, NaN without an answer)."""
    for r in range(x.shape[0]):
        row = x[r].copy()
        if terms >= 1:  # the constant absorbs a shift of the level: centre it for accuracy
            mean = 0.0
            for v in row:
                mean += v
            row -= mean / len(row)
        g = _gram(row, p, terms)
        lag = _aic_lag(g, len(row) - 1 - p, p, terms)
        out[r, 0] = _adf_statistic(row, g, p, lag, terms)
        out[r, 1] = np.nan if np.isnan(out[r, 0]) else lag


@njit(cache=True, error_model="numpy")
def _observation(x, t, lag, terms, z):
    """Observation ``t`` of the regression (``y_t = x[t + 1] - x[t]``) in ``z``: the deterministic
    terms (constant, ``tau``, ``tau^2`` with ``tau = (t + 1) / n``, spanning ``1, t, t^2``), the
    lagged level, ``lag`` lagged differences, ``y``."""
    tau = (t + 1.0) / len(x)
    if terms >= 1:
        z[0] = 1.0
    if terms >= 2:
        z[1] = tau
    if terms >= 3:
        z[2] = tau * tau
    z[terms] = x[t]
    for j in range(1, lag + 1):
        z[terms + j] = x[t - j + 1] - x[t - j]
    z[terms + 1 + lag] = x[t + 1] - x[t]


@njit(cache=True, error_model="numpy")
def _gram(x, p, terms):
    """Cross products of the columns of :func:`_observation` (``p`` lags) over the last
    ``n - 1 - p`` observations (``t = p..n-2``).

    The differences and their lags are shifts of one series, so their products over the window
    follow from those with ``y`` by adding the element that enters and removing the one that
    leaves (``O(p n)``, not ``O(p^2 n)``)."""
    n = len(x)
    nobs = n - 1 - p
    k = terms + 1 + p
    g = np.zeros((k + 1, k + 1))
    d = np.empty(n - 1)
    for t in range(n - 1):
        d[t] = x[t + 1] - x[t]
    where = np.empty(p + 1, dtype=np.int64)  # column of difference lag c (0 is y)
    where[0] = k
    for c in range(1, p + 1):
        where[c] = terms + c
    last = terms + 1
    rows = np.empty((terms + 2, nobs))  # the deterministic terms and the level, then y, as rows
    z = np.empty(k + 1)
    for i in range(nobs):
        _observation(x, p + i, 0, terms, z)
        for a in range(last):
            rows[a, i] = z[a]
    rows[last] = d[p : p + nobs]
    for a in range(last):
        for b in range(a + 1):
            g[a, b] = g[b, a] = _dot(rows[a], 0, rows[b], 0, nobs)
    # each lag's window of the differences against the fixed rows and y, three rows in one pass
    dots = np.empty(terms + 4)
    pick = np.empty(3, dtype=np.int64)
    for c in range(p + 1):
        for a in range(0, terms + 2, 3):
            for i in range(3):
                pick[i] = min(a + i, last)  # past the last row: the last again
            dots[a], dots[a + 1], dots[a + 2] = _dot3(rows, pick, d, p - c, nobs)
        for a in range(last):
            g[a, where[c]] = g[where[c], a] = dots[a]
        g[where[0], where[c]] = g[where[c], where[0]] = dots[last]
    for i in range(p):
        for j in range(i, p):
            # lags i + 1, j + 1 over the window = lags i, j over the window one step earlier
            value = g[where[i], where[j]] + d[p - 1 - i] * d[p - 1 - j] - d[n - 2 - i] * d[n - 2 - j]
            g[where[i + 1], where[j + 1]] = g[where[j + 1], where[i + 1]] = value
    return g


@njit(cache=True, error_model="numpy")
def _dot(a, a0, b, b0, m):
    """``sum_i a[a0 + i] b[b0 + i]`` over ``i < m``, in four interleaved partial sums (a fixed
    order: the same for a row whatever else is computed; four chains keep the pipeline busy)."""
    s0 = s1 = s2 = s3 = 0.0
    i = 0
    while i + 4 <= m:
        s0 += a[a0 + i] * b[b0 + i]
        s1 += a[a0 + i + 1] * b[b0 + i + 1]
        s2 += a[a0 + i + 2] * b[b0 + i + 2]
        s3 += a[a0 + i + 3] * b[b0 + i + 3]
        i += 4
    while i < m:
        s0 += a[a0 + i] * b[b0 + i]
        i += 1
    return (s0 + s1) + (s2 + s3)


@njit(cache=True, error_model="numpy")
def _dot3(rows, a, b, b0, m):
    """``_dot(rows[i], 0, b, b0, m)`` for ``i`` in ``a`` (three rows) in one pass over ``b``: the same sums in
    the same order, twelve chains at once instead of four."""
    x, y, z = rows[a[0]], rows[a[1]], rows[a[2]]
    s0 = s1 = s2 = s3 = 0.0
    u0 = u1 = u2 = u3 = 0.0
    v0 = v1 = v2 = v3 = 0.0
    i = 0
    while i + 4 <= m:
        b_0 = b[b0 + i]
        b_1 = b[b0 + i + 1]
        b_2 = b[b0 + i + 2]
        b_3 = b[b0 + i + 3]
        s0 += x[i] * b_0
        s1 += x[i + 1] * b_1
        s2 += x[i + 2] * b_2
        s3 += x[i + 3] * b_3
        u0 += y[i] * b_0
        u1 += y[i + 1] * b_1
        u2 += y[i + 2] * b_2
        u3 += y[i + 3] * b_3
        v0 += z[i] * b_0
        v1 += z[i + 1] * b_1
        v2 += z[i + 2] * b_2
        v3 += z[i + 3] * b_3
        i += 4
    while i < m:
        s0 += x[i] * b[b0 + i]
        u0 += y[i] * b[b0 + i]
        v0 += z[i] * b[b0 + i]
        i += 1
    return (s0 + s1) + (s2 + s3), (u0 + u1) + (u2 + u3), (v0 + v1) + (v2 + v3)


@njit(cache=True, error_model="numpy")
def _aic_lag(g, nobs, p, terms):
    """The lag 0..p of smallest AIC, all fitted on the same ``nobs`` observations: nested least
    squares from one factorisation (column ``k`` removes ``(Q'y)_k^2`` from the residual sum)."""
    if p == 0:
        return 0
    low, pivots = cholesky(g)
    k = terms + 1 + p
    rss = max(pivots[k], 0.0)
    best, best_aic = p, np.inf
    for lag in range(p, -1, -1):  # from the largest model down; ties go to the smaller lag
        used = terms + 1 + lag
        if lag < p:
            rss += low[k, used] * low[k, used]
        aic = nobs * (math.log(2.0 * math.pi) + math.log(rss / nobs) + 1.0) + 2.0 * used
        if aic <= best_aic:
            best, best_aic = lag, aic
    return best


@njit(cache=True, error_model="numpy")
def _adf_statistic(x, g, p, lag, terms):
    """t-statistic of the lagged level, fitted on every observation ``lag`` allows (``t = lag..n-2``):
    the cross products ``g`` of the lag search (``p`` lags, ``t = p..n-2``) cut to ``lag`` lags, plus
    the earlier observations, the level moved last; then ``t = (Q'y)_k / s``."""
    k = terms + 1 + lag
    nobs = len(x) - 1 - lag
    if nobs <= k:
        return np.nan
    order = np.empty(k + 1, dtype=np.int64)  # deterministic terms, lags, level, y
    for a in range(terms):
        order[a] = a
    for j in range(1, lag + 1):
        order[terms + j - 1] = terms + j
    order[k - 1] = terms
    order[k] = terms + 1 + p
    h = np.empty((k + 1, k + 1))
    for a in range(k + 1):
        for b in range(k + 1):
            h[a, b] = g[order[a], order[b]]
    z = np.empty(terms + 2 + lag)
    w = np.empty(k + 1)
    for t in range(lag, p):
        _observation(x, t, lag, terms, z)
        for a in range(k + 1):
            w[a] = z[order[a] if order[a] <= terms + lag else terms + 1 + lag]
        for a in range(k + 1):
            for b in range(k + 1):
                h[a, b] += w[a] * w[b]
    low, pivots = cholesky(h)
    for j in range(k):
        if not pivots[j] > 1e-20 * h[j, j]:
            return np.nan  # a column in the span of the others: the fit is not determined
    rss = pivots[k]
    s = math.sqrt(rss / (nobs - k)) if rss > 0.0 else 0.0
    if not s > 0.0:
        return np.nan
    return low[k, k - 1] / s
