"""Smoothing: a least-squares fit of a mean, a linear trend and harmonics; its curve and one cycle.

The model, how it is solved and its numerical choices: docs/smoothing.md.
"""

from __future__ import annotations

from collections.abc import Iterator
from functools import cached_property

import numpy as np

from tsql.kernels.ragged import Ragged

__all__ = ["harmonic_smooth", "harmonic_profile"]

_RCOND = 1e-10  # singular values below this share of the largest are dropped
_GAP_RCOND = 1e-12  # rows with gaps: eigenvalues of Q' W Q below this share of the largest are dropped


# --------------------------------------------------------------------------------------------
# public API
# --------------------------------------------------------------------------------------------


def harmonic_smooth(batch: Ragged, harmonics: int = 3, period: float | None = None) -> Ragged:
    """Least-squares fit of a level, a linear trend and ``harmonics`` cos/sin pairs, per series.

    Parameters
    ----------
    batch : Ragged
        The series, one per row; NaN elements are missing.
    harmonics : int
        Number of cos/sin pairs (>= 1); pairs at or above Nyquist are dropped (see the module
        notes).
    period : float or None
        Fundamental period in samples (> 0): frequencies ``j / period``. ``None`` uses the row's
        length ``n``: frequencies ``j / n``.

    Returns
    -------
    Ragged
        Per valid row, the fitted values at every position (same length as the row, gaps
        included, no NaN). A row is invalid (NULL) when it is NULL, empty, contains ``+-inf``, or
        has fewer present values than ``2 + 2 * harmonics`` (the pairs asked for, whether or not
        some are dropped at Nyquist); its list then has length 0. A row whose present values are
        all equal smooths to that value exactly.

    Notes
    -----
    The model and how it is solved are described in docs/smoothing.md. Without gaps and with
    Fourier frequencies it is an FFT low-pass plus an exact correction for the trend.

    References
    ----------
    P. Bloomfield, "Fourier Analysis of Time Series: An Introduction", 2nd ed., Wiley (2000).

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(12.0)
    >>> x = 2.0 + 0.5 * t + np.cos(2 * np.pi * t / 12)
    >>> bool(np.allclose(harmonic_smooth(Ragged.from_list([x]), harmonics=1).values, x))
    True
    """
    out = None
    valid = np.zeros(batch.n_rows, dtype=bool)
    for fit in _fits(batch, int(harmonics), None if period is None else float(period)):
        valid[fit.rows] = True
        block = fit.fitted()
        if len(fit.rows) == batch.n_rows:  # one bucket, every row fitted, in order
            out = block.ravel()
        else:
            if out is None:
                out = np.full(len(batch.values), np.nan)
            _scatter(out, batch, fit.rows, fit.n, block)
    if out is None:
        out = np.full(len(batch.values), np.nan)
    return _ragged_like(batch, out, valid)


