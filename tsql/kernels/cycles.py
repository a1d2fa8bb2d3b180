"""Several cycles per series: the strongest cycle, then the strongest of what is left, and so on.

Each step searches the periodogram of what the cycles found so far leave unexplained, refines the
peak off the Fourier grid as :func:`~tsql.kernels.periodicity.dominant_period` does, tests it as
``seasonality`` does (white and red backgrounds) over the ordinates still in play, and adds the
cycle's harmonics to one least-squares fit of all cycles found so far (with a constant and a line).
"""

from __future__ import annotations

import numpy as np

from tsql.kernels.cancel import checkpoint
from tsql.kernels.periodicity import Group, Sums, allowed_bins, cycle_p_value, fill_gaps, refine
from tsql.kernels.ragged import CACHE_ELEMENTS, Ragged, RaggedRecords, in_safe_range

__all__ = ["periods"]

_MIN_PRESENT = 4
_HARMONICS = 3  # harmonics fitted per cycle, as seasonality's strength
_RANK_TOL = 1e-9  # a new direction shorter than this share of its column is dropped (no information)
_CONSTANT_RTOL = 1e-12


def periods(batch: Ragged, k: int = 3, min_period: float = 2.0, max_period: float | None = None) -> RaggedRecords:
    """Up to ``k`` distinct cycles of each series, each the strongest of what the earlier ones leave.

    Parameters
    ----------
    batch : Ragged
        The series, one per row, equally spaced; NaN elements are missing (zero-filled in the
        periodogram, left out of the fits).
    k : int
        Most cycles reported per row (>= 1).
    min_period, max_period : float, float or None
        The period range, as in :func:`~tsql.kernels.periodicity.dominant_period`.

    Returns
    -------
    RaggedRecords
        Per row, up to ``k`` records ``(period, strength, p_value)`` in the order found (each the
        strongest periodogram peak left); fewer when the range has no Fourier period left that is
        not a harmonic of a reported cycle. A row with no answer (invalid, fewer than 4 present
        values, an infinite value, constant after its line is removed, no Fourier period in the
        range) is invalid, with no records.

        ``period``
            In samples, refined off the Fourier grid within one bin of the peak.
        ``strength``
            The share of the detrended sum of squares the cycle adds to the joint least-squares
            fit of a constant, a line and ``H = min(3, floor(period / 2))`` harmonic pairs of every
            cycle reported so far. The strengths of a row add up to at most 1.
        ``p_value``
            The test of :func:`~tsql.kernels.periodicity.seasonality` (Fisher's g of the peak's
            ordinate against a white and against a red, AR(1), background; the larger p-value)
            on the remaining periodogram (the residuals of that fit without the new cycle, gaps
            filled along the line), over the Fourier frequencies of the range that
            are not the nearest bins to a harmonic ``j / P`` (``j >= 1``) of a reported cycle
            ``P``, Nyquist excluded. The red background's lag-1 coefficient is that of the
            remaining residuals, so it describes the noise once the earlier cycles are out. When
            the earlier cycles are real, the remaining ordinates are those of the noise; when
            an earlier cycle was itself noise, its ordinate was the largest and the test is
            conservative. Seeded AR(1) (phi = 0.8) and random-walk rows of 200 points get each
            p below 0.05 in at most about 5 % of runs.

    Notes
    -----
    A candidate whose Fourier bin is the nearest to a harmonic ``j / P`` (``j >= 2``, within half
    a bin) of a reported cycle ``P`` is part of that cycle's shape, never a new cycle, and is
    left out of later searches and tests; a longer cycle whose harmonic
    was reported (a week after a day in hourly data) is a new cycle. So a daily cycle found
    after a stronger weekly one would count as the weekly cycle's seventh harmonic: in hourly
    load the daily cycle is the stronger one.

    References
    ----------
    R. A. Fisher, "Tests of significance in harmonic analysis", Proc. Royal Society A 125,
    54-59 (1929).
    M. Schulz and M. Mudelsee, "REDFIT: estimating red-noise spectra directly from unevenly
    spaced paleoclimatic time series", Computers & Geosciences 28, 421-426 (2002).
    P. Whittle, "The simultaneous estimation of a time series' harmonic components and covariance
    structure", Trabajos de Estadistica 3, 43-57 (1952) (testing further peaks after removing
    the largest).
    D. B. Percival and A. T. Walden, "Spectral Analysis for Physical Applications", Cambridge
    University Press (1993), section 10.9.

    See Also
    --------
    tsql.kernels.periodicity.seasonality : the single strongest cycle.

    Examples
    --------
    >>> t = np.arange(24 * 7 * 6)
    >>> x = 3 * np.sin(2 * np.pi * t / 24) + np.sin(2 * np.pi * t / 168) + 0.3 * np.cos(t)
    >>> r = periods(Ragged.from_list([x]), k=2)
    >>> np.round(r.fields["period"], 1).tolist()
    [24.0, 168.0]
    """
    if isinstance(k, bool) or int(k) != k or k < 1:
        raise ValueError(f"periods: k must be a whole number >= 1, got {k!r}")
    min_period = float(min_period)
    if not min_period >= 2:
        raise ValueError(f"periods: min_period must be >= 2, got {min_period!r}")
    if max_period is not None:
        max_period = float(max_period)
        if not max_period >= min_period:
            raise ValueError(f"periods: max_period must be NULL or >= min_period, got {max_period!r}")
    k = int(k)
    found = np.full((batch.n_rows, k, 3), np.nan)
    for n, rows, matrix in batch.by_length():
        if n < _MIN_PRESENT:
            continue
        bins = allowed_bins(n, min_period, max_period)
        keep = batch.row_valid[rows]
        if len(bins) == 0 or not keep.any():
            continue
        rows, matrix = rows[keep], in_safe_range(matrix[keep])
        step = max(1, CACHE_ELEMENTS // n)  # the fits hold about 2 + 6 k vectors per row
        for lo in range(0, len(rows), step):
            found[rows[lo : lo + step]] = _search(matrix[lo : lo + step], bins, k, min_period, max_period)
            checkpoint()
    counts = np.isfinite(found[:, :, 0]).sum(axis=1)
    offsets = np.zeros(batch.n_rows + 1, dtype=np.int64)
    np.cumsum(counts, out=offsets[1:])
    taken = np.isfinite(found[:, :, 0])
    fields = {name: found[:, :, i][taken] for i, name in enumerate(("period", "strength", "p_value"))}
    answered = counts > 0
    return RaggedRecords(fields, offsets, None if answered.all() else answered)


def _search(matrix: np.ndarray, bins: np.ndarray, k: int, min_period: float, max_period: float | None) -> np.ndarray:
    """``(rows, k, 3)`` records for the rows of one length; NaN where there is none."""
    m, n = matrix.shape
    out = np.full((m, k, 3), np.nan)
    present = ~np.isnan(matrix)
    gaps = not present.all()
    usable = (present.sum(axis=1) >= _MIN_PRESENT) & ~np.isinf(matrix).any(axis=1)
    w = present.astype(np.float64)
    y = np.where(present & usable[:, None], matrix, 0.0)
    u = np.arange(n, dtype=np.float64) - 0.5 * (n - 1)
    basis = _extend(np.empty((m, 0, n)), np.stack([w, w * u], axis=1))
    resid = y - _project(basis, y)
    tss = (resid * resid).sum(axis=1)
    scale = np.abs(y).max(axis=1)
    usable &= tss > (n * (_CONSTANT_RTOL * scale) ** 2)
    rss = tss
    t = np.arange(n, dtype=np.float64)
    half = n // 2
    grid = np.arange(half + 1, dtype=np.float64)
    allowed = np.zeros(half + 1, dtype=bool)
    allowed[bins] = True
    fisher = allowed & (2 * grid < n)
    excluded = np.zeros((m, half + 1), dtype=bool)
    f_lo = 2.0 / n if max_period is None else max(2.0 / n, 1.0 / max_period)
    p_hi = n / 2.0 if max_period is None else min(n / 2.0, max_period)
    for step in range(k):
        candidates = allowed & ~excluded & usable[:, None]
        live = candidates.any(axis=1)
        if not live.any():
            break
        spectrum = np.fft.rfft(resid, axis=1)
        power = spectrum.real**2 + spectrum.imag**2
        peak = np.argmax(np.where(candidates, power, -1.0), axis=1)
        test_power = power
        if gaps:
            filled = np.fft.rfft(fill_gaps(resid, present), axis=1)
            test_power = filled.real**2 + filled.imag**2
        p_value = cycle_p_value(test_power, n, peak, fisher & ~excluded)
        period = np.full(m, np.nan)
        idx = np.flatnonzero(live)
        period[idx] = _refined_period(resid[idx], present[idx], spectrum[idx], peak[idx], n, f_lo, min_period, p_hi)
        # the cycle joins the fit
        harmonics = np.clip(np.floor(period / 2.0), 1, _HARMONICS)
        columns = np.zeros((m, 2 * _HARMONICS, n))
        angle = 2.0 * np.pi * np.outer(np.where(live, 1.0 / np.where(live, period, 1.0), 0.0), t)
        c1, s1 = np.cos(angle), np.sin(angle)
        cj, sj = c1, s1
        for j in range(1, _HARMONICS + 1):
            if j > 1:  # the j-th harmonic by rotation: one cos/sin pass for all three
                cj, sj = cj * c1 - sj * s1, sj * c1 + cj * s1
            on = ((j <= harmonics) & live)[:, None] * w
            columns[:, 2 * j - 2] = cj * on
            columns[:, 2 * j - 1] = sj * on
        basis = _extend(basis, columns)
        new_resid = y - _project(basis, y)
        new_rss = (new_resid * new_resid).sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            strength = np.clip((rss - new_rss) / tss, 0.0, 1.0)
        out[live, step] = np.stack([period, strength, p_value], axis=1)[live]
        resid, rss = np.where(live[:, None], new_resid, resid), np.where(live, new_rss, rss)
        # its harmonics are no new cycles: out of the search and of later tests
        with np.errstate(invalid="ignore", divide="ignore"):
            position = grid[None, :] * np.where(live, period, np.nan)[:, None] / n  # bin / (n / P) = j
        near = np.abs(grid[None, :] - np.round(position) * n / np.where(live, period, np.nan)[:, None]) <= 0.5
        excluded |= live[:, None] & near & (np.round(position) >= 1)
        usable &= live
    return out


def _refined_period(resid, present, spectrum, peak, n, f_lo, min_period, p_hi) -> np.ndarray:
    """The periodogram peak refined off the grid, as dominant_period refines it."""
    group = Group(np.arange(len(peak)), resid, None if present.all() else present)
    sums = Sums([group])
    near = peak[:, None] + np.arange(-1, 2)
    mirror = near > n // 2
    picked = np.take_along_axis(spectrum, np.where(mirror, n - near, near), axis=1)
    near_bins = np.where(mirror, np.conj(picked), picked)
    k = peak.astype(np.float64)
    lo = np.maximum((k - 1.0) / n, f_lo)
    hi = np.minimum((k + 1.0) / n, 1.0 / min_period)
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        freq = refine(sums, k, near_bins, lo, hi)
    return np.clip(1.0 / freq, min_period, p_hi)


def _extend(basis: np.ndarray, columns: np.ndarray) -> np.ndarray:
    """``basis`` (per row, orthonormal vectors as rows: ``(rows, K, n)``) extended by the
    directions of ``columns`` (``(rows, c, n)``) it lacks; a direction shorter than ``_RANK_TOL``
    of the longest column is dropped (a zero column, or one already in the span).

    Classical Gram-Schmidt against the basis, twice ("twice is enough"; on every row, so that a row's
    answer does not depend on the others of its batch), then the new directions orthonormalised
    through the eigenvectors of their small Gram matrix, twice (the second pass sees a nearly
    orthonormal set)."""
    lengths = np.sqrt((columns * columns).sum(axis=2))  # (m, c)
    if basis.shape[1]:
        for _ in range(2):  # always twice: whether a row needs it must not depend on the other rows
            columns = columns - (columns @ basis.transpose(0, 2, 1)) @ basis
    floor = (_RANK_TOL * np.maximum(lengths.max(axis=1), 1e-300)) ** 2
    for _ in range(2):
        values, vectors = np.linalg.eigh(columns @ columns.transpose(0, 2, 1))  # (m, c), (m, c, c)
        keep = values > floor[:, None]
        scale = np.where(keep, 1.0 / np.sqrt(np.where(keep, values, 1.0)), 0.0)
        columns = (vectors * scale[:, None, :]).transpose(0, 2, 1) @ columns
        floor = np.full(len(columns), 0.25)  # kept directions now have length 1, dropped ones 0
    return np.concatenate([basis, columns], axis=1)


def _project(basis: np.ndarray, y: np.ndarray) -> np.ndarray:
    """The least-squares fit of ``y`` on the orthonormal rows of ``basis``, row by row."""
    coef = (basis @ y[:, :, None])[:, :, 0]
    return (coef[:, None, :] @ basis)[:, 0, :]
