"""A quick look at each series: a one-line sparkline of block characters.

References
----------
E. R. Tufte, "Beautiful Evidence", Graphics Press (2006), chapter "Sparklines: intense,
simple, word-sized graphics".
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
from numba import njit

from tsql.kernels.ragged import Ragged, row_ranges

__all__ = ["sparkline", "BLOCKS"]

#: The eight levels, lowest first.
BLOCKS = "▁▂▃▄▅▆▇█"
_MIDDLE = 3  # ▄: every element of a constant row
_SPACE = len(BLOCKS)
_CODES = np.array([ord(c) for c in BLOCKS + " "], dtype="<u4")


def sparkline(batch: Ragged, width: int | None = None) -> list[str | None]:
    """One line of block characters per series, scaled between its smallest and largest value.

    Parameters
    ----------
    batch : Ragged
        The series, one per row; NaN elements are missing.
    width : int or None
        Number of characters (>= 1). ``None`` draws one character per element. Otherwise the
        positions ``0..n-1`` are cut into ``width`` equal bins (element ``i`` falls in bin
        ``floor(i * width / n)``) and each bin shows the mean of its present values; a bin with
        none is a space. With ``width > n`` the series is stretched instead: bin ``k`` shows
        element ``floor(k * n / width)``.

    Returns
    -------
    list of str or None
        One string per row: ``None`` for a NULL row, ``''`` for an empty one. Each shown value
        ``v`` gets level ``floor(8 (v - lo) / (hi - lo))`` (the largest value the top level),
        where ``lo`` and ``hi`` are the row's smallest and largest finite shown values, and the
        level picks a character of ``BLOCKS`` (``▁`` lowest, ``█`` highest). Missing values are
        spaces; a row whose finite values are all equal draws them all as ``▄``; ``+inf`` draws
        ``█`` and ``-inf`` ``▁`` (a bin averaging both is a space).

    References
    ----------
    E. R. Tufte, "Beautiful Evidence", Graphics Press (2006).

    Examples
    --------
    >>> sparkline(Ragged.from_list([[1, 2, 3, 4, 5, 6, 7, 8], [0, 10, float("nan"), 5], None]))
    ['▁▂▃▄▅▆▇█', '▁█ ▅', None]
    >>> sparkline(Ragged.from_list([[1, 2, 3, 4, 5, 6]]), width=3)
    ['▁▅█']
    """
    lines: list[str | None] = []
    for block in _row_blocks(batch):
        shown = block if width is None else _resample(block, int(width))
        codes = _CODES[_levels(shown)]
        offsets = shown.offsets
        valid = block.row_valid
        lines += [
            codes[offsets[i] : offsets[i + 1]].tobytes().decode("utf-32-le") if valid[i] else None
            for i in range(block.n_rows)
        ]
    return lines


def _row_blocks(batch: Ragged) -> Iterator[Ragged]:
    """Runs of consecutive rows of about CACHE_ELEMENTS elements (views, no copy): the work arrays of
    a call stay small whatever its size. Rows are drawn independently."""
    offsets = batch.offsets
    for lo, hi in row_ranges(offsets - offsets[0]):
        valid = None if batch.valid is None else batch.valid[lo:hi]
        yield Ragged(batch.values[offsets[lo] : offsets[hi]], offsets[lo : hi + 1] - offsets[lo], valid)


def _resample(batch: Ragged, width: int) -> Ragged:
    """Means of the present values in ``width`` equal bins of each non-empty row (NaN: none)."""
    lengths = batch.lengths
    nonempty = lengths > 0
    offsets = np.zeros(batch.n_rows + 1, dtype=np.int64)
    np.cumsum(np.where(nonempty, width, 0), out=offsets[1:])
    if not nonempty.any():
        return Ragged(np.empty(0), offsets)
    present = batch.present
    bins = (batch.positions * width) // lengths[batch.row_ids] + offsets[batch.row_ids]
    # element order within each bin: a row's sums never depend on the other rows
    sums = np.bincount(bins, weights=np.where(present, batch.values, 0.0), minlength=offsets[-1])
    counts = np.bincount(bins, weights=present.astype(np.float64), minlength=offsets[-1])
    with np.errstate(invalid="ignore", divide="ignore"):
        means = np.where(counts > 0, sums / counts, np.nan)
    short = np.flatnonzero(nonempty & (lengths < width))
    if len(short):  # fewer elements than characters: stretch, each bin shows its nearest element
        k = np.arange(width)
        source = batch.offsets[short][:, None] + (k * lengths[short][:, None]) // width
        means[(offsets[short][:, None] + k).ravel()] = batch.values[source.ravel()]
    return Ragged(means, offsets)


def _levels(shown: Ragged) -> np.ndarray:
    """Index into ``BLOCKS`` per element (``_SPACE`` for a missing one)."""
    return _row_levels(shown.values, shown.offsets)


@njit(cache=True, nogil=True, error_model="numpy")
def _row_levels(values: np.ndarray, offsets: np.ndarray) -> np.ndarray:
    level = np.empty(len(values), dtype=np.int64)
    top = len(BLOCKS) - 1
    for r in range(len(offsets) - 1):
        a, b = offsets[r], offsets[r + 1]
        lo, hi = np.inf, -np.inf
        for i in range(a, b):
            v = values[i]
            if np.isfinite(v):
                lo = min(lo, v)
                hi = max(hi, v)
        span = hi - lo
        # a range beyond the largest double is halved first (exact)
        wide = np.isinf(span)
        half_span = 0.5 * hi - 0.5 * lo
        for i in range(a, b):
            v = values[i]
            if np.isnan(v):
                level[i] = _SPACE
            elif v == np.inf:
                level[i] = top
            elif v == -np.inf:
                level[i] = 0
            elif span > 0.0:
                fraction = (0.5 * v - 0.5 * lo) / half_span if wide else (v - lo) / span
                level[i] = min(max(int(np.floor(8.0 * fraction)), 0), top)
            else:
                level[i] = _MIDDLE
    return level
