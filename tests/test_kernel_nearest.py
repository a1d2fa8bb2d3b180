"""dtw_nearest against brute force: every pair through dtw_distance (the reference), then a ranking.

Exactness is the whole promise of the kernel (its bounds may only drop pairs that cannot be among the k
nearest), so the checks compare neighbours and distances exactly, bit for bit, on seeded random sets with
ties, gaps, unusable rows, unequal lengths, bands and normalising.
"""

import doctest

import numpy as np
import pytest

from tsql.kernels import nearest
from tsql.kernels.cancel import Cancellation, Interrupted, checkpoint, watching
from tsql.kernels.dtw import dtw_distance
from tsql.kernels.nearest import dtw_nearest, prepare
from tsql.kernels.ragged import Ragged


def brute_force(ids, series, k, band, normalize, reference=None):
    """(item, neighbor, distance, rank) records from every ordered pair's dtw_distance."""
    filled, usable = prepare(series, False)
    count = series.n_rows
    reference = np.ones(count, bool) if reference is None else reference
    first, second = (a.ravel() for a in np.meshgrid(np.arange(count), np.arange(count), indexing="ij"))
    table = dtw_distance(filled.take(first), filled.take(second), band=band, normalize=normalize)
    table = table.reshape(count, count)
    records = []
    for i in range(count):
        if not usable[i]:
            continue
        others = [j for j in range(count) if j != i and usable[j] and reference[j]]
        others.sort(key=lambda j: (table[i, j], ids[j]))
        records += [(i, j, table[i, j], rank) for rank, j in enumerate(others[:k], 1)]
    return records


def records(found):
    return list(zip(found["item"].tolist(), found["neighbor"].tolist(), found["distance"].tolist(),
                    found["rank"].tolist()))  # fmt: skip


def random_set(rng, count, lengths, digits, gaps):
    rows = [np.round(np.cumsum(rng.standard_normal(int(n))), digits) for n in lengths]
    for row in rows:
        if gaps and len(row) > 2 and rng.random() < 0.3:
            row[rng.integers(0, len(row), 2)] = np.nan
    return rows


@pytest.mark.parametrize("band", [None, 0, 2, 5])
@pytest.mark.parametrize("normalize", [False, True])
def test_equals_brute_force(band, normalize):
    rng = np.random.default_rng(18 + (band or 0) + 10 * normalize)
    for trial in range(6):
        count = int(rng.integers(2, 45))
        lengths = rng.integers(1, 16, count) if trial % 2 else np.full(count, int(rng.integers(2, 24)))
        rows = random_set(rng, count, lengths, digits=0 if trial % 3 == 0 else 6, gaps=trial > 2)
        series = Ragged.from_list(rows)
        ids = rng.permutation(count) * 7 - 50
        k = int(rng.integers(1, 7))
        got = dtw_nearest(ids, series, k=k, band=band, normalize=normalize)
        assert records(got) == brute_force(ids, series, k, band, normalize)


def test_ties_go_to_the_smaller_id():
    # rounded steps of one: many pairs at exactly the same distance
    rng = np.random.default_rng(3)
    rows = [rng.integers(0, 3, 6).astype(float) for _ in range(40)]
    ids = np.array([f"item-{n:03d}" for n in rng.permutation(40)])
    series = Ragged.from_list(rows)
    got = dtw_nearest(ids, series, k=4)
    assert records(got) == brute_force(ids, series, 4, None, False)
    distances = got["distance"].reshape(40, 4)
    assert (np.diff(distances, axis=1) == 0).any()  # the ties were there
    neighbors = ids[got["neighbor"].reshape(40, 4)]
    tied = distances[:, 1:] == distances[:, :-1]
    assert (neighbors[:, 1:][tied] > neighbors[:, :-1][tied]).all()


def test_reference_set():
    rng = np.random.default_rng(5)
    rows = random_set(rng, 30, np.full(30, 12), digits=6, gaps=False)
    reference = rng.random(30) < 0.5
    series = Ragged.from_list(rows)
    got = dtw_nearest(np.arange(30), series, k=3, reference=reference)
    assert records(got) == brute_force(np.arange(30), series, 3, None, False, reference)
    assert reference[got["neighbor"]].all()


