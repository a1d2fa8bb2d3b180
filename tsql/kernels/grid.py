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
at one grid point are combined as ``same_time`` says (see :data:`SAME_TIMES`).
Grid points without a number are then filled:
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

__all__ = [
    "DAY_US",
    "FILLS",
    "MAX_GRID_POINTS",
    "SAME_TIMES",
    "Grid",
    "RepeatedTime",
    "add_months",
    "month_index",
    "on_grid",
]

FILLS = ("null", "zero", "linear", "previous")
SAME_TIMES = ("mean", "sum", "first", "last", "error")
"""How several observations at one grid point combine (NULL values left out; none present: missing):
their mean (a level measured twice), their sum (counts: two rows of one hour's calls), the first or the
last in time order, where observations at the very same time are ordered by value (so 'first' takes the
smallest, 'last' the largest, whatever order the rows came in), or an error (:class:`RepeatedTime`)."""


class RepeatedTime(ValueError):
    """Two observations on one grid point under ``same_time='error'``: ``ticks`` holds their times."""

    def __init__(self, ticks: tuple[float, float]):
        super().__init__(f"two observations on one grid point, at {ticks[0]!r} and {ticks[1]!r}")
        self.ticks = ticks


MAX_GRID_POINTS = 10_000_000
"""Per series. A given step far finer than the data that would make more points is an error; a
series whose own most common spacing would (a stray time far away) gets no grid (NULL)."""

DAY_US = 86_400_000_000
"""Microseconds in a day: ticks of DATE and TIMESTAMP times are microseconds since 1970."""
_DAY_US = float(DAY_US)
# (shortest, longest spacing in days, months) recognised as calendar steps
_CALENDAR = ((28, 31, 1), (59, 62, 2), (89, 92, 3), (181, 184, 6), (365, 366, 12))
_CALENDAR_MONTHS = np.zeros(368, dtype=np.int64)  # whole days of a spacing -> calendar months (0: not one)
for _low, _high, _months in _CALENDAR:
    _CALENDAR_MONTHS[_low : _high + 1] = _months
_EPS = 1e-6  # positions within this of a grid point count as on it (decimal steps such as 0.1)


