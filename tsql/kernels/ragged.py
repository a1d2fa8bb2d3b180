"""A batch of series of different lengths, as one flat array and offsets.

This is the only data type the kernels share. It holds no Arrow or DuckDB
object, so any engine that can hand over flat values and offsets can use the
kernels.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from functools import cached_property

import numpy as np


@dataclass(frozen=True, eq=False)
class Ragged:
    """Series ``i`` is ``values[offsets[i]:offsets[i + 1]]``.

    ``values`` is float64 with NaN for a missing element; ``offsets`` is int64,
    starts at 0 and ends at ``len(values)``. ``valid`` marks rows that exist
    (False for a NULL list); ``None`` means every row is valid. An invalid row
    always has length 0.
    """

    values: np.ndarray
    offsets: np.ndarray
    valid: np.ndarray | None = None

    def __post_init__(self) -> None:
        # The compiled kernels see one type per argument whatever made the batch (Arrow's buffers
        # are read-only, numpy's results writable; numba compiles once per mix): read-only views.
        object.__setattr__(self, "values", frozen(self.values))
        object.__setattr__(self, "offsets", frozen(self.offsets, np.int64))
        if self.valid is not None:
            object.__setattr__(self, "valid", frozen(self.valid, np.bool_))

    @classmethod
    def from_list(cls, series: list, valid: np.ndarray | None = None) -> Ragged:
        """Build a batch from a list of 1-D sequences (None = NULL row)."""
        rows = [np.asarray([] if s is None else s, dtype=np.float64).ravel() for s in series]
        lengths = np.array([len(r) for r in rows], dtype=np.int64)
        offsets = np.zeros(len(rows) + 1, dtype=np.int64)
        np.cumsum(lengths, out=offsets[1:])
        values = np.concatenate(rows) if rows else np.empty(0)
        if valid is None and any(s is None for s in series):
            valid = np.array([s is not None for s in series])
        return cls(values, offsets, valid)

    @property
    def n_rows(self) -> int:
        return len(self.offsets) - 1

    @cached_property
    def lengths(self) -> np.ndarray:
        return np.diff(self.offsets)

    @cached_property
    def row_ids(self) -> np.ndarray:
        """The row each flat element belongs to."""
        return np.repeat(np.arange(self.n_rows, dtype=np.int64), self.lengths)

    @cached_property
    def positions(self) -> np.ndarray:
        """0-based position of each flat element inside its own series."""
        return np.arange(len(self.values), dtype=np.int64) - np.repeat(self.offsets[:-1], self.lengths)

    @cached_property
    def present(self) -> np.ndarray:
        """True where an element is a number (not NULL, not NaN)."""
        return ~np.isnan(self.values)

    @cached_property
    def has_missing(self) -> bool:
        return not bool(self.present.all())

    @cached_property
    def row_valid(self) -> np.ndarray:
        return frozen(np.ones(self.n_rows, dtype=bool)) if self.valid is None else self.valid

    def row(self, i: int) -> np.ndarray:
        return self.values[self.offsets[i] : self.offsets[i + 1]]

    def take(self, rows: np.ndarray) -> Ragged:
        """The batch of the given rows, in that order."""
        lengths = self.lengths[rows]
        offsets = np.zeros(len(rows) + 1, dtype=np.int64)
        np.cumsum(lengths, out=offsets[1:])
        flat = np.repeat(self.offsets[rows] - offsets[:-1], lengths) + np.arange(offsets[-1])
        valid = None if self.valid is None else self.valid[rows]
        return Ragged(self.values[flat], offsets, valid)

    def segment_sum(self, x: np.ndarray) -> np.ndarray:
        """Sum of a flat per-element array over each row.

        The summation order differs from a bucket matrix's ``sum(axis=1)``: use it for exact
        quantities (counts), not for sums a row's answer must reproduce bit for bit.
        """
        return np.bincount(self.row_ids, weights=x, minlength=self.n_rows)

    def by_length(self) -> Iterator[tuple[int, np.ndarray, np.ndarray]]:
        """Rows grouped by length: ``(length, row indices, 2-D view or copy)``.

        The matrix has one row per series of that length, so a 2-D FFT or a
        batched solve can treat them together.
        """
        lengths = self.lengths
        order = np.argsort(lengths, kind="stable")
        sorted_lengths = lengths[order]
        bounds = np.flatnonzero(np.diff(sorted_lengths)) + 1
        for group in np.split(order, bounds):
            if len(group) == 0:
                continue
            n = int(lengths[group[0]])
            starts = self.offsets[group]
            if n == 0:
                matrix = np.empty((len(group), 0))
            elif len(group) == self.n_rows:
                matrix = self.values.reshape(len(group), n)
            else:
                matrix = self.values[starts[:, None] + np.arange(n)]
            yield n, group, matrix


def frozen(a: np.ndarray, dtype: type | None = None) -> np.ndarray:
    """``a`` as a read-only, C-contiguous array (of ``dtype`` when given): a view when it already is one.

    Arguments of compiled kernels go through this (the batch's arrays do by themselves), so that a
    kernel compiles once rather than once per mix of read-only and writable arrays.
    """
    out = np.ascontiguousarray(a, dtype=dtype)
    if out.flags.writeable:
        out = out.view()
        out.flags.writeable = False
    return out


#: Elements worked on at once by the numpy kernels and the agg forms' grid: their temporaries then
#: stay in the processor's cache instead of costing fresh memory pages (DuckDB hands over 2,048 rows).
CACHE_ELEMENTS = 1 << 16


def row_ranges(counts: np.ndarray, elements: int = CACHE_ELEMENTS) -> list[tuple[int, int]]:
    """Runs of consecutive rows of about ``elements`` elements each, from the rows' cumulative element
    counts (``counts[0] == 0``, one more entry than rows); a row is never split.

    A row's answer depends on its own elements only, so working run by run changes no answer.
    """
    n_rows = len(counts) - 1
    if n_rows < 2 or counts[-1] <= elements:
        return [(0, max(n_rows, 0))]
    window = counts[:-1] // elements  # rows starting in one window go together
    bounds = np.r_[0, np.flatnonzero(np.diff(window)) + 1, n_rows]
    return list(zip(bounds[:-1].tolist(), bounds[1:].tolist()))


def in_safe_range(matrix: np.ndarray) -> np.ndarray:
    """The rows of ``matrix``, each row whose magnitude would overflow or underflow a sum of squares
    (beyond about 1e120 or below 1e-120) multiplied by a power of two that brings it near 1.

    Multiplying by a power of two is exact, so scale-free answers (a correlation, a period) are the
    same as at ordinary magnitudes, and rows in range are not touched.
    """
    if matrix.size == 0:
        return matrix
    # max |x| as the larger of max x and -min x (no table of |x|); fmax skips NaN; an infinity needs a second look
    magnitude = np.fmax(np.fmax.reduce(matrix, axis=1), -np.fmin.reduce(matrix, axis=1))
    infinite = np.isinf(magnitude)
    if infinite.any():
        rows = matrix[infinite]
        magnitude[infinite] = np.where(np.isfinite(rows), np.abs(rows), 0.0).max(axis=1)
    _, exponent = np.frexp(magnitude)
    out_of_range = (magnitude > 0) & ((exponent > 400) | (exponent < -400))
    if not out_of_range.any():
        return matrix
    scaled = np.array(matrix, dtype=np.float64)
    scaled[out_of_range] *= np.ldexp(1.0, -np.clip(exponent[out_of_range], -1020, 1020))[:, None]
    return scaled


def rows_in_safe_range(batch: Ragged) -> Ragged:
    """``batch`` with each row whose magnitude would overflow or underflow a sum of squares multiplied by a
    power of two that brings it near 1, as :func:`in_safe_range` does for the rows of a matrix."""
    lengths = batch.lengths
    if not (lengths > 0).any():
        return batch
    magnitude = magnitudes(batch)
    _, exponent = np.frexp(magnitude)
    out_of_range = (magnitude > 0) & ((exponent > 400) | (exponent < -400))
    if not out_of_range.any():
        return batch
    factor = np.where(out_of_range, np.ldexp(1.0, -np.clip(exponent, -1020, 1020)), 1.0)
    return Ragged(batch.values * np.repeat(factor, lengths), batch.offsets, batch.valid)


def magnitudes(batch: Ragged) -> np.ndarray:
    """The largest finite ``|value|`` of each row (0: none)."""
    magnitude = np.zeros(batch.n_rows)
    filled = batch.lengths > 0
    if filled.any():
        # fmax skips NaN; an infinity needs a second look
        magnitude[filled] = np.fmax.reduceat(np.abs(batch.values), batch.offsets[:-1][filled])
        infinite = np.flatnonzero(np.isinf(magnitude))
        for r in infinite:
            row = batch.row(r)
            magnitude[r] = np.abs(row[np.isfinite(row)]).max(initial=0.0)
    return np.where(np.isnan(magnitude), 0.0, magnitude)


def full(n_rows: int, fill: float = np.nan) -> np.ndarray:
    """A per-row float result, NaN (no answer) unless filled."""
    return np.full(n_rows, fill, dtype=np.float64)


@dataclass(frozen=True, eq=False)
class RaggedRecords:
    """A list of records per row, e.g. a warping path or a segment table.

    Row ``i`` holds records ``offsets[i]:offsets[i + 1]`` of every array in
    ``fields`` (flat, all the same length). ``valid`` as for :class:`Ragged`.
    """

    fields: dict[str, np.ndarray]
    offsets: np.ndarray
    valid: np.ndarray | None = None

    @property
    def n_rows(self) -> int:
        return len(self.offsets) - 1

    @cached_property
    def row_valid(self) -> np.ndarray:
        return np.ones(self.n_rows, dtype=bool) if self.valid is None else self.valid

    def row(self, i: int) -> dict[str, np.ndarray]:
        lo, hi = self.offsets[i], self.offsets[i + 1]
        return {name: values[lo:hi] for name, values in self.fields.items()}