def harmonic_profile(batch: Ragged, period: float, harmonics: int = 3, offset: float | np.ndarray = 0.0) -> Ragged:
    """One cycle of each series' fitted seasonal pattern: its level plus the harmonics.

    The model of :func:`harmonic_smooth` with this period is fitted (level, trend, cos/sin pairs
    at ``j / period``); the profile is the level ``a`` plus the harmonic part, without the trend,
    at ``L = floor(period + 0.5)`` equally spaced phases of one cycle::

        profile_k = a + sum_j (alpha_j cos(2 pi j k / L) + beta_j sin(2 pi j k / L)),  k = 0..L-1

    that is, the pattern ``offset + k * period / L`` samples after the row's first element (``k``
    samples when the period is whole and ``offset`` 0). Element ``i`` of the list (1-based) is phase ``i - 1``; so
    ``list_position(p, list_max(p))`` is the 1-based phase of the peak, and with hourly data
    starting at midnight the peak hour is that position minus 1.

    Parameters
    ----------
    batch : Ragged
        The series, one per row; NaN elements are missing.
    period : float
        Length of the cycle in samples (>= 2).
    harmonics : int
        Number of cos/sin pairs (>= 1); pairs with ``2 j >= period`` are dropped.
    offset : float or array
        Where phase 0 lies, in samples after the row's first element (one value, or one per row;
        any real number: the cycle repeats). A whole ``offset`` with a whole period turns the
        profile by that many elements, bit for bit; the ``*_agg`` form puts phase 0 on the
        calendar with it.

    Returns
    -------
    Ragged
        ``L`` values per valid row. Invalid (NULL) as for :func:`harmonic_smooth`, and also when
        the design is rank-deficient on the row's present elements (the pattern is then not
        determined, e.g. a period far longer than the record).

    Notes
    -----
    The mean of the profile is exactly the level ``a`` (the harmonics sum to zero over ``L``
    equally spaced phases), and ``a`` is the fitted level at the record's mid-point. For a record
    without gaps that spans a whole number of cycles, ``a`` is exactly the series' mean (the trend
    and the harmonics then sum to zero over the record and the residuals of a fit with a constant
    sum to zero), so the profile's mean equals the series' mean. With ``period = 2`` no pair lies
    below Nyquist and the profile is flat at ``a``.

    References
    ----------
    P. Bloomfield, "Fourier Analysis of Time Series: An Introduction", 2nd ed., Wiley (2000).

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(48.0)
    >>> x = 10.0 + np.cos(2 * np.pi * (t - 3) / 12)
    >>> p = harmonic_profile(Ragged.from_list([x]), period=12, harmonics=1).values
    >>> int(np.argmax(p)), round(float(p.mean()), 12)
    (3, 10.0)
    """
    period = float(period)
    length = int(np.floor(period + 0.5))
    # the offset in elements of the profile, within one cycle
    shift = np.mod(np.broadcast_to(np.asarray(offset, dtype=np.float64), (batch.n_rows,)) * (length / period), length)
    table = np.full((batch.n_rows, length), np.nan)
    valid = np.zeros(batch.n_rows, dtype=bool)
    for fit in _fits(batch, int(harmonics), period):
        coef, determined = fit.coefficients()
        rows = fit.rows[determined]
        valid[rows] = True
        table[rows] = _evaluate_cycle(coef[determined], fit.design.j, length, shift[rows])
    lengths = np.where(valid, length, 0)
    offsets = np.zeros(batch.n_rows + 1, dtype=np.int64)
    np.cumsum(lengths, out=offsets[1:])
    return Ragged(np.ascontiguousarray(table[valid]).ravel(), offsets, None if valid.all() else valid)


# --------------------------------------------------------------------------------------------
# the design of one row length
# --------------------------------------------------------------------------------------------


