"""Regular time grids: put each series' observations on evenly spaced points.

Warehouse series skip periods that had no row (a month without sales, an hour
without calls). A method run on ``list(v ORDER BY t)`` then squeezes time, and
every period, lag and change point it reports is shifted. :func:`on_grid` puts
the observations back on the regular grid from the first to the last time, so
a missing period is a missing value again.

Times arrive as plain float64 "ticks": microseconds since 1970-01-01 for dates
and timestamps (``temporal=True``), or the numbers themselves. A step is either
a whole number of calendar months (temporal times only) or a fixed length in
ticks; when none is given, each series' most common spacing is used, and
spacings of 28-31, 59-62, 89-92, 181-184 and 365-366 days count as 1, 2, 3, 6
and 12 months.

Observations are binned to the grid point at or before them,
``floor((t - t0) / step)`` (calendar steps count months); several observations
at one grid point are averaged. Grid points without a number are then filled:
``'null'`` leaves them missing (NaN), ``'zero'`` puts 0 (counts: an hour with no
row had no calls), ``'linear'`` interpolates between the neighbouring numbers
and ``'previous'`` carries the last number forward. Leading missing points stay
missing under ``'linear'`` and ``'previous'``, trailing ones under ``'linear'``.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from tsql.kernels.ragged import Ragged

__all__ = ["FILLS", "MAX_GRID_POINTS", "Grid", "on_grid"]

FILLS = ("null", "zero", "linear", "previous")
MAX_GRID_POINTS = 10_000_000
"""Per series. A step far finer than the data would make a grid of this many points: an error."""

_DAY_US = 86_400_000_000.0
# (shortest, longest spacing in days, months) recognised as calendar steps
_CALENDAR = ((28, 31, 1), (59, 62, 2), (89, 92, 3), (181, 184, 6), (365, 366, 12))
_EPS = 1e-6  # positions within this of a grid point count as on it (decimal steps such as 0.1)


@dataclass(frozen=True, eq=False)
class Grid:
    """A batch of series on their grids.

    ``values`` holds the gridded series; per row, ``start`` is the first time
    (tick), ``months`` the calendar step (0 when fixed) and ``length`` the fixed
    step in ticks (0 when calendar). ``observed`` is, for each grid point, the
    0-based index (within its row, in time order) of the first observation at
    or after it, and ``observation_offsets`` bound each row's observations.
    """

    values: Ragged
    start: np.ndarray
    months: np.ndarray
    length: np.ndarray
    observed: np.ndarray
    observation_offsets: np.ndarray

    @cached_property
    def ticks(self) -> np.ndarray:
        """The time of every grid point, flat, in ticks."""
        v = self.values
        k = v.positions.astype(np.float64)
        rows = v.row_ids
        start, months, length = self.start[rows], self.months[rows], self.length[rows]
        out = start + k * length
        calendar = months > 0
        if calendar.any():
            out[calendar] = add_months(start[calendar], (k[calendar] * months[calendar]).astype(np.int64))
        return out

    def steps(self, months: float, ticks: float) -> np.ndarray:
        """A span (whole months plus a length in ticks) in grid steps, per row.

        NaN where the span cannot be measured in a row's step: months on a fixed
        grid, or a fixed length on a calendar grid (a month has no fixed length).
        """
        if months and ticks:
            return np.full(len(self.start), np.nan)
        calendar = self.months > 0
        out = np.full(len(self.start), np.nan)
        if months:
            out[calendar] = months / self.months[calendar]
        else:
            fixed = self.length > 0
            out[fixed] = ticks / self.length[fixed]
        return out

    def span(self, steps: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per-row step counts as (whole months, ticks): months on calendar grids
        (rounded: a fraction of a month has no fixed length), ticks otherwise."""
        calendar = self.months > 0
        months = np.where(calendar, np.round(steps * self.months), np.nan)
        ticks = np.where(calendar, np.nan, steps * self.length)
        return months, ticks


