"""The time grid kernel: step inference, calendar months, averaging, fills, order independence."""

import numpy as np
import pytest

from tsql.kernels.grid import MAX_GRID_POINTS, add_months, on_grid
from tsql.kernels.ragged import Ragged

US_PER_DAY = 86_400_000_000


def ticks(dates) -> list[float]:
    return [float(np.datetime64(d, "us").astype(np.int64)) for d in dates]


def month_starts(first: str, n: int) -> list[str]:
    return [str(np.datetime64(first, "M") + i) + "-01" for i in range(n)]


def test_deleted_months_come_back_as_missing_values():
    months = month_starts("2021-01", 24)
    kept = [m for i, m in enumerate(months) if i not in (3, 10, 17)]
    values = [float(months.index(m)) for m in kept]
    grid = on_grid(Ragged.from_list([ticks(kept)]), Ragged.from_list([values]), temporal=True)
    assert grid.months.tolist() == [1] and grid.length.tolist() == [0.0]
    got = grid.values.row(0)
    assert len(got) == 24
    assert np.flatnonzero(np.isnan(got)).tolist() == [3, 10, 17]
    present = ~np.isnan(got)
    assert got[present].tolist() == [float(i) for i in range(24) if i not in (3, 10, 17)]
    assert grid.ticks.tolist() == ticks(months)


@pytest.mark.parametrize(
    ("dates", "months"),
    [
        (["2020-01-01", "2020-04-01", "2020-10-01", "2021-01-01"], 3),
        (["2018-06-30", "2019-06-30", "2020-06-30", "2022-06-30"], 12),
        (["2020-01-31", "2020-02-29", "2020-03-31", "2020-04-30", "2020-06-30"], 1),
    ],
)
def test_calendar_steps_are_recognised(dates, months):
    grid = on_grid(Ragged.from_list([ticks(dates)]), Ragged.from_list([list(range(len(dates)))]), temporal=True)
    assert grid.months.tolist() == [months]
    assert np.isnan(grid.values.row(0)).sum() == 1  # one step is skipped in each list


def test_month_arithmetic_clamps_to_the_month_end_like_duckdb():
    duckdb = pytest.importorskip("duckdb")
    start = ticks(["2020-01-31"]) * 5
    steps = np.arange(5)
    ours = add_months(np.array(start), steps).astype(np.int64).astype("datetime64[us]").astype("datetime64[D]")
    # reference: DuckDB's own DATE + INTERVAL k MONTH
    theirs = duckdb.sql(
        "SELECT (DATE '2020-01-31' + to_months(k::INTEGER))::DATE FROM range(5) r(k) ORDER BY k"
    ).fetchall()
    assert [str(d) for d in ours] == [str(r[0]) for r in theirs]


def test_fixed_steps_and_decimal_numbers():
    hours = [0, 1, 2, 5, 6]
    grid = on_grid(Ragged.from_list([[h * 3_600e6 for h in hours]]), Ragged.from_list([hours]), temporal=True)
    assert grid.months.tolist() == [0] and grid.length.tolist() == [3_600e6]
    assert np.flatnonzero(np.isnan(grid.values.row(0))).tolist() == [3, 4]
    tenths = [0.0, 0.1, 0.2, 0.30000000000000004, 0.5]
    grid = on_grid(Ragged.from_list([tenths]), Ragged.from_list([[1, 2, 3, 4, 5]]), temporal=False)
    assert grid.values.row(0)[:4].tolist() == [1, 2, 3, 4] and np.isnan(grid.values.row(0)[4])


