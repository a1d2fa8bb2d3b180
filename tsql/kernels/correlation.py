"""Serial correlation of each series: the sample ACF and the Ljung–Box test.

Rows are processed per bucket of equal length, as matrices, so every row is
reduced by the same operations whatever else is in the batch: an answer never
depends on batch boundaries.

References
----------
Box, G. E. P. & Jenkins, G. M. (1976). *Time Series Analysis: Forecasting and
Control*, ch. 2 (the sample autocorrelation function).
Ljung, G. M. & Box, G. E. P. (1978). On a measure of lack of fit in time series
models. *Biometrika* 65(2), 297–303.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
from scipy import fft, special

from tsql.kernels.ragged import CACHE_ELEMENTS, Ragged, in_safe_range

#: Above this many lags one FFT per bucket is cheaper than one pass per lag.
_DIRECT_MAX_LAGS = 40

_EPS = np.finfo(np.float64).eps
_TINY = np.finfo(np.float64).tiny


class _Centred:
    """Equal-length series minus their own means, with gaps set to 0.

    With zeros at the gaps, ``sum(xc[t] * xc[t + k])`` is exactly the sum over
    the pairs whose two elements are both present.
    """

    def __init__(self, matrix: np.ndarray):
        self.n = matrix.shape[1]
        present = ~np.isnan(matrix)
        if present.all():
            self.present = None
            self.count = np.full(len(matrix), float(self.n))
            self.mean = matrix.sum(axis=1) / self.n
            self.xc = matrix - self.mean[:, None]
        else:
            self.present = present
            self.count = present.sum(axis=1).astype(np.float64)
            with np.errstate(invalid="ignore", divide="ignore"):
                self.mean = np.nan_to_num(np.where(present, matrix, 0.0).sum(axis=1) / self.count)
            self.xc = np.where(present, matrix - self.mean[:, None], 0.0)
        self.denominator = (self.xc * self.xc).sum(axis=1)

    def lagged(self, lag: int) -> tuple[np.ndarray, np.ndarray]:
        """Cross-product sums at ``lag`` and the number of present pairs."""
        if lag >= self.n:
            zero = np.zeros(len(self.xc))
            return zero, zero
        numerator = (self.xc[:, :-lag] * self.xc[:, lag:]).sum(axis=1)
        if self.present is None:
            return numerator, np.full(len(self.xc), float(self.n - lag))
        pairs = (self.present[:, :-lag] & self.present[:, lag:]).sum(axis=1).astype(np.float64)
        return numerator, pairs

    def usable(self) -> np.ndarray:
        """Rows with two or more present values that are not all equal.

        Centring a constant series leaves rounding noise of order eps * |mean|;
        a variance at that level counts as zero.
        """
        noise = 8 * _EPS * np.maximum(np.abs(self.mean), _TINY)
        return (self.count >= 2) & (self.denominator > self.count * noise * noise)


def _buckets(batch: Ragged) -> Iterator[tuple[np.ndarray, _Centred, np.ndarray]]:
    """(row indices, centred bucket, usable rows) for each length present."""
    valid = batch.row_valid
    for n, all_rows, whole in batch.by_length():
        if n == 0:
            continue
        step = max(1, CACHE_ELEMENTS // n)  # rows at a time: the work arrays stay in the processor's cache
        for start in range(0, len(all_rows), step):
            rows, matrix = all_rows[start : start + step], whole[start : start + step]
            infinite = np.isinf(matrix).any(axis=1)
            if infinite.any():  # no answer for a row holding an infinity: treat it as wholly missing
                matrix = np.where(infinite[:, None], np.nan, matrix)
            centred = _Centred(in_safe_range(matrix))
            yield rows, centred, centred.usable() & valid[rows]


def autocorrelation(batch: Ragged, lag: int = 1) -> np.ndarray:
    """Standard (biased) sample autocorrelation at one lag.

    ``r_k = sum_t (x_t - m)(x_{t+k} - m) / sum_t (x_t - m)^2`` (Box & Jenkins
    1976), where ``m`` and the denominator use the present values and the
    numerator the pairs whose two elements are present.

    Parameters
    ----------
    batch : Ragged
        The series; NaN elements are missing.
    lag : int
        k >= 1, in samples.

    Returns
    -------
    ndarray
        ``r_k`` per row; NaN when the row is constant, has fewer than two
        present values, or has no present pair ``lag`` apart.

    Examples
    --------
    >>> autocorrelation(Ragged.from_list([[1.0, 2.0, 3.0, 4.0]]), lag=1)
    array([0.25])
    """
    out = np.full(batch.n_rows, np.nan)
    for rows, centred, usable in _buckets(batch):
        numerator, pairs = centred.lagged(lag)
        ok = usable & (pairs > 0)
        out[rows[ok]] = numerator[ok] / centred.denominator[ok]
    return out


def acf(batch: Ragged, max_lag: int = 10) -> Ragged:
    """Sample autocorrelations at lags 1..max_lag, as for :func:`autocorrelation`.

    Returns
    -------
    Ragged
        ``max_lag`` values per usable row (NaN where a lag has no present
        pair); rows that are constant or too short are invalid (NULL).
    """
    table = np.full((batch.n_rows, max_lag), np.nan)
    valid = np.zeros(batch.n_rows, dtype=bool)
    for rows, centred, usable in _buckets(batch):
        valid[rows] = usable
        if max_lag <= _DIRECT_MAX_LAGS:
            numerators, pairs = zip(*(centred.lagged(k) for k in range(1, max_lag + 1)))
            numerator, pairs = np.column_stack(numerators), np.column_stack(pairs)
        else:
            numerator, pairs = _lagged_by_fft(centred, max_lag)
        ok = usable[:, None] & (pairs > 0)
        with np.errstate(invalid="ignore", divide="ignore"):
            table[rows] = np.where(ok, numerator / centred.denominator[:, None], np.nan)
    offsets = np.arange(0, (batch.n_rows + 1) * max_lag, max_lag, dtype=np.int64)
    return Ragged(table.ravel(), offsets, valid)


def _lagged_by_fft(centred: _Centred, max_lag: int) -> tuple[np.ndarray, np.ndarray]:
    """All cross-product sums at once, by the Wiener–Khinchin route."""
    n, k = centred.n, min(max_lag, centred.n - 1)
    size = fft.next_fast_len(2 * n - 1, real=True)
    numerator = np.zeros((len(centred.xc), max_lag))
    pairs = np.zeros((len(centred.xc), max_lag))
    if k < 1:
        return numerator, pairs
    numerator[:, :k] = _circular_autocorrelation(centred.xc, size, k)
    if centred.present is None:
        pairs[:, :k] = np.arange(n - 1, n - 1 - k, -1, dtype=np.float64)
    else:
        pairs[:, :k] = np.rint(_circular_autocorrelation(centred.present.astype(np.float64), size, k))
    return numerator, pairs


def _circular_autocorrelation(matrix: np.ndarray, size: int, max_lag: int) -> np.ndarray:
    spectrum = fft.rfft(matrix, n=size, axis=1)
    # a named conjugate: numpy would otherwise reuse a large temporary and multiply conj(X) * X, which
    # rounds differently from X * conj(X) (fused multiply-adds), so a row's answer would depend on its bucket's size
    conjugate = spectrum.conj()
    return fft.irfft(np.multiply(spectrum, conjugate), n=size, axis=1)[:, 1 : max_lag + 1]


def ljung_box(batch: Ragged, max_lag: int = 10) -> dict[str, np.ndarray]:
    """Ljung–Box portmanteau test of no autocorrelation up to ``max_lag``.

    ``Q = n (n + 2) sum_{k=1..h} r_k^2 / (n - k)`` with ``n`` the number of
    present values, compared with a chi-squared distribution on ``h`` degrees
    of freedom (Ljung & Box 1978). ``r_k`` as in :func:`autocorrelation`.

    Returns
    -------
    dict
        ``q`` and ``p_value`` per row; NaN where the row is constant, or has
        no more present values than ``max_lag``.
    """
    return ljung_box_of(batch, acf(batch, max_lag), max_lag)


def ljung_box_of(batch: Ragged, table: Ragged, max_lag: int) -> dict[str, np.ndarray]:
    """:func:`ljung_box` from the batch's ``acf(batch, max_lag)`` table, when it serves several statistics
    (:func:`tsql.kernels.screen.screen`)."""
    r = table.values.reshape(batch.n_rows, max_lag)
    if batch.has_missing:
        n = batch.segment_sum(batch.present.astype(np.float64))
    else:
        n = batch.lengths.astype(np.float64)
    k = np.arange(1, max_lag + 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        q = n * (n + 2) * np.sum(r * r / (n[:, None] - k), axis=1)
    q[~table.row_valid | (n <= max_lag) | np.isnan(q)] = np.nan
    return {"q": q, "p_value": special.chdtrc(max_lag, q)}


# ---------------------------------------------------------------------------
# two series: cross-correlation and who leads whom
# ---------------------------------------------------------------------------


def _paired_buckets(a: Ragged, b: Ragged) -> Iterator[tuple[np.ndarray, _Centred, _Centred, np.ndarray]]:
    """(row indices, centred a, centred b, usable rows) per length shared by both series of a row.

    A row whose two series differ in length, or either of which is NULL, has no answer.
    """
    if a.n_rows != b.n_rows:
        raise ValueError(f"cross_correlation: a has {a.n_rows} rows and b has {b.n_rows}; pairs need the same number")
    same = a.row_valid & b.row_valid & (a.lengths == b.lengths) & (a.lengths > 0)
    for n in np.unique(a.lengths[same]):
        all_rows = np.flatnonzero(same & (a.lengths == n))
        step = max(1, CACHE_ELEMENTS // int(n))
        for start in range(0, len(all_rows), step):
            rows = all_rows[start : start + step]
            centred = []
            for batch in (a, b):
                matrix = batch.values[batch.offsets[rows][:, None] + np.arange(n)]
                infinite = np.isinf(matrix).any(axis=1)
                if infinite.any():  # no answer for a row holding an infinity
                    matrix = np.where(infinite[:, None], np.nan, matrix)
                centred.append(_Centred(in_safe_range(matrix)))
            yield rows, centred[0], centred[1], centred[0].usable() & centred[1].usable()


def _cross_table(a: Ragged, b: Ragged, max_lag: int) -> tuple[np.ndarray, np.ndarray]:
    """Cross-correlations at lags -max_lag..max_lag per row (NaN where no pair), and the rows with an answer."""
    table = np.full((a.n_rows, 2 * max_lag + 1), np.nan)
    valid = np.zeros(a.n_rows, dtype=bool)
    for rows, ca, cb, usable in _paired_buckets(a, b):
        n = ca.n
        scale = np.sqrt(ca.denominator) * np.sqrt(cb.denominator)
        present_a = np.ones(ca.xc.shape, dtype=bool) if ca.present is None else ca.present
        present_b = np.ones(cb.xc.shape, dtype=bool) if cb.present is None else cb.present
        for column, h in enumerate(range(-max_lag, max_lag + 1)):
            if abs(h) >= n:
                continue
            first, last = max(0, -h), n - max(0, h)  # a_t for t in first..last-1, paired with b_{t+h}
            numerator = (ca.xc[:, first:last] * cb.xc[:, first + h : last + h]).sum(axis=1)
            ok = usable & (present_a[:, first:last] & present_b[:, first + h : last + h]).any(axis=1)
            table[rows[ok], column] = numerator[ok] / scale[ok]
        valid[rows] = usable
    return table, valid


def cross_correlation(a: Ragged, b: Ragged, max_lag: int = 10) -> Ragged:
    """Sample cross-correlation of two series at lags ``-max_lag .. max_lag``.

    Lag ``h`` pairs ``a_t`` with ``b_{t+h}``. The estimator is the standard
    biased one with whole-series means and standard deviations (Box & Jenkins
    1976, ch. 11 [1]_):

        r_ab(h) = sum_t (a_t - mean(a)) (b_{t+h} - mean(b))
                  / sqrt(sum_t (a_t - mean(a))^2 * sum_t (b_t - mean(b))^2)

    the sums over all ``t`` where the terms exist (``1/n`` factors cancel).
    A peak at a positive lag means that ``a`` moves first and ``b`` follows.

    Parameters
    ----------
    a, b : Ragged
        Batches with the same number of rows; row ``r`` of one goes with row
        ``r`` of the other, both on the same time grid (the same length). NaN
        elements are missing: as in :func:`autocorrelation`, means and the
        denominator use each series' present values, the numerator the pairs
        whose two elements are present.
    max_lag : int
        Largest lag either way (>= 0), in samples. The default 10 matches
        :func:`acf`'s; a lag of ``n`` or more has no pairs.

    Returns
    -------
    Ragged
        ``2 * max_lag + 1`` values per row, lag ``-max_lag`` first (NaN where a
        lag has no present pair). A row is NULL when the two series differ in
        length, either is NULL, empty or constant, has fewer than two present
        values, or holds an infinite value.

    See Also
    --------
    lead_lag : the lag of the largest absolute cross-correlation.
    acf : the same estimator for one series against itself.

    References
    ----------
    .. [1] Box, G. E. P. & Jenkins, G. M. (1976). *Time Series Analysis:
       Forecasting and Control*, revised ed., ch. 11.

    Examples
    --------
    >>> r = cross_correlation(Ragged.from_list([[1, 3, 2, 5, 4]]), Ragged.from_list([[0, 1, 3, 2, 5]]), 1)
    >>> r.row(0).round(3).tolist()
    [0.214, 0.493, 0.674]
    """
    if int(max_lag) != max_lag or max_lag < 0:
        raise ValueError(f"cross_correlation: max_lag must be a whole number >= 0, got {max_lag!r}")
    max_lag = int(max_lag)
    table, valid = _cross_table(a, b, max_lag)
    width = 2 * max_lag + 1
    table[~valid] = np.nan
    offsets = np.arange(0, (a.n_rows + 1) * width, width, dtype=np.int64)
    return Ragged(table.ravel(), offsets, valid)


def lead_lag(a: Ragged, b: Ragged, max_lag: int = 10) -> dict[str, np.ndarray]:
    """The lag at which two series move most alike: the largest absolute cross-correlation.

    Parameters
    ----------
    a, b : Ragged
        As for :func:`cross_correlation`.
    max_lag : int
        Lags ``-max_lag .. max_lag`` are searched (>= 0), in samples.

    Returns
    -------
    dict
        ``lag`` (float64, a whole number; NaN when there is no answer) and
        ``correlation`` (the cross-correlation there, with its sign) per row.
        A positive lag means ``a`` leads ``b`` by that many samples (``b``
        follows); a negative one, ``b`` leads. On a tie the lag nearest 0 wins,
        then the negative one.

    See Also
    --------
    cross_correlation : the whole function of the lag.

    References
    ----------
    .. [1] Box, G. E. P. & Jenkins, G. M. (1976). *Time Series Analysis:
       Forecasting and Control*, revised ed., ch. 11.

    Examples
    --------
    >>> x = [0, 0, 1, 4, 1, 0, 0, 0, 0]
    >>> found = lead_lag(Ragged.from_list([x]), Ragged.from_list([x[-2:] + x[:-2]]), max_lag=3)
    >>> int(found["lag"][0])
    2
    """
    if int(max_lag) != max_lag or max_lag < 0:
        raise ValueError(f"lead_lag: max_lag must be a whole number >= 0, got {max_lag!r}")
    max_lag = int(max_lag)
    table, valid = _cross_table(a, b, max_lag)
    lags = np.arange(-max_lag, max_lag + 1)
    preference = np.lexsort((lags, np.abs(lags)))  # nearest 0 first, then the negative lag
    ordered = np.abs(table[:, preference])
    lag = np.full(a.n_rows, np.nan)
    correlation = np.full(a.n_rows, np.nan)
    answer = valid & ~np.isnan(ordered).all(axis=1)
    if answer.any():
        best = preference[np.nanargmax(ordered[answer], axis=1)]
        lag[answer] = lags[best]
        correlation[answer] = table[answer][np.arange(answer.sum()), best]
    return {"lag": lag, "correlation": correlation}
