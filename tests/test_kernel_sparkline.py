"""Sparklines: hand-checked examples and a plain-Python reference for the resampling."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tsql.kernels.ragged import Ragged
from tsql.kernels.sparkline import BLOCKS, sparkline

NAN = float("nan")


def line(x, width=None) -> str | None:
    return sparkline(Ragged.from_list([x]), width)[0]


def reference(x: list, width: int | None = None) -> str:
    """Plain Python: bin means (element i in bin floor(i * width / n)) or stretching, then 8 levels."""
    n = len(x)
    if n == 0:
        return ""
    if width is None:
        shown = list(x)
    elif width > n:  # stretched: bin k shows element floor(k * n / width)
        shown = [x[k * n // width] for k in range(width)]
    else:
        sums, counts = [0.0] * width, [0] * width
        for i, v in enumerate(x):
            if not math.isnan(v):
                sums[i * width // n] += v
                counts[i * width // n] += 1
        shown = [s / c if c else NAN for s, c in zip(sums, counts)]
    present = [v for v in shown if not math.isnan(v)]
    if not present:
        return " " * len(shown)
    lo, hi = min(present), max(present)
    chars = []
    for v in shown:
        if math.isnan(v):
            chars.append(" ")
        elif hi == lo:
            chars.append("▄")
        else:
            chars.append(BLOCKS[min(7, math.floor(8 * (v - lo) / (hi - lo)))])
    return "".join(chars)


# --------------------------------------------------------------------------------------------
# hand-checked examples (worked out on paper: level = floor(8 (v - lo) / (hi - lo)), top = 7)
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "x, expected",
    [
        ([1, 2, 3, 4, 5, 6, 7, 8], "▁▂▃▄▅▆▇█"),  # (v - 1) / 7 * 8 = 0, 1.14, 2.29, ..., 8
        ([0, 10, 5], "▁█▅"),  # 5 -> 4
        ([3, 1, 2], "█▁▅"),
        ([0, 1, 8], "▁▂█"),  # 1 -> exactly 1: a boundary goes to the upper level
        ([-5, -4.9], "▁█"),
        ([1, NAN, 3], "▁ █"),  # a missing element is a space
        ([NAN, 2, 4, NAN], " ▁█ "),
        ([5, 5, 5, 5], "▄▄▄▄"),  # constant: the middle block
        ([5, NAN, 5], "▄ ▄"),
        ([7], "▄"),
        ([NAN, NAN], "  "),
        ([], ""),
    ],
)
def test_hand_checked_lines(x, expected):
    assert line(x) == expected


@pytest.mark.parametrize(
    "x, width, expected",
    [
        ([1, 2, 3, 4, 5, 6], 3, "▁▅█"),  # bins {1,2} {3,4} {5,6}: means 1.5, 3.5, 5.5
        ([1, 2, 3, 4, 5, 6], 4, "▁▃▆█"),  # bins {1,2} {3} {4,5} {6}: 1.5, 3, 4.5, 6
        ([1, 2, 3, 4, 5, 6], 6, "▁▂▄▅▇█"),  # one element per bin: the plain line
        ([1, 2, 3, 4, 5, 6], 1, "▄"),  # one bin: a single (constant) value
        ([1, NAN, NAN, 4], 2, "▁█"),  # a bin's mean uses its present values only
        ([1, 2, NAN, NAN, 5, 6], 3, "▁ █"),  # a bin with no present value is a space
        ([1, 2], 4, "▁▁██"),  # wider than the series: stretched, bin k shows element k * 2 // 4
        ([1, NAN, 3], 6, "▁▁  ██"),  # stretched, the gap too
        ([], 5, ""),
    ],
)
def test_hand_checked_resampling(x, width, expected):
    assert line(x, width) == expected


def test_plain_line_equals_width_of_its_length():
    x = [4.0, 1.0, NAN, 9.0, 2.0, 6.0, 5.0, 3.0]
    assert line(x, len(x)) == line(x) == reference(x)


def test_null_rows_and_batches():
    rows = [[1, 2, 3], None, [], [2, 2], None]
    assert sparkline(Ragged.from_list(rows)) == ["▁▅█", None, "", "▄▄", None]
    assert sparkline(Ragged.from_list(rows), width=2) == ["▁█", None, "", "▄▄", None]
    assert sparkline(Ragged.from_list([])) == []


def test_infinities_take_the_end_blocks_and_huge_ranges_do_not_overflow():
    assert line([1, np.inf, -np.inf, NAN, 3]) == "▁█▁ █"
    assert line([np.inf, -np.inf], 1) == " "  # inf - inf: the bin's mean is not a number
    assert line([1e308, -1e308, 0]) == "█▁▅"


# --------------------------------------------------------------------------------------------
# against the plain-Python reference
# --------------------------------------------------------------------------------------------


values = st.one_of(st.floats(-1e6, 1e6), st.just(NAN))


@settings(max_examples=150, deadline=None)
@given(st.lists(values, max_size=60), st.one_of(st.none(), st.integers(1, 80)))
def test_matches_plain_python_reference(x, width):
    # reference: the loop above (bin sums in element order, so the means agree to the bit)
    assert line(x, width) == reference(x, width)


def test_each_row_is_the_same_alone_or_in_a_mixed_batch():
    rng = np.random.default_rng(1)
    rows = []
    for i in range(300):
        x = rng.standard_normal(int(rng.integers(0, 50))).cumsum()
        x[rng.random(len(x)) < 0.1] = np.nan
        rows.append(None if i % 11 == 0 else x)
    for width in (None, 1, 7, 30):
        together = sparkline(Ragged.from_list(rows), width)
        assert together == [line(x, width) for x in rows]
        assert together == [None if x is None else reference(list(x), width) for x in rows]


def test_a_batch_larger_than_one_work_block_draws_every_row_as_alone():
    # sparkline draws about 2^16 elements at a time (its memory stays small): rows across the
    # block boundaries, a NULL row and a row longer than a block must come out as drawn alone
    rng = np.random.default_rng(2)
    rows = [rng.standard_normal(int(rng.integers(900, 1100))) for _ in range(400)]
    rows[137] = None
    rows[251] = rng.standard_normal(300_000)
    for width in (None, 40):
        assert sparkline(Ragged.from_list(rows), width) == [line(x, width) for x in rows]