def test_several_values_at_one_point_are_averaged_and_order_does_not_matter():
    t = [3.0, 1.0, 2.0, 2.0, 1.0, 5.0]
    v = [30.0, 10.0, 20.0, 23.0, np.nan, 50.0]
    grid = on_grid(Ragged.from_list([t]), Ragged.from_list([v]), temporal=False)
    assert grid.values.row(0).tolist()[:3] == [10.0, 21.5, 30.0] and np.isnan(grid.values.row(0)[3])
    rng = np.random.default_rng(5)
    for _ in range(20):
        order = rng.permutation(len(t))
        again = on_grid(Ragged.from_list([np.array(t)[order]]), Ragged.from_list([np.array(v)[order]]), False)
        assert again.values.row(0).tobytes() == grid.values.row(0).tobytes()


@pytest.mark.parametrize("fill", ["zero", "linear", "previous"])
def test_fills(fill):
    t = [[0, 1, 4, 5, 7], [10, 12, 13]]
    v = [[1.0, np.nan, 4.0, 2.0, 6.0], [5.0, 7.0, 9.0]]
    grid = on_grid(Ragged.from_list(t), Ragged.from_list(v), temporal=False, fill=fill)
    first, second = grid.values.row(0), grid.values.row(1)
    points = np.arange(8.0)
    observed = {0: 1.0, 4: 4.0, 5: 2.0, 7: 6.0}
    if fill == "zero":
        expected = [observed.get(k, 0.0) for k in range(8)]
        assert second.tolist() == [5.0, 0.0, 7.0, 9.0]
    elif fill == "linear":  # reference: numpy.interp between the present points
        expected = np.interp(points, list(observed), list(observed.values())).tolist()
        assert second.tolist() == [5.0, 6.0, 7.0, 9.0]
    else:
        expected = [1.0, 1.0, 1.0, 1.0, 4.0, 2.0, 2.0, 6.0]
        assert second.tolist() == [5.0, 5.0, 7.0, 9.0]
    np.testing.assert_allclose(first, expected, rtol=0, atol=1e-15)


def test_leading_gaps_stay_missing_and_rows_stay_apart():
    grid = on_grid(
        Ragged.from_list([[0, 1, 2], [0, 1, 3]]),
        Ragged.from_list([[np.nan, np.nan, 3.0], [8.0, 9.0, 12.0]]),
        temporal=False,
        fill="linear",
    )
    assert np.isnan(grid.values.row(0)[:2]).all() and grid.values.row(0)[2] == 3.0
    assert grid.values.row(1).tolist() == [8.0, 9.0, 10.5, 12.0]


def test_null_rows_rows_without_times_and_a_given_step():
    grid = on_grid(
        Ragged.from_list([None, [np.nan, np.nan], [0.0, 10.0]]),
        Ragged.from_list([None, [1.0, 2.0], [1.0, 2.0]]),
        temporal=False,
        step_length=5.0,
    )
    assert grid.values.lengths.tolist() == [0, 0, 3]
    assert grid.values.row_valid.tolist() == [False, True, True]
    assert grid.values.row(2)[[0, 2]].tolist() == [1.0, 2.0]


def test_observed_points_the_first_observation_at_or_after_each_grid_point():
    grid = on_grid(Ragged.from_list([[0, 1, 4, 5]]), Ragged.from_list([[1, 2, 3, 4]]), temporal=False)
    assert grid.observed.tolist() == [0, 1, 2, 2, 2, 3]


def test_a_grid_too_fine_for_the_data_is_an_error():
    with pytest.raises(ValueError, match="grid of"):
        on_grid(Ragged.from_list([[0.0, 365.0 * US_PER_DAY]]), Ragged.from_list([[1.0, 2.0]]), True, step_length=1.0)
    assert MAX_GRID_POINTS >= 1_000_000


def test_months_on_numbers_and_unknown_fills_are_errors():
    one = Ragged.from_list([[1.0, 2.0]])
    with pytest.raises(ValueError, match="needs DATE or TIMESTAMP"):
        on_grid(one, one, temporal=False, step_months=1)
    with pytest.raises(ValueError, match="fill must be one of"):
        on_grid(one, one, temporal=False, fill="nearest")
    with pytest.raises(ValueError, match="same length"):
        on_grid(one, Ragged.from_list([[1.0]]), temporal=False)