@dataclass(frozen=True, eq=False)
class Grid:
    """A batch of series on their grids.

    ``values`` holds the gridded series; per row, ``start`` is the first time
    (tick), ``months`` the calendar step (0 when fixed) and ``length`` the fixed
    step in ticks (0 when calendar). ``points`` is the flat grid index of each
    observation (in time order) and ``observation_offsets`` bound each row's
    observations.
    """

    values: Ragged
    start: np.ndarray
    months: np.ndarray
    length: np.ndarray
    points: np.ndarray
    observation_offsets: np.ndarray

    @cached_property
    def observed(self) -> np.ndarray:
        """For each grid point, the 0-based index (within its row, in time order) of the first
        observation at or after it."""
        total = len(self.values.values)
        first = np.repeat(self.observation_offsets[:-1], self.values.lengths)
        return np.searchsorted(self.points, np.arange(total), side="left") - first

    def take(self, rows: np.ndarray) -> Grid:
        """The grids of the given rows, in that order."""
        values = self.values.take(rows)
        counts = np.diff(self.observation_offsets)[rows]
        offsets = np.zeros(len(rows) + 1, dtype=np.int64)
        np.cumsum(counts, out=offsets[1:])
        source = np.repeat(self.observation_offsets[rows] - offsets[:-1], counts) + np.arange(offsets[-1])
        shift = np.repeat(values.offsets[:-1] - self.values.offsets[rows], counts)
        return Grid(
            values, self.start[rows], self.months[rows], self.length[rows], self.points[source] + shift, offsets
        )

    @cached_property
    def ticks(self) -> np.ndarray:
        """The time of every grid point, flat, in ticks."""
        v = self.values
        k = v.positions.astype(np.float64)
        if not (self.months > 0).any():  # fixed steps only: the same sums, without gathers
            return np.repeat(self.start, v.lengths) + k * np.repeat(self.length, v.lengths)
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
    same_time: str = "mean",
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
    same_time : {'mean', 'sum', 'first', 'last', 'error'}
        How several observations at one grid point combine (:data:`SAME_TIMES`).

    Returns
    -------
    Grid
        A row with no time at all is an empty grid (a NULL row stays invalid).
    """
    if fill not in FILLS:
        raise ValueError(f"fill must be one of {FILLS}, got {fill!r}")
    if same_time not in SAME_TIMES:
        raise ValueError(f"same_time must be one of {SAME_TIMES}, got {same_time!r}")
    if not np.array_equal(times.lengths, values.lengths):
        raise ValueError("times and values must have the same length in every row")
    times = _without_infinite_times(times)
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
    regular = None
    if not (step_months or step_length):
        months, length, regular = _inferred_steps(t, rows, obs_offsets, temporal)
        if regular is True:  # every spacing is one step: the observations are the grid already
            return Grid(Ragged(v, obs_offsets, times.valid), start, months, length, np.arange(len(t)), obs_offsets)

        # a step inferred from a row's own times that would need too many points (a stray time
        # centuries away, say) gives that row no grid (NULL), not an error for the whole batch
        huge = _too_many_points(t, obs_offsets, start, length, has_obs)
        if huge.any():
            return on_grid(_as_null_rows(times, huge), values, temporal, fill=fill, same_time=same_time)
    _check_extent(t, obs_offsets, start, length, has_obs)
    bins = _bins(t, rows, start, months, length, has_obs)
    if isinstance(regular, np.ndarray):  # such rows are their own grid here too, however their times round
        mine = regular[rows]
        bins[mine] = np.arange(len(t))[mine] - first[rows[mine]]
    n_grid = np.zeros(n_rows, dtype=np.int64)
    last = obs_offsets[1:] - 1
    n_grid[has_obs] = bins[last[has_obs]] + 1
    if n_grid.max(initial=0) > MAX_GRID_POINTS:
        worst = int(n_grid.max())
        raise ValueError(f"the step makes a grid of {worst:,} points for one series (at most {MAX_GRID_POINTS:,})")
    grid_offsets = np.zeros(n_rows + 1, dtype=np.int64)
    np.cumsum(n_grid, out=grid_offsets[1:])
    where = grid_offsets[rows] + bins

    total = int(grid_offsets[-1])
    gridded = np.full(total, np.nan)
    gridded[where] = v
    if not np.all(where[1:] > where[:-1]):  # repeats; a point with one observation keeps it as it is
        _combine(gridded, where, t, v, same_time)
    gridded = _filled(gridded, grid_offsets, fill)

    return Grid(
        values=Ragged(gridded, grid_offsets, times.valid),
        start=start,
        months=months,
        length=length,
        points=where,
        observation_offsets=obs_offsets,
    )


def _combine(gridded: np.ndarray, where: np.ndarray, t: np.ndarray, v: np.ndarray, same_time: str) -> None:
    """Points with several observations (``where`` ascends: they are in time order, then value order) as
    ``same_time`` says."""
    if same_time == "error":
        i = int(np.flatnonzero(where[1:] == where[:-1])[0])
        raise RepeatedTime((float(t[i]), float(t[i + 1])))
    total = len(gridded)
    several = np.bincount(where, minlength=total) > 1
    present = ~np.isnan(v)
    counts = np.bincount(where[present], minlength=total)
    if same_time in ("mean", "sum"):
        sums = np.bincount(where[present], weights=v[present], minlength=total)
        if same_time == "mean":
            np.divide(sums, counts, out=gridded, where=several & (counts > 0))
        else:
            gridded[several & (counts > 0)] = sums[several & (counts > 0)]
    else:
        kept = np.flatnonzero(present)
        at = where[kept]
        ends = np.flatnonzero(at[1:] != at[:-1])  # the last of each point's run
        pick = np.concatenate([[0], ends + 1]) if same_time == "first" else np.concatenate([ends, [len(at) - 1]])
        pick = pick[several[at[pick]]] if len(at) else pick[:0]
        gridded[at[pick]] = v[kept[pick]]
    gridded[several & (counts == 0)] = np.nan


def _without_infinite_times(times: Ragged) -> Ragged:
    """A row with an infinite time has no grid: it becomes a NULL row."""
    infinite = np.isinf(times.values)
    if not infinite.any():
        return times
    hit = np.zeros(times.n_rows, dtype=bool)
    hit[times.row_ids[infinite]] = True
    return _as_null_rows(times, hit)


def _as_null_rows(times: Ragged, hit: np.ndarray) -> Ragged:
    """``times`` with the rows marked in ``hit`` turned into NULL rows (their times dropped)."""
    values = np.where(hit[times.row_ids], np.nan, times.values)
    return Ragged(values, times.offsets, times.row_valid & ~hit)


def _too_many_points(
    t: np.ndarray, offsets: np.ndarray, start: np.ndarray, length: np.ndarray, has_obs: np.ndarray
) -> np.ndarray:
    """Rows whose fixed step would make a grid of more than MAX_GRID_POINTS points.

    Calendar steps cannot: a month is so long that the whole range of timestamps holds fewer.
    """
    huge = np.zeros(len(start), dtype=bool)
    fixed = has_obs & (length > 0)
    if fixed.any():
        huge[fixed] = (t[offsets[1:][fixed] - 1] - start[fixed]) / length[fixed] + 1 > MAX_GRID_POINTS
    return huge


def _check_extent(t: np.ndarray, offsets: np.ndarray, start: np.ndarray, length: np.ndarray, has_obs: np.ndarray):
    """Refuse a given step that would make too many grid points, before any count is cast to an integer."""
    huge = _too_many_points(t, offsets, start, length, has_obs)
    if huge.any():
        fixed = has_obs & (length > 0)
        points = ((t[offsets[1:][fixed] - 1] - start[fixed]) / length[fixed] + 1).max()
        raise ValueError(f"the step makes a grid of {points:,.0f} points for one series (at most {MAX_GRID_POINTS:,})")


def _bins(
    t: np.ndarray, rows: np.ndarray, start: np.ndarray, months: np.ndarray, length: np.ndarray, has_obs: np.ndarray
) -> np.ndarray:
    """The grid point at or before each observation, counted from its row's first time."""
    bins = np.zeros(len(t), dtype=np.int64)
    if len(t) == 0:
        return bins
    calendar_rows = months > 0
    if calendar_rows.any():
        first_month = np.zeros(len(start), dtype=np.int64)
        first_month[has_obs] = month_index(start[has_obs])
        if calendar_rows.all():
            return (month_index(t) - first_month[rows]) // months[rows]
        calendar = calendar_rows[rows]
        bins[calendar] = (month_index(t[calendar]) - first_month[rows[calendar]]) // months[rows[calendar]]
    fixed_rows = ~calendar_rows & (length > 0)
    if fixed_rows.all():
        return np.floor((t - start[rows]) / length[rows] + _EPS).astype(np.int64)
    fixed = fixed_rows[rows]
    steps = (t[fixed] - start[rows[fixed]]) / length[rows[fixed]]
    bins[fixed] = np.floor(steps + _EPS).astype(np.int64)
    return bins


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


