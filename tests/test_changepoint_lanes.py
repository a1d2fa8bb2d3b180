"""The 'mean' search over several rows at once (one row per vector lane) against the search row by row.

The lane search (:func:`tsql.kernels.changepoint._fpop_lanes`) must give each row exactly what the
search of one row (:func:`tsql.kernels.changepoint._fpop`, FPOP: Maidstone, Hocking, Rigaill &
Fearnhead 2017) gives it: the same ``F`` and ``last`` bit for bit, on rows whose starts are kept,
retired and tied differently in every lane. Real rows: windows of the well-log series of the Turing
Change Point Dataset (``shared/data/tcpd`` beside the repository, copied from the public repository
alan-turing-institute/TCPD; see its SOURCE.md); the others are seeded synthetic rows.
"""

import json
import math
from pathlib import Path

import numpy as np
import pytest
from numba import njit

from tsql.kernels import changepoint
from tsql.kernels.changepoint import segments
from tsql.kernels.ragged import Ragged

TCPD = Path(__file__).resolve().parents[1].parent / "shared" / "data" / "tcpd"
LANES = changepoint.LANES


def well_log() -> np.ndarray:
    path = TCPD / "datasets" / "well_log" / "well_log.json"
    if not path.is_file():
        pytest.skip("shared/data/tcpd is not beside the repository")
    series = json.loads(path.read_text())["series"][0]["raw"]
    return np.array([np.nan if v is None else float(v) for v in series])


