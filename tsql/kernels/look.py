"""A quick look at each series: a one-line sparkline of block characters.

References
----------
E. R. Tufte, "Beautiful Evidence", Graphics Press (2006), chapter "Sparklines: intense,
simple, word-sized graphics".
"""

from __future__ import annotations

import numpy as np

from tsql.kernels.ragged import Ragged

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
    shown = batch if width is None else _resample(batch, int(width))
    codes = _CODES[_levels(shown)]
    offsets = shown.offsets
    valid = batch.row_valid
    return [
        codes[offsets[i] : offsets[i + 1]].tobytes().decode("utf-32-le") if valid[i] else None
        for i in range(batch.n_rows)
    ]


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
    values = shown.values
    level = np.full(len(values), _SPACE, dtype=np.int64)
    rows = np.flatnonzero(shown.lengths > 0)
    if len(rows) == 0:
        return level
    finite = np.isfinite(values)
    # min and max are exact in any order; empty rows are skipped so every segment is non-empty
    starts = shown.offsets[rows]
    lo = np.full(shown.n_rows, np.inf)
    hi = np.full(shown.n_rows, -np.inf)
    lo[rows] = np.minimum.reduceat(np.where(finite, values, np.inf), starts)
    hi[rows] = np.maximum.reduceat(np.where(finite, values, -np.inf), starts)
    lo, hi = lo[shown.row_ids], hi[shown.row_ids]
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        span = hi - lo
        fraction = (values - lo) / span
        wide = finite & np.isinf(span)  # a range beyond the largest double: halve first (exact)
        fraction[wide] = (0.5 * values[wide] - 0.5 * lo[wide]) / (0.5 * hi[wide] - 0.5 * lo[wide])
        scaled = np.clip(np.floor(8.0 * np.where(finite & (span > 0), fraction, 0.0)), 0, 7)
    level[finite] = np.where(span[finite] > 0, scaled[finite], _MIDDLE).astype(np.int64)
    level[values == np.inf] = len(BLOCKS) - 1
    level[values == -np.inf] = 0
    return level