def month_index(ticks: np.ndarray) -> np.ndarray:
    """Months since 1970-01 of each tick (through a table of the days spanned, which is fast)."""
    if len(ticks) == 0:
        return np.zeros(0, dtype=np.int64)
    days = np.floor_divide(ticks, _DAY_US).astype(np.int64)
    first, last = int(days.min()), int(days.max())
    if last - first > 4 * len(days) + 100_000:
        return days.astype("datetime64[D]").astype("datetime64[M]").astype(np.int64)
    table = np.arange(first, last + 1).astype("datetime64[D]").astype("datetime64[M]").astype(np.int64)
    return table[days - first]


def _sorted_observations(times: Ragged, values: Ragged) -> tuple[np.ndarray, ...]:
    """Observations with a time, sorted by (row, time, value); NaN values sort last among equal times.

    Only rows out of order are sorted, and only rows with repeated times are also ordered by
    value: that makes the averages of repeated times independent of the order rows arrived in.
    """
    t, v, offsets = times.values, values.values, times.offsets
    rows = None
    no_time = np.isnan(t)
    if no_time.any():
        keep = ~no_time
        rows, t, v = times.row_ids[keep], t[keep], v[keep]
        offsets = _offsets(np.bincount(rows, minlength=times.n_rows))
    across = _steps_across_rows(offsets, len(t))
    for by_value in (False, True):
        if len(t) < 2:
            break
        wrong = (t[1:] == t[:-1]) if by_value else (t[1:] < t[:-1])
        wrong[across] = False
        if not wrong.any():
            continue
        if rows is None:
            rows = _row_ids(offsets)
        flagged = np.zeros(times.n_rows, dtype=bool)
        flagged[rows[1:][wrong]] = True
        if flagged.all():
            order = np.lexsort((v, t, rows)) if by_value else _time_order(rows, t)
        else:
            touched = np.flatnonzero(flagged[rows])
            in_touched = (
                np.lexsort((v[touched], t[touched], rows[touched]))
                if by_value
                else _time_order(rows[touched], t[touched])
            )
            # the order keeps every element in its row (rows are sorted), so only times and values move
            order = np.arange(len(t))
            order[touched] = touched[in_touched]
        t, v = t[order], v[order]
    if rows is None:
        rows = _row_ids(offsets)
    return t, v, rows, offsets