def on_grid(
    times: Ragged,
    values: Ragged,
    temporal: bool,
    step_months: int = 0,
    step_length: float = 0.0,
    fill: str = "null",
) -> Grid:
    """Place each series on the regular grid from its first to its last time.

    Parameters
    ----------
    times, values : Ragged
        One row per series, of equal lengths; NaN times drop their observation,
        NaN values are missing.
    temporal : bool
        Times are microseconds since the epoch (calendar months make sense).
    step_months, step_length : int, float
        The step: whole calendar months, or a fixed length in ticks. Both 0:
        infer each row's step from its most common spacing.
    fill : {'null', 'zero', 'linear', 'previous'}
        What grid points without a number get.

    Returns
    -------
    Grid
        A row with no time at all is an empty grid (a NULL row stays invalid).
    """
    if fill not in FILLS:
        raise ValueError(f"fill must be one of {FILLS}, got {fill!r}")
    if not np.array_equal(times.lengths, values.lengths):
        raise ValueError("times and values must have the same length in every row")
    t, v, rows, obs_offsets = _sorted_observations(times, values)
    n_rows = times.n_rows
    first = obs_offsets[:-1]
    has_obs = np.diff(obs_offsets) > 0
    start = np.full(n_rows, np.nan)
    start[has_obs] = t[first[has_obs]]

    months = np.zeros(n_rows, dtype=np.int64)
    length = np.zeros(n_rows)
    if step_months:
        if not temporal:
            raise ValueError("a step in months needs DATE or TIMESTAMP times")
        months[:] = step_months
    elif step_length:
        length[:] = step_length
    else:
        months, length = _inferred_steps(t, rows, obs_offsets, temporal)

    bins = np.zeros(len(t), dtype=np.int64)
    if len(t):
        t0 = start[rows]
        calendar = months[rows] > 0
        fixed = ~calendar & (length[rows] > 0)
        span = _month_index(t[calendar]) - _month_index(t0[calendar])
        bins[calendar] = span // months[rows][calendar]
        bins[fixed] = np.floor((t[fixed] - t0[fixed]) / length[rows][fixed] + _EPS).astype(np.int64)
    n_grid = np.zeros(n_rows, dtype=np.int64)
    last = obs_offsets[1:] - 1
    n_grid[has_obs] = bins[last[has_obs]] + 1
    if n_grid.max(initial=0) > MAX_GRID_POINTS:
        worst = int(n_grid.max())
        raise ValueError(f"the step makes a grid of {worst:,} points for one series (at most {MAX_GRID_POINTS:,})")
    grid_offsets = np.zeros(n_rows + 1, dtype=np.int64)
    np.cumsum(n_grid, out=grid_offsets[1:])
    where = grid_offsets[rows] + bins

    present = ~np.isnan(v)
    total = int(grid_offsets[-1])
    sums = np.bincount(where[present], weights=v[present], minlength=total)
    counts = np.bincount(where[present], minlength=total)
    gridded = np.divide(sums, counts, out=np.full(total, np.nan), where=counts > 0)
    gridded = _filled(gridded, grid_offsets, fill)

    # the first observation at or after each grid point (bins are sorted within rows)
    observed = np.searchsorted(where, np.arange(total), side="left") - np.repeat(first, n_grid)
    return Grid(
        values=Ragged(gridded, grid_offsets, times.valid),
        start=start,
        months=months,
        length=length,
        observed=observed,
        observation_offsets=obs_offsets,
    )


def add_months(ticks: np.ndarray, months: np.ndarray) -> np.ndarray:
    """``ticks + months`` in calendar terms; a day past the new month's end becomes its last day."""
    us = ticks.astype(np.int64).astype("datetime64[us]")
    month_start = us.astype("datetime64[M]")
    into_month = us - month_start.astype("datetime64[us]")
    day = into_month // np.timedelta64(1, "D")
    time_of_day = into_month - day * np.timedelta64(1, "D")
    target = month_start + months.astype("timedelta64[M]")
    month_days = ((target + 1).astype("datetime64[D]") - target.astype("datetime64[D]")).astype(np.int64)
    day = np.minimum(day, month_days - 1)
    out = target.astype("datetime64[us]") + day * np.timedelta64(1, "D") + time_of_day
    return out.astype(np.int64).astype(np.float64)