def test_span_in_steps_and_back():
    grid = on_grid(
        Ragged.from_list([ticks(month_starts("2020-01", 30)), [0.0, 3_600e6, 7_200e6]]),
        Ragged.from_list([list(range(30)), [1, 2, 3]]),
        temporal=True,
    )
    assert grid.steps(12, 0.0)[0] == 12.0 and np.isnan(grid.steps(12, 0.0)[1])
    assert np.isnan(grid.steps(0, US_PER_DAY)[0]) and grid.steps(0, US_PER_DAY)[1] == 24.0
    months, length = grid.span(np.array([11.97, 24.0]))
    assert months[0] == 12 and np.isnan(months[1]) and length[1] == US_PER_DAY


def test_regular_rows_are_their_own_grid_but_month_ends_are_checked():
    months = month_starts("2019-01", 36)
    values = Ragged.from_list([list(range(36)), list(range(36, 72))])
    grid = on_grid(Ragged.from_list([ticks(months)] * 2), values, temporal=True)
    assert grid.values.values.tobytes() == values.values.tobytes() and grid.months.tolist() == [1, 1]
    assert grid.ticks.tolist() == ticks(months) * 2
    # 31 days apart twice, but January 31 to March 2 crosses two month boundaries
    odd = on_grid(
        Ragged.from_list([ticks(["2020-01-31", "2020-03-02", "2020-04-02"])]), Ragged.from_list([[1, 2, 3]]), True
    )
    assert odd.months.tolist() == [1]
    assert np.isnan(odd.values.row(0)).tolist() == [False, True, False, False]


def test_a_batch_on_one_fixed_step_is_gridded_as_when_it_is_not():
    """Every spacing one fixed step is settled in two passes; the same rows in a mixed batch give the same grid."""
    rng = np.random.default_rng(2)
    day = float(US_PER_DAY)
    rows = [list(1e15 + day * np.arange(n)) for n in (5, 9, 7)]
    values = [list(rng.normal(size=len(r))) for r in rows]
    regular = on_grid(Ragged.from_list(rows), Ragged.from_list(values), temporal=True)
    mixed = on_grid(
        Ragged.from_list(rows + [[0.0, day, 3 * day]]), Ragged.from_list(values + [[1.0, 2.0, 3.0]]), temporal=True
    )
    assert regular.length.tolist() == mixed.length.tolist()[:3] == [day] * 3
    assert regular.months.tolist() == mixed.months.tolist()[:3] == [0] * 3
    assert regular.values.values.tobytes() == mixed.values.take(np.arange(3)).values.tobytes()
    thirty_days = [list(30 * day * np.arange(6))]  # a calendar step claims this spacing: one month
    assert on_grid(Ragged.from_list(thirty_days), Ragged.from_list([list(range(6))]), temporal=True).months[0] == 1


def test_rows_in_sorted_runs_and_a_last_row_without_times():
    """Rows arrive as a few sorted runs (one per database thread); a row may have no time at all."""
    t = [[5.0, 6.0, 7.0, 1.0, 2.0, 3.0, 4.0], [2.0, 1.0], [np.nan, np.nan]]
    v = [[50.0, 60.0, 70.0, 10.0, 20.0, 30.0, 40.0], [2.0, 1.0], [1.0, 2.0]]
    grid = on_grid(Ragged.from_list(t), Ragged.from_list(v), temporal=False)
    assert grid.values.row(0).tolist() == [10.0, 20.0, 30.0, 40.0, 50.0, 60.0, 70.0]
    assert grid.values.row(1).tolist() == [1.0, 2.0]
    assert len(grid.values.row(2)) == 0 and grid.length.tolist()[:2] == [1.0, 1.0]


# --- a row's grid depends on its own observations only, whatever else is in the batch ---------------