def _offsets(counts: np.ndarray) -> np.ndarray:
    offsets = np.zeros(len(counts) + 1, dtype=np.int64)
    np.cumsum(counts, out=offsets[1:])
    return offsets


def _row_ids(offsets: np.ndarray) -> np.ndarray:
    return np.repeat(np.arange(len(offsets) - 1, dtype=np.int64), np.diff(offsets))


def _steps_across_rows(offsets: np.ndarray, n: int) -> np.ndarray:
    """Indices, among the n - 1 steps between neighbours, of those from one row to the next."""
    starts = offsets[1:-1]
    return starts[(starts > 0) & (starts < n)] - 1


def _time_order(rows: np.ndarray, t: np.ndarray) -> np.ndarray:
    """The order by (row, time): one integer sort when the times are whole numbers (microseconds)."""
    low, high = t.min(), t.max()
    span = high - low + 1
    first_row, last_row = rows[0], rows[-1]  # rows are in order
    # t - low is exact for whole numbers less than 2**53 apart
    if span <= 2.0**53 and span * (last_row - first_row + 1) < 2.0**62 and np.array_equal(t, np.floor(t)):
        key = (t - low).astype(np.int64)
        key += (rows - first_row) * np.int64(span)
        return np.argsort(key, kind="stable")
    return np.lexsort((t, rows))