def kinds(rng: np.random.Generator, m: int) -> list[np.ndarray]:
    """Rows of ``m`` values of many kinds: each lane of a group gets a different one."""
    k = np.arange(m)
    shifts = np.zeros(m)
    for start in rng.integers(1, m, 3):
        shifts[start:] += rng.normal(0, 3)
    return [
        rng.standard_normal(m),
        shifts + rng.standard_normal(m),
        2.0 * np.sin(2 * np.pi * k / 7) + rng.standard_normal(m),  # a cycle left in
        np.cumsum(rng.standard_normal(m)),  # a random walk
        rng.integers(0, 3, m).astype(float),  # ties everywhere
        np.repeat(rng.integers(0, 4, m // 5 + 1).astype(float), 5)[:m] + 0.01 * (k % 2),  # constant runs
        1e6 + rng.standard_normal(m) + 2.0 * (k >= m // 2),  # a large offset
        5.0 + 1e-9 * rng.standard_normal(m),  # a tiny spread
    ]


def prepared(rows: list[np.ndarray], penalty):
    """The rows' sums, penalties and length terms, as the segmentation prepares them."""
    m = len(rows[0])
    stats = np.zeros((LANES, changepoint.MAX_STATS, m + 1))
    beta = np.empty(LANES)
    length_term = np.zeros((LANES, m + 1))
    work = np.empty(2 * m)
    index = np.empty(2 * m, dtype=np.int64)
    for w, y in enumerate(rows):
        lowest, highest, total = changepoint._present(y, 0, m)[4:]
        scale = changepoint._prepare(changepoint.MEAN, y, np.arange(m), m, lowest, highest, total, stats[w])
        assert scale > 0.0
        factor = changepoint._noise_factor(changepoint.MEAN, y, m, scale, work, index)
        beta[w] = (
            float(penalty)
            if not isinstance(penalty, str)
            else (2.0 if penalty == "bic" else 3.0) * math.log(m) * factor
        )
        if penalty == "mbic":
            length_term[w, 1:] = (np.log(np.arange(1, m + 1)) - math.log(m)) * factor
    return stats, beta, length_term


def row_by_row(stats, m, beta, length_term, mbic, min_size):
    F = np.empty((LANES, m + 1))
    last = np.empty((LANES, m + 1), dtype=np.int64)
    for w in range(LANES):
        changepoint._pelt(
            changepoint.MEAN, 2, stats[w], m, beta[w], length_term[w], mbic, min_size, F[w], last[w],
            np.empty(m + 1), np.empty((changepoint.MAX_STATS, m + 1)), np.empty(m + 1), np.empty(m + 1),
            np.empty(m + 1), np.empty((changepoint._BOX_ROWS, m + 1)),
        )  # fmt: skip
    return F, last


def groups():
    rng = np.random.default_rng(31)
    log = well_log()
    log = log[~np.isnan(log)]
    for m in (10, 23, 160, 700):
        rows = kinds(rng, m)
        yield f"kinds-{m}", rows[:LANES] + [rng.standard_normal(m) for _ in range(LANES - len(rows[:LANES]))]
    for m in (120, 500):  # the same real series, cut in windows (some calm, some with shifts)
        starts = rng.integers(0, len(log) - m, LANES)
        yield f"well_log-{m}", [log[s : s + m] for s in starts]


@pytest.mark.parametrize("penalty", ["bic", "mbic", 7.5])
@pytest.mark.parametrize("min_size", [1, 2, 5, 30])
def test_lanes_equal_the_search_row_by_row(penalty, min_size):
    for name, rows in groups():
        m = len(rows[0])
        if m < 2 * min_size:
            continue
        stats, beta, length_term = prepared(rows, penalty)
        mbic = penalty == "mbic"
        F, last = row_by_row(stats, m, beta, length_term, mbic, min_size)
        F_lanes = np.empty((LANES, m + 1))
        last_lanes = np.empty((LANES, m + 1), dtype=np.int64)
        changepoint._fpop_lanes(stats, m, beta, length_term, mbic, min_size, F_lanes, last_lanes)
        for w in range(LANES):
            assert F_lanes[w].tobytes() == F[w].tobytes(), (name, w)
            np.testing.assert_array_equal(last_lanes[w], last[w], err_msg=f"{name}, lane {w}")


def test_a_batch_segments_each_row_as_it_does_alone():
    # rows of one length and gaps (the same number of present values in groups of LANES and more,
    # and a few left over) go through the lanes; a row alone goes through the search of one row
    rng = np.random.default_rng(5)
    rows = []
    for i in range(3 * LANES + 3):
        x = kinds(rng, 300)[i % 8]
        x[40 : 40 + (10 if i % 3 else 12)] = np.nan
        rows.append(x)
    for penalty in ("bic", "mbic"):
        together = segments(Ragged.from_list(rows), "mean", penalty, 2, "none")
        for i, x in enumerate(rows):
            alone = segments(Ragged.from_list([x]), "mean", penalty, 2, "none").row(0)
            for field, values in together.row(i).items():
                np.testing.assert_array_equal(alone[field], values, err_msg=f"row {i}, {field}")


@pytest.mark.parametrize("min_size", [1, 2, 3])
def test_lanes_break_exact_ties_as_the_search_of_one_row(min_size):
    # piecewise constant integer values with no penalty: every start inside a block totals exactly
    # what the block's first start totals (the sums are exact integers, each block costs exactly 0),
    # so the answer rests on the tie-break (the earliest start among equal totals)
    rng = np.random.default_rng(17)
    m = 120
    stats = np.zeros((LANES, changepoint.MAX_STATS, m + 1))
    for w in range(LANES):
        z = np.repeat(rng.integers(-2, 3, m), rng.integers(1, 9, m))[:m].astype(float)
        stats[w, 0, 1:] = np.cumsum(z)
        stats[w, 1, 1:] = np.cumsum(z * z)
    beta = np.zeros(LANES)
    length_term = np.zeros((LANES, m + 1))
    F, last = row_by_row(stats, m, beta, length_term, False, min_size)
    F_lanes = np.empty((LANES, m + 1))
    last_lanes = np.empty((LANES, m + 1), dtype=np.int64)
    changepoint._fpop_lanes(stats, m, beta, length_term, False, min_size, F_lanes, last_lanes)
    for w in range(LANES):
        assert F_lanes[w].tobytes() == F[w].tobytes(), w
        np.testing.assert_array_equal(last_lanes[w], last[w], err_msg=f"lane {w}")


@njit
def picks(keep, a, b, zero):
    out = np.empty((3, len(a)))
    for i in range(len(a)):
        out[0, i] = changepoint._pick(keep[i], a[i], b[i])
        out[1, i] = changepoint._pick(keep[i], a[i], b[i] + zero[0])  # as the lanes store it back
        out[2, i] = a[i] if keep[i] else b[i]
    return out


def test_the_lanes_select_is_the_conditional_expression_bit_for_bit():
    # the lane pass stores selects (changepoint._pick) of values added to a -0.0 read at run time:
    # both must give exactly the conditional expression's bits, signed zeros and infinities included
    special = np.array([0.0, -0.0, np.inf, -np.inf, 5e-324, -1.5, 1e308, 3.0])
    a = np.repeat(special, len(special))
    b = np.tile(special, len(special))
    for keep in (np.ones(len(a), dtype=bool), np.zeros(len(a), dtype=bool), np.arange(len(a)) % 3 == 0):
        out = picks(keep, a, b, np.array([-0.0]))
        expected = np.where(keep, a, b)
        for row in out:
            assert row.tobytes() == expected.tobytes()