def _alone_and_among(rows, others, temporal, values=None):
    """The grid of ``rows`` alone, and the same rows' part of a grid of the batch ``others + rows``."""
    values = values or [list(np.arange(len(r), dtype=float)) for r in rows]
    other_values = [list(np.arange(len(r), dtype=float)) for r in others]
    alone = on_grid(Ragged.from_list(rows), Ragged.from_list(values), temporal)
    among = on_grid(Ragged.from_list(others + rows), Ragged.from_list(other_values + values), temporal)
    mine = len(others) + np.arange(len(rows))
    return alone, among.take(mine), among


def _same_grid(a, b):
    assert a.values.values.tobytes() == b.values.values.tobytes()
    assert a.values.offsets.tolist() == b.values.offsets.tolist()
    assert a.start.tobytes() == b.start.tobytes()
    assert a.months.tolist() == b.months.tolist()
    assert a.length.tobytes() == b.length.tobytes()
    assert a.ticks.tobytes() == b.ticks.tobytes()


@pytest.mark.parametrize("other", [[0.0, 1e6], [0.0, 1e6, 3e6], [-5e8, -4e8]])
def test_near_equal_numeric_spacings_are_judged_by_the_row_alone(other):
    """Spacings 1.000001, 0.999999, 1, 1: distinct to nine digits of this row's own times, the most common
    is 1; a batch holding far larger times must not merge them into one spacing."""
    row = [0.0, 1.000001, 2.0, 3.0, 4.0]
    alone, among, _ = _alone_and_among([row], [other], temporal=False)
    assert alone.length.tolist() == [1.0]
    _same_grid(alone, among)


def test_decimal_tenths_keep_their_own_first_spacing_in_a_regular_batch():
    """Every spacing is one step to nine digits in each row, but the rows' first spacings differ in the
    last bits: each row keeps its own, as it does in a batch that is not regular."""
    tenths = list(np.cumsum(np.full(8, 0.1)))  # 0.1, 0.2, 0.30000000000000004, ...
    shifted = [x + 0.2 for x in tenths]
    alone, among, _ = _alone_and_among([shifted], [tenths], temporal=False)
    _, mixed, _ = _alone_and_among([shifted], [tenths, [0.0, 0.5, 0.7]], temporal=False)
    assert alone.length[0] == shifted[1] - shifted[0] != tenths[1] - tenths[0]
    _same_grid(alone, among)
    _same_grid(alone, mixed)


@pytest.mark.parametrize(
    ("others", "temporal"),
    [
        ([list(US_PER_DAY * np.arange(6.0))], True),  # every spacing one fixed step
        ([ticks(month_starts("2020-01", 9))], True),  # every spacing one calendar month
        ([list(np.arange(6.0))], False),
        ([list(np.arange(6.0) * 0.1)], False),
        ([list(US_PER_DAY * np.array([0.0, 1, 3]))], True),  # not regular
        ([[0.0, 1.0, 3.0]], False),
    ],
)
def test_a_row_with_one_observation_has_no_step_whatever_the_batch(others, temporal):
    """One observation has no spacing: step 0 (neither months nor a length), in a batch of one row, in a
    batch the two-pass shortcut settles and in any other batch."""
    single = [[float(7 * US_PER_DAY)], [float(9 * US_PER_DAY)], [np.nan, 3.0 * US_PER_DAY]]
    alone, among, whole = _alone_and_among(single, others, temporal)
    assert alone.months.tolist() == [0, 0, 0] and alone.length.tolist() == [0.0, 0.0, 0.0]
    _same_grid(alone, among)
    assert (whole.months[:-3] + whole.length[:-3] > 0).all()  # the other rows do have a step
    assert np.isnan(whole.steps(0, US_PER_DAY)[-3:]).all()


