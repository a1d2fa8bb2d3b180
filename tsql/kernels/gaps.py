"""Gaps inside a series: the span from its first to its last present value, with the missing
elements inside it filled by linear interpolation, for methods that need every value (STL, unit-root
tests)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tsql.kernels.ragged import Ragged

__all__ = ["Spans", "fill_inside"]


@dataclass(frozen=True, eq=False)
class Spans:
    """Each row's span ``values[first[i] : last[i] + 1]`` (flat indices; ``last < first`` when the row
    has no present value), ``values`` filled inside the spans, and per row: the present count, the
    longest run of missing elements inside the span, and whether it holds an infinite value."""

    values: np.ndarray
    first: np.ndarray
    last: np.ndarray
    present: np.ndarray
    longest_gap: np.ndarray
    infinite: np.ndarray

    @property
    def length(self) -> np.ndarray:
        return np.maximum(self.last - self.first + 1, 0)

    def missing_share(self) -> np.ndarray:
        """Share of the span that was filled (1 for a row without a present value)."""
        length = self.length
        return np.where(length > 0, (length - self.present) / np.maximum(length, 1), 1.0)

    def batch(self, rows: np.ndarray) -> Ragged:
        """The filled spans of ``rows`` as a batch."""
        lengths = self.length[rows]
        offsets = np.zeros(len(rows) + 1, dtype=np.int64)
        np.cumsum(lengths, out=offsets[1:])
        if offsets[-1] == len(self.values) and (self.first[rows] == offsets[:-1]).all():
            return Ragged(self.values, offsets)  # the spans are the whole flat array, in order
        flat = np.repeat(self.first[rows] - offsets[:-1], lengths) + np.arange(offsets[-1])
        return Ragged(self.values[flat], offsets)


def fill_inside(batch: Ragged) -> Spans:
    """Spans of the rows and their interior gaps filled linearly between the neighbouring present
    values (invalid rows and rows without a present value have empty spans)."""
    values = batch.values
    total = len(values)
    n_rows = batch.n_rows
    starts, ends = batch.offsets[:-1], batch.offsets[1:]
    zero = np.zeros(n_rows, dtype=np.int64)
    if total == 0:
        return Spans(values, starts.copy(), starts - 1, zero, zero, np.zeros(n_rows, dtype=bool))
    infinite = np.zeros(n_rows, dtype=bool)
    if not np.isfinite(values).all():
        infinite[batch.row_ids[np.isinf(values)]] = True
    if not batch.has_missing:  # every row is its own span
        has = batch.row_valid & (ends > starts)
        first, last = starts.copy(), np.where(has, ends - 1, starts - 1)
        return Spans(values, first, last, np.where(has, ends - starts, 0), zero, infinite)
    present = batch.present
    index = np.arange(total, dtype=np.int64)
    previous = np.maximum.accumulate(np.where(present, index, -1))  # last present at or before
    following = np.minimum.accumulate(np.where(present, index, total)[::-1])[::-1]  # first at or after
    has = batch.row_valid & (ends > starts)
    first = np.where(has, following[np.minimum(starts, total - 1)], starts)
    last = np.where(has, previous[np.maximum(ends - 1, 0)], starts - 1)
    empty = first >= ends
    first, last = np.where(empty, starts, first), np.where(empty, starts - 1, last)
    count = np.bincount(batch.row_ids[present], minlength=n_rows).astype(np.int64)
    longest = zero.copy()
    row_start = np.repeat(starts, batch.lengths)
    row_end = np.repeat(ends, batch.lengths)
    where = np.flatnonzero(~present & (previous >= row_start) & (following < row_end))
    lo, hi = previous[where], following[where]
    np.maximum.at(longest, batch.row_ids[where], hi - lo - 1)
    filled = values.copy()
    with np.errstate(invalid="ignore"):
        filled[where] = values[lo] + (where - lo) / (hi - lo) * (values[hi] - values[lo])
    return Spans(filled, first, last, count, longest, infinite)