def _inferred_steps(
    t: np.ndarray, rows: np.ndarray, offsets: np.ndarray, temporal: bool
) -> tuple[np.ndarray, np.ndarray, bool | np.ndarray | None]:
    """Each row's most common spacing between distinct times (the smallest among equally common ones),
    and True when every spacing of the batch is one such step; else, for numbers, which rows have
    every spacing one step (their times, rounded decimals, may drift from their first time plus
    whole steps), or None.

    A spacing shared by more than half of a row's gaps is its most common one. The median
    spacing of a sample of the batch is usually that for every row, so most batches are settled
    by one comparison per gap; only the other rows count every spacing.
    """
    n_rows = len(offsets) - 1
    months = np.zeros(n_rows, dtype=np.int64)
    length = np.zeros(n_rows)
    if len(t) < 2:
        return months, length, None
    gap = np.diff(t)
    across = _steps_across_rows(offsets, len(t))
    first = offsets[:-1]
    spaced = offsets[1:] - first >= 2  # a single observation has no spacing: its step stays 0
    step = _one_fixed_step(gap, across, temporal)
    if step:  # what the search below finds for such a batch, in two passes
        length[spaced] = step
        return months, length, True
    gap_row = rows[1:]
    within = np.ones(len(gap), dtype=bool)
    within[across] = False
    usable = (gap > 0) & within
    repeats = not np.array_equal(usable, within)
    repeated = None
    if repeats and not temporal:
        repeated = np.zeros(n_rows, dtype=bool)
        repeated[gap_row[within & ~usable]] = True
    if not usable.all():
        gap, gap_row = gap[usable], gap_row[usable]
    if len(gap) == 0:
        return months, length, None
    thin = max(1, len(gap) // 999)
    sample = _keys(gap[::thin]) if temporal else gap[::thin]
    candidate = np.partition(sample, len(sample) // 2)[len(sample) // 2]
    if temporal and candidate < 0:  # a calendar step: its whole range of days matches
        m = int(candidate + 100)
        low, high = next((lo, hi) for lo, hi, mm in _CALENDAR if mm == m)
        match = (gap >= low * _DAY_US) & (gap < (high + 1) * _DAY_US)
    elif temporal:
        match = gap == candidate
    else:  # numbers: spacings equal to about 9 digits of the row's own largest time are one spacing
        last = np.maximum(offsets[1:] - 1, first)
        largest = np.zeros(n_rows)
        largest[spaced] = np.maximum(np.abs(t[first[spaced]]), np.abs(t[last[spaced]]))
        scale = 1e9 / np.where(largest > 0, largest, 1.0)
        key = np.rint(gap * scale[gap_row])
        candidate = np.rint(candidate * scale)  # the candidate spacing in each row's own terms
        match = key == candidate[gap_row]
    if match.all() and not repeats:  # one step everywhere, unless month ends make a day count mislead
        calendar = temporal and candidate < 0
        if not calendar or np.all(np.diff(month_index(t))[within] == candidate + 100):
            if calendar:
                months[spaced] = int(candidate + 100)
            else:  # each row's own first spacing, as below (numbers' spacings differ in their last digits)
                length[spaced] = t[first[spaced] + 1] - t[first[spaced]]
            return months, length, True
    gaps_per_row = np.bincount(gap_row, minlength=n_rows)
    settled = 2 * np.bincount(gap_row[match], minlength=n_rows) > gaps_per_row
    best = np.full(n_rows, np.nan)
    best[settled] = candidate[settled] if not temporal else candidate
    open_rows = ~settled & (gaps_per_row > 0)
    if open_rows.any():
        mine = open_rows[gap_row]
        keys = _keys(gap[mine]) if temporal else key[mine]
        best[open_rows] = _most_common(keys, gap_row[mine], n_rows)[open_rows]
    calendar = best < 0 if temporal else np.zeros(n_rows, dtype=bool)
    months[calendar] = (best[calendar] + 100).astype(np.int64)
    fixed = ~calendar & ~np.isnan(best)
    if temporal:
        length[fixed] = best[fixed]
    elif fixed.any():  # the first gap of each row with its key stands for the spacing
        one_step = key == best[gap_row]
        chosen = np.flatnonzero(one_step)
        chosen = chosen[np.r_[True, gap_row[chosen][1:] != gap_row[chosen][:-1]]]
        length[gap_row[chosen]] = gap[chosen]
        regular = fixed.copy()
        regular[gap_row[~one_step]] = False
        if repeated is not None:
            regular &= ~repeated
        return months, length, regular if regular.any() else None
    return months, length, None


def _one_fixed_step(gap: np.ndarray, across: np.ndarray, temporal: bool) -> float:
    """The spacing when every spacing inside the rows is exactly the same positive fixed length
    (not one a calendar step would claim); else 0."""
    inside = np.ones(len(gap), dtype=bool)
    inside[across] = False
    first = int(np.argmax(inside))
    step = float(gap[first])
    if not inside[first] or not step > 0:
        return 0.0
    if temporal and _CALENDAR_MONTHS[min(int(step // _DAY_US), len(_CALENDAR_MONTHS) - 1)]:
        return 0.0
    same = gap == step
    same[across] = True
    return step if same.all() else 0.0


def _keys(gap: np.ndarray) -> np.ndarray:
    """What counts as one spacing of DATE or TIMESTAMP times: calendar months as m - 100 (before any
    length), else the length."""
    gap_months = _CALENDAR_MONTHS[np.minimum(gap // _DAY_US, len(_CALENDAR_MONTHS) - 1).astype(np.int64)]
    return np.where(gap_months > 0, gap_months - 100.0, gap)


def _most_common(key: np.ndarray, row: np.ndarray, n_rows: int) -> np.ndarray:
    """Per row, its most common key (the smallest among equally common ones); NaN for rows without keys."""
    values, code = np.unique(key, return_inverse=True)
    out = np.full(n_rows, np.nan)
    if n_rows * len(values) <= 8_000_000:
        counts = np.bincount(row * len(values) + code, minlength=n_rows * len(values)).reshape(n_rows, -1)
        present = counts.any(axis=1)
        out[present] = values[counts.argmax(axis=1)[present]]  # argmax: the first of equally common keys
        return out
    order = np.lexsort((code, row))  # very irregular numbers: count runs of equal keys instead of a table
    code, row = code[order], row[order]
    run_start = np.flatnonzero(np.r_[True, (np.diff(code) != 0) | (np.diff(row) != 0)])
    run_count = np.diff(np.r_[run_start, len(code)])
    run_row = row[run_start]
    pick = np.lexsort((np.arange(len(run_start)), -run_count, run_row))
    pick = pick[np.r_[True, run_row[pick][1:] != run_row[pick][:-1]]]
    out[run_row[pick]] = values[code[run_start[pick]]]
    return out


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