def test_row_order_does_not_matter():
    rng = np.random.default_rng(11)
    rows = random_set(rng, 35, rng.integers(5, 15, 35), digits=0, gaps=True)
    ids = np.arange(35) * 3
    got = dtw_nearest(ids, Ragged.from_list(rows), k=3)
    shuffle = rng.permutation(35)
    again = dtw_nearest(ids[shuffle], Ragged.from_list([rows[s] for s in shuffle]), k=3)
    first = sorted((ids[a], ids[b], d, r) for a, b, d, r in records(got))
    second = sorted((ids[shuffle][a], ids[shuffle][b], d, r) for a, b, d, r in records(again))
    assert first == second


def test_gaps_are_filled_linearly_and_by_the_nearest_value():
    filled, usable = prepare(Ragged.from_list([[np.nan, 2.0, np.nan, np.nan, 8.0, np.nan], [np.nan, np.nan]]))
    assert filled.row(0).tolist() == [2.0, 2.0, 4.0, 6.0, 8.0, 8.0]
    assert usable.tolist() == [True, False]
    # the gap changes nothing when the filled value is the one that was there
    whole = Ragged.from_list([[1.0, 2.0, 3.0, 4.0], [2.0, 3.0, 5.0, 4.0], [0.0, 0.0, 9.0, 9.0]])
    holed = Ragged.from_list([[1.0, np.nan, 3.0, 4.0], [2.0, 3.0, 5.0, 4.0], [np.nan, 0.0, 9.0, np.nan]])
    assert records(dtw_nearest(np.arange(3), holed, k=2)) == records(dtw_nearest(np.arange(3), whole, k=2))


def test_unusable_rows_take_no_part():
    series = Ragged.from_list([[1.0, 2.0], None, [], [np.nan, np.nan], [1.0, np.inf], [1.0, 3.0], [5.0, 5.0]])
    got = dtw_nearest(np.arange(7), series, k=5)
    assert set(got["item"].tolist()) == {0, 5, 6}
    assert set(got["neighbor"].tolist()) == {0, 5, 6}
    assert np.bincount(got["item"], minlength=7)[[0, 5, 6]].tolist() == [2, 2, 2]  # fewer than k others
    alone = dtw_nearest(np.array([1]), Ragged.from_list([[1.0, 2.0]]))
    assert all(len(v) == 0 for v in alone.values())


def test_extreme_magnitudes_scale_exactly():
    rng = np.random.default_rng(2)
    rows = [np.cumsum(rng.standard_normal(10)) for _ in range(12)]
    small = dtw_nearest(np.arange(12), Ragged.from_list(rows), k=2)
    huge = dtw_nearest(np.arange(12), Ragged.from_list([r * 2.0**600 for r in rows]), k=2)
    assert huge["neighbor"].tolist() == small["neighbor"].tolist()
    np.testing.assert_array_equal(huge["distance"], small["distance"] * 2.0**600)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"ids": np.array([1, 1, 2])}, "unique"),
        ({"ids": np.array([1, 2])}, "one id per series"),
        ({"k": 0}, "k must be"),
        ({"band": -1}, "band must be"),
        ({"ids": np.array([1, None, 2], dtype=object)}, "none missing"),
    ],
)
def test_bad_input_names_the_function(kwargs, message):
    args = {"ids": np.array([1, 2, 3]), "series": Ragged.from_list([[1.0], [2.0], [3.0]])} | kwargs
    with pytest.raises(ValueError, match=f"dtw_nearest: .*{message}"):
        dtw_nearest(**args)


def test_docstring_examples():
    assert doctest.testmod(nearest, extraglobs={"np": np}).failed == 0


def test_a_long_call_looks_for_an_interrupt_between_pieces_and_stops(monkeypatch):
    rng = np.random.default_rng(6)
    series = Ragged.from_list([np.cumsum(rng.standard_normal(20)) for _ in range(300)])
    monkeypatch.setattr(nearest, "_PAIRS_PER_PIECE", 300 * 20)  # pieces of 20 items
    expected = dtw_nearest(np.arange(300), series, k=3)
    cancel, looks = Cancellation(), []

    def look(stop_after=None):
        looks.append(1)
        if stop_after is not None and len(looks) == stop_after:
            cancel.bump()
        checkpoint()

    monkeypatch.setattr(nearest, "checkpoint", look)
    got = watching(lambda: dtw_nearest(np.arange(300), series, k=3), cancel)()
    assert len(looks) == 15
    assert records(got) == records(expected)  # pieces change no answer
    looks.clear()
    monkeypatch.setattr(nearest, "checkpoint", lambda: look(3))
    with pytest.raises(Interrupted, match="interrupted by tsql.interrupt"):
        watching(lambda: dtw_nearest(np.arange(300), series, k=3), cancel)()
    assert len(looks) == 3