class _Design:
    """Regressors for rows of length ``n``: ``1, u, cos(2 pi f_j t), sin(2 pi f_j t), ...``.

    ``columns`` has one regressor per row (shape ``(P, n)``); ``bins`` are the FFT bins of the
    frequencies when they are all Fourier frequencies of ``n`` (else ``None``).
    """

    def __init__(self, n: int, period: float | None, harmonics: int) -> None:
        self.n = n
        p = float(n) if period is None else period
        j = np.arange(1, harmonics + 1, dtype=np.float64)
        self.j = j[2.0 * j < p]
        t = np.arange(n, dtype=np.float64)
        centre = 0.5 * (n - 1)
        columns = np.empty((2 + 2 * len(self.j), n))
        columns[0] = 1.0
        columns[1] = (t - centre) / max(centre, 1.0)
        angle = (2.0 * np.pi / p) * np.mod(self.j[:, None] * t, p)  # exact reduction of j t
        columns[2::2] = np.cos(angle)
        columns[3::2] = np.sin(angle)
        self.columns = columns
        self.bins: np.ndarray | None = None
        if period is None:
            self.bins = self.j.astype(np.int64)
        else:
            whole = round(n / period)
            if whole >= 1 and whole * period == n:
                self.bins = self.j.astype(np.int64) * whole

    @property
    def size(self) -> int:
        return len(self.columns)

    # ---- path 1: FFT low-pass plus the trend's orthogonal part --------------------------------

    @cached_property
    def _spectral(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
        """Kept bins, the trend's spectrum there, ``u_perp = u - P_F u`` and its squared norm."""
        keep = np.concatenate([[0], self.bins])
        u = self.columns[1]
        u_spectrum = np.fft.rfft(u[None], axis=1)
        low = np.zeros_like(u_spectrum)
        low[:, keep] = u_spectrum[:, keep]
        perp = u - np.fft.irfft(low, self.n, axis=1)[0]
        return keep, u_spectrum[0, keep], perp, float((perp * perp).sum())

    def fitted_fourier(self, xc: np.ndarray) -> np.ndarray:
        keep, _, perp, norm = self._spectral
        spectrum = np.fft.rfft(xc, axis=1)
        for a, b in zip(keep[:-1], keep[1:]):
            spectrum[:, a + 1 : b] = 0.0  # keep only the bins of F (in place: no copy) ...
        fitted = np.fft.irfft(spectrum[:, : keep[-1] + 1], self.n, axis=1)  # ... irfft pads zeros
        slope = (xc * perp).sum(axis=1) / norm
        fitted += slope[:, None] * perp
        return fitted

    def coefficients_fourier(self, xc: np.ndarray) -> np.ndarray:
        keep, u_keep, perp, norm = self._spectral
        spectrum = np.fft.rfft(xc, axis=1)[:, keep]
        slope = (xc * perp).sum(axis=1) / norm
        # coefficients of P_F x - slope * P_F u on 1, cos, sin; x_t = (1/n) sum_k X_k e^(2 pi i k t / n)
        re = spectrum.real - slope[:, None] * u_keep.real
        im = spectrum.imag - slope[:, None] * u_keep.imag
        coef = np.empty((len(xc), self.size))
        coef[:, 0] = re[:, 0] / self.n
        coef[:, 1] = slope
        coef[:, 2::2] = (2.0 / self.n) * re[:, 1:]
        coef[:, 3::2] = (-2.0 / self.n) * im[:, 1:]
        return coef

    # ---- path 2: shared orthonormal basis ------------------------------------------------------

    @property
    def full_rank(self) -> bool:
        return self._basis[2]

    @cached_property
    def _basis(self) -> tuple[np.ndarray, np.ndarray, bool]:
        """Orthonormal basis of the column space ``(r, n)``, the map from its coordinates to the
        coefficients ``(P, r)``, and whether the design has full rank."""
        u, s, vt = np.linalg.svd(self.columns.T, full_matrices=False)
        kept = s > _RCOND * s[0]
        basis = np.ascontiguousarray(u[:, kept].T)
        to_coef = np.ascontiguousarray(vt[kept].T / s[kept])
        return basis, to_coef, bool(kept.all())

    def _project(self, xc: np.ndarray) -> np.ndarray:
        basis = self._basis[0]
        proj = np.empty((len(xc), len(basis)))
        work = np.empty_like(xc)
        for k, vector in enumerate(basis):
            proj[:, k] = np.multiply(xc, vector, out=work).sum(axis=1)
        return proj

    def fitted_basis(self, xc: np.ndarray) -> np.ndarray:
        return self.fitted_from_coordinates(self._project(xc))

    def coefficients_basis(self, xc: np.ndarray) -> np.ndarray:
        return self.coefficients_from_coordinates(self._project(xc))

    # ---- path 3: rows with gaps ----------------------------------------------------------------

    def coordinates_gaps(self, xw: np.ndarray, present: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Least-squares coordinates on the shared orthonormal basis over the present elements.

        ``xw`` is centred and 0 at the gaps. The normal equations ``(Q' W Q) c = Q' W x`` of the
        orthonormal basis ``Q`` are well conditioned (``Q' W Q`` is the identity less the gaps'
        share); eigenvalues below ``_GAP_RCOND`` of the largest are dropped. Returns ``c`` and
        whether every eigenvalue was kept.
        """
        basis = self._basis[0]
        r, rows = len(basis), len(xw)
        rhs = self._project(xw)
        # a row missing at most half its elements subtracts its gaps from Q'Q; a sparser row sums
        # over its present elements (no cancellation). Sums run in element order, a row's alone.
        by_missing = 2 * np.count_nonzero(~present, axis=1) <= self.n
        row, t = np.nonzero(np.where(by_missing[:, None], ~present, present))
        picked = basis[:, t]  # (r, elements)
        gram = np.empty((rows, r, r))
        for a in range(r):
            for b in range(a, r):
                total = np.bincount(row, weights=picked[a] * picked[b], minlength=rows)
                whole = float((basis[a] * basis[b]).sum())
                gram[:, a, b] = np.where(by_missing, whole - total, total)
                gram[:, b, a] = gram[:, a, b]
        values, vectors = np.linalg.eigh(gram)
        kept = values > _GAP_RCOND * values[:, -1:]
        # every small reduction along a contiguous last axis
        proj = (np.ascontiguousarray(vectors.transpose(0, 2, 1)) * rhs[:, None, :]).sum(axis=2)
        z = np.where(kept, proj / np.where(kept, values, 1.0), 0.0)
        return (vectors * z[:, None, :]).sum(axis=2), kept.all(axis=1)

    def fitted_from_coordinates(self, coords: np.ndarray) -> np.ndarray:
        basis = self._basis[0]
        fitted = np.zeros((len(coords), self.n))
        work = np.empty_like(fitted)
        for k, vector in enumerate(basis):
            fitted += np.multiply(coords[:, k, None], vector, out=work)
        return fitted

    def coefficients_from_coordinates(self, coords: np.ndarray) -> np.ndarray:
        to_coef = self._basis[1]
        coef = np.zeros((len(coords), self.size))
        for k in range(to_coef.shape[1]):
            coef += coords[:, k, None] * to_coef[:, k]
        return coef


# --------------------------------------------------------------------------------------------
# rows of one bucket
# --------------------------------------------------------------------------------------------


class _BucketFit:
    """The fittable rows of one length bucket, split into constant, complete and gapped rows.

    ``present`` is ``None`` when no row has a gap.
    """

    def __init__(self, design: _Design, rows: np.ndarray, matrix: np.ndarray, present: np.ndarray | None) -> None:
        self.design, self.n, self.rows, self.matrix = design, design.n, rows, matrix
        if present is None:
            lo, hi = matrix.min(axis=1), matrix.max(axis=1)
            gapped = np.zeros(len(rows), dtype=bool)
        else:
            lo = np.where(present, matrix, np.inf).min(axis=1)
            hi = np.where(present, matrix, -np.inf).max(axis=1)
            gapped = ~present.all(axis=1)
        self.level = lo
        self.constant = lo == hi
        self.gaps = ~self.constant & gapped
        self.complete = ~self.constant & ~gapped
        self.present = present
        # a power of two per row: scaling by it is exact and keeps sums of squares in range
        _, exponent = np.frexp(np.maximum(np.abs(lo), np.abs(hi)))
        self.scale = np.ldexp(1.0, -np.maximum(exponent, -1020))  # subnormal rows: 2**1021 would overflow

    def _complete_centred(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if self.complete.all():
            scale, matrix = self.scale, self.matrix
        else:
            scale, matrix = self.scale[self.complete], self.matrix[self.complete]
        x = matrix * scale[:, None]
        mean = x.sum(axis=1) / self.n
        x -= mean[:, None]
        return x, mean, scale

    def _gapped_centred(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        scale = self.scale[self.gaps]
        present = self.present[self.gaps]
        x = np.where(present, self.matrix[self.gaps] * scale[:, None], 0.0)
        mean = x.sum(axis=1) / present.sum(axis=1)
        return np.where(present, x - mean[:, None], 0.0), present, mean, scale

    def fitted(self) -> np.ndarray:
        design = self.design
        if self.complete.any():
            xc, mean, scale = self._complete_centred()
            fit = design.fitted_fourier(xc) if design.bins is not None else design.fitted_basis(xc)
            fit += mean[:, None]
            fit /= scale[:, None]
            if self.complete.all():
                return fit
        out = np.empty((len(self.rows), self.n))
        out[self.constant] = self.level[self.constant, None]
        if self.complete.any():
            out[self.complete] = fit
        if self.gaps.any():
            xw, present, mean, scale = self._gapped_centred()
            fit = design.fitted_from_coordinates(design.coordinates_gaps(xw, present)[0])
            fit += mean[:, None]
            fit /= scale[:, None]
            out[self.gaps] = fit
        return out

    def coefficients(self) -> tuple[np.ndarray, np.ndarray]:
        """Coefficients in the original units and whether the row's design has full rank."""
        design = self.design
        coef = np.zeros((len(self.rows), design.size))
        determined = np.ones(len(self.rows), dtype=bool)
        coef[self.constant, 0] = self.level[self.constant]
        if self.complete.any():
            xc, mean, scale = self._complete_centred()
            if design.bins is not None:
                part = design.coefficients_fourier(xc)
            else:
                part = design.coefficients_basis(xc)
                determined[self.complete] = design.full_rank
            part[:, 0] += mean
            coef[self.complete] = part / scale[:, None]
        if self.gaps.any():
            xw, present, mean, scale = self._gapped_centred()
            coords, full_rank = design.coordinates_gaps(xw, present)
            part = design.coefficients_from_coordinates(coords)
            part[:, 0] += mean
            coef[self.gaps] = part / scale[:, None]
            determined[self.gaps] = full_rank & design.full_rank
        return coef, determined


def _fits(batch: Ragged, harmonics: int, period: float | None) -> Iterator[_BucketFit]:
    """The fittable rows of each length bucket: valid, finite, with ``2 + 2 * harmonics`` present."""
    need = 2 + 2 * harmonics
    row_valid = batch.row_valid
    for n, rows, matrix in batch.by_length():
        if n < need:
            continue
        ok = row_valid[rows]
        # a finite row sum means no NaN and no inf; only other rows need a closer look
        clean = np.isfinite(matrix.sum(axis=1))
        present = None
        if not clean.all():
            present = ~np.isnan(matrix)
            ok &= (present.sum(axis=1) >= need) & ~np.isinf(matrix).any(axis=1)
        if not ok.any():
            continue
        if not ok.all():
            rows, matrix = rows[ok], matrix[ok]
            present = None if present is None else present[ok]
        yield _BucketFit(_Design(n, period, harmonics), rows, matrix, present)


def _evaluate_cycle(coef: np.ndarray, j: np.ndarray, length: int, shift: np.ndarray) -> np.ndarray:
    """``a + sum_j alpha_j cos(2 pi j (k + s) / L) + beta_j sin(2 pi j (k + s) / L)`` for ``k = 0..L-1``, with
    each row's shift ``s`` in elements."""
    k = np.arange(length, dtype=np.float64) + shift[:, None]
    out = np.repeat(coef[:, :1], length, axis=1)
    for i, harmonic in enumerate(j):
        angle = (2.0 * np.pi / length) * np.mod(harmonic * k, length)
        out += coef[:, 2 + 2 * i, None] * np.cos(angle)
        out += coef[:, 3 + 2 * i, None] * np.sin(angle)
    return out


def _scatter(out: np.ndarray, batch: Ragged, rows: np.ndarray, n: int, block: np.ndarray) -> None:
    """Write equal-length rows back into a flat array aligned with ``batch.values``."""
    out[batch.offsets[rows][:, None] + np.arange(n)] = block


def _ragged_like(batch: Ragged, values: np.ndarray, valid: np.ndarray) -> Ragged:
    """A result with the input's row lengths; invalid rows become NULL rows of length 0."""
    if valid.all():
        return Ragged(values, batch.offsets.copy(), None)
    keep = np.repeat(valid, batch.lengths)
    offsets = np.zeros(batch.n_rows + 1, dtype=np.int64)
    np.cumsum(np.where(valid, batch.lengths, 0), out=offsets[1:])
    return Ragged(values[keep], offsets, valid)
