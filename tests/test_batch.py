"""Arrow list arrays to ragged batches and back."""

import numpy as np
import pyarrow as pa

from tsql.forms import arrow as batch


def test_complete_doubles_are_not_copied():
    arr = pa.array([[1.0, 2.0], [3.0], []], type=pa.list_(pa.float64()))
    ragged = batch.to_ragged(arr)
    assert np.shares_memory(ragged.values, np.asarray(arr.values))
    assert ragged.offsets.tolist() == [0, 2, 3, 3]
    assert ragged.valid is None


def test_nulls_become_nan_and_invalid_rows():
    arr = pa.array([[1.0, None], None, [3.0]], type=pa.list_(pa.float64()))
    ragged = batch.to_ragged(arr)
    assert np.isnan(ragged.values[1]) and ragged.values[0] == 1.0
    assert ragged.valid.tolist() == [True, False, True]
    assert ragged.lengths.tolist() == [2, 0, 1]


def test_sliced_and_chunked_inputs():
    arr = pa.array([[1.0], [2.0, 3.0], [4.0, 5.0, 6.0], [7.0]], type=pa.list_(pa.float64()))
    ragged = batch.to_ragged(arr.slice(1, 2))
    assert ragged.offsets.tolist() == [0, 2, 5]
    assert ragged.values.tolist() == [2.0, 3.0, 4.0, 5.0, 6.0]
    chunked = pa.chunked_array([arr.slice(0, 2), arr.slice(2, 2)])
    assert batch.to_ragged(chunked).values.tolist() == [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0]


def test_null_row_covering_values_is_dropped():
    # Arrow allows a NULL list entry to span child values; they must not leak into a series
    offsets = pa.array([0, 2, 4, 5], type=pa.int32())
    values = pa.array([1.0, 2.0, 99.0, 99.0, 3.0])
    arr = pa.ListArray.from_arrays(offsets, values, mask=pa.array([False, True, False]))
    ragged = batch.to_ragged(arr)
    assert ragged.values.tolist() == [1.0, 2.0, 3.0]
    assert ragged.lengths.tolist() == [2, 0, 1]


def test_integer_and_large_lists_are_accepted():
    arr = pa.array([[1, 2, 3]], type=pa.large_list(pa.int64()))
    assert batch.to_ragged(arr).values.dtype == np.float64


def test_results_back_to_arrow():
    out = batch.to_arrow_scalar(np.array([1.0, np.nan, 3.0]), np.array([True, True, False]))
    assert out.to_pylist() == [1.0, None, None]
    fields = {"q": np.array([1.0, np.nan]), "p_value": np.array([0.5, np.nan])}
    struct = batch.to_arrow_struct(fields, {"q": pa.float64(), "p_value": pa.float64()})
    assert struct.to_pylist() == [{"q": 1.0, "p_value": 0.5}, None]


def test_kernels_see_one_argument_type_whichever_form_made_the_batch():
    # Arrow's zero-copy buffers are read-only, numpy's results writable; numba compiles a kernel once per
    # mix of the two, so every batch holds read-only views (and leaves the caller's own array alone).
    from tsql.kernels import changepoint
    from tsql.kernels.ragged import Ragged

    own = np.array([5.0, 6, 5, 6, 5, 6, 12, 13, 12, 13, 12, 13])
    from_numpy = Ragged(own, np.array([0, 12]), np.array([True]))
    from_arrow = batch.to_ragged(pa.array([own.tolist()], type=pa.large_list(pa.float64())))
    for made in (from_numpy, from_arrow):
        arrays = (made.values, made.offsets, made.row_valid)
        assert not any(a.flags.writeable for a in arrays) and all(a.flags.c_contiguous for a in arrays)
    assert own.flags.writeable and from_numpy.offsets.dtype == np.int64
    answers = [changepoint.change_points(b).values.tolist() for b in (from_numpy, from_arrow)]
    assert answers[0] == answers[1] == [7.0]
    assert len(changepoint._segment_rows.signatures) == 1


def test_an_agg_call_in_pieces_with_settings_by_group_answers_as_the_list_form():
    """A vector of groups larger than one piece is answered piece by piece, and groups with different settings
    apart and put back in order: each group's values are those of the list form on the same (complete, daily)
    series. Seeded synthetic data."""
    import tsql
    from tsql.forms.agg import PIECE_POINTS

    groups, points = 800, 400
    assert groups * points // 2 > 2 * PIECE_POINTS  # several pieces for each setting in one call
    rng = np.random.default_rng(5)
    values = np.sin(np.arange(points) / 3.0)[None, :] + rng.standard_normal((groups, points))
    con = tsql.connect()
    con.register(
        "src",
        pa.table(
            {
                "g": np.repeat(np.arange(groups, dtype=np.int32), points),
                "t": pa.array(np.tile(np.datetime64("2020-01-01") + np.arange(points), groups)).cast(pa.date32()),
                "v": values.ravel(),
            }
        ),
    )
    by_agg, by_list = (
        con.execute(
            "SELECT list_transform(harmonic_smooth_agg(v, t, harmonics := g % 2 + 1), lambda r: r.value), "
            "harmonic_smooth(list(v ORDER BY t), harmonics := g % 2 + 1) FROM src GROUP BY g ORDER BY g"
        )
        .fetchnumpy()
        .values()
    )
    assert len(by_agg) == groups
    for a, b in zip(by_agg, by_list):
        np.testing.assert_array_equal(np.asarray(a, dtype=float), np.asarray(b, dtype=float))