def _month_index(ticks: np.ndarray) -> np.ndarray:
    return ticks.astype(np.int64).astype("datetime64[us]").astype("datetime64[M]").astype(np.int64)


def _sorted_observations(times: Ragged, values: Ragged) -> tuple[np.ndarray, ...]:
    """Observations with a time, sorted by (row, time, value); NaN values sort last among equal times."""
    keep = ~np.isnan(times.values)
    rows = times.row_ids[keep]
    t, v = times.values[keep], values.values[keep]
    same_row = rows[1:] == rows[:-1]
    if np.any(same_row & (t[1:] <= t[:-1])):
        order = np.lexsort((v, t, rows))
        rows, t, v = rows[order], t[order], v[order]
    counts = np.bincount(rows, minlength=times.n_rows)
    offsets = np.zeros(times.n_rows + 1, dtype=np.int64)
    np.cumsum(counts, out=offsets[1:])
    return t, v, rows, offsets


def _inferred_steps(
    t: np.ndarray, rows: np.ndarray, offsets: np.ndarray, temporal: bool
) -> tuple[np.ndarray, np.ndarray]:
    """Each row's most common spacing between distinct times (the smallest among equally common ones)."""
    n_rows = len(offsets) - 1
    months = np.zeros(n_rows, dtype=np.int64)
    length = np.zeros(n_rows)
    if len(t) < 2:
        return months, length
    gap = np.diff(t)
    gap_row = rows[1:]
    usable = (rows[1:] == rows[:-1]) & (gap > 0)
    gap, gap_row = gap[usable], gap_row[usable]
    gap_months = np.zeros(len(gap), dtype=np.int64)
    if temporal:
        days = gap / _DAY_US
        for low, high, m in _CALENDAR:
            gap_months[(days >= low) & (days <= high + 1 - 1e-9)] = m
        key = np.where(gap_months > 0, gap_months - 100.0, gap)  # calendar keys first, fewest months first
    else:
        scale = np.abs(t).max() or 1.0
        key = np.rint(gap * (1e9 / scale))  # spacings equal to about 9 digits are one spacing
    if len(key) == 0:
        return months, length
    order = np.lexsort((gap, key, gap_row))
    key, gap, gap_row, gap_months = key[order], gap[order], gap_row[order], gap_months[order]
    run_start = np.flatnonzero(np.r_[True, (key[1:] != key[:-1]) | (gap_row[1:] != gap_row[:-1])])
    run_count = np.diff(np.r_[run_start, len(key)])
    run_row = gap_row[run_start]
    # per row, the longest run; among equally long runs the first (calendar, then the shortest spacing)
    best = np.lexsort((np.arange(len(run_start)), -run_count, run_row))
    first_of_row = best[np.r_[True, run_row[best][1:] != run_row[best][:-1]]]
    chosen = run_start[first_of_row]
    winners = run_row[first_of_row]
    months[winners] = gap_months[chosen]
    length[winners] = np.where(gap_months[chosen] > 0, 0.0, gap[chosen])
    return months, length


def _filled(x: np.ndarray, offsets: np.ndarray, fill: str) -> np.ndarray:
    if fill == "null" or len(x) == 0:
        return x
    missing = np.isnan(x)
    if not missing.any():
        return x
    if fill == "zero":
        return np.where(missing, 0.0, x)
    index = np.arange(len(x))
    row_start = np.repeat(offsets[:-1], np.diff(offsets))
    row_end = np.repeat(offsets[1:], np.diff(offsets))
    before = np.maximum.accumulate(np.where(missing, -1, index))
    before_ok = before >= row_start
    out = x.copy()
    if fill == "previous":
        take = missing & before_ok
        out[take] = x[before[take]]
        return out
    after = np.minimum.accumulate(np.where(missing, len(x), index)[::-1])[::-1]
    after_ok = after < row_end
    take = missing & before_ok & after_ok
    lo, hi = before[take], after[take]
    share = (index[take] - lo) / (hi - lo)
    out[take] = x[lo] + share * (x[hi] - x[lo])
    return out