def test_rounded_decimal_times_stay_one_point_per_step_in_any_batch():
    """Thirds rounded to nine decimals: every spacing is one step, though the later times drift from the
    first time plus whole first spacings by more than the binning tolerance. Alone the row is its own grid;
    beside an irregular row (which takes the general path) it must be too."""
    row = list(np.round((np.arange(1000) + 1) / 3, 9))
    alone, among, _ = _alone_and_among([row], [[0.0, 1.0, 3.0]], temporal=False)
    assert len(alone.values.row(0)) == 1000 and not np.isnan(alone.values.row(0)).any()
    _same_grid(alone, among)


def test_zero_and_nan_values_keep_their_bits_next_to_a_row_that_averages():
    """-0.0 (and a NaN's sign bit) at a grid point with one observation stays as it is, even when another
    row of the batch has several observations at one point to average."""
    row, values = [0.0, 1.0, 2.0], [-0.0, 1.0, -np.nan]
    alone, among, _ = _alone_and_among([row], [[0.0, 0.0, 1.0]], temporal=False, values=[values])
    assert np.signbit(alone.values.values).tolist() == [True, False, True]
    _same_grid(alone, among)


def test_huge_whole_number_times_are_sorted_exactly():
    """Times beyond 2**53 apart cannot be shifted to integers exactly: the order must still be right."""
    from tsql.kernels.grid import _sorted_observations

    big = 2.0**60
    times = Ragged.from_list([[big + 256, big, -big]])
    t, _, _, _ = _sorted_observations(times, Ragged.from_list([[1.0, 2.0, 3.0]]))
    assert t.tolist() == [-big, big, big + 256]


def test_every_row_is_gridded_as_alone_in_a_random_batch():
    """Many kinds of rows (regular, gaps, repeats, one observation, decimals, months), alone and together."""
    rng = np.random.default_rng(11)
    for temporal in (True, False):
        rows = []
        for _ in range(60):
            n = int(rng.choice([1, 2, 4, 12]))
            if temporal:
                kind = rng.integers(3)
                if kind == 0:
                    t = 1.6e15 + US_PER_DAY * np.cumsum(rng.choice([1, 1, 2], n))
                elif kind == 1:
                    t = np.array(ticks(month_starts(str(2000 + rng.integers(20)) + "-01", n)))
                else:
                    t = 1.6e15 + 60e6 * np.cumsum(rng.integers(0, 4, n))
            else:
                t = np.cumsum(np.full(n, 0.1)) * rng.choice([1.0, 7.0, 1e6]) + rng.choice([0.0, 0.05, 1e3])
            rows.append(list(rng.permutation(t)))
        values = [list(rng.normal(size=len(r))) for r in rows]
        whole = on_grid(Ragged.from_list(rows), Ragged.from_list(values), temporal)
        for i in range(len(rows)):
            alone = on_grid(Ragged.from_list([rows[i]]), Ragged.from_list([values[i]]), temporal)
            _same_grid(alone, whole.take(np.array([i])))


def test_a_stray_time_that_would_need_a_huge_grid_makes_only_its_row_null():
    # docs/behaviour.md: the most common spacing (1) with one time 10^9 away would need 10^9 grid
    # points; that row gets no grid (NULL), the other rows of the batch theirs, and a given step
    # that fine is still an error
    stray = list(range(1000)) + [1e9]
    times = Ragged.from_list([stray, [0.0, 2.0, 4.0]])
    values = Ragged.from_list([[1.0] * 1001, [1.0, 2.0, 3.0]])
    grid = on_grid(times, values, temporal=False)
    assert grid.values.row_valid.tolist() == [False, True]
    assert grid.values.row(1).tolist() == [1.0, 2.0, 3.0]
    alone = on_grid(Ragged.from_list([[0.0, 2.0, 4.0]]), Ragged.from_list([[1.0, 2.0, 3.0]]), temporal=False)
    assert np.array_equal(alone.values.values, grid.values.row(1)) and alone.length[0] == grid.length[1]
    with pytest.raises(ValueError, match="grid of"):
        on_grid(times, values, temporal=False, step_length=1.0)
