"""Arrow conversion: list columns to :class:`~tsql.kernels.ragged.Ragged` batches, kernel results to Arrow.

DuckDB hands a vectorised UDF a ``pyarrow.ChunkedArray`` of lists, Spark a ``pyarrow.ListArray``;
both become one batch without copying values that hold no NULLs. NaN in a result is NULL.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pyarrow as pa

from tsql.forms.types import VARCHAR, ListOf, SqlType, Struct
from tsql.kernels.ragged import CACHE_ELEMENTS, Ragged, RaggedRecords, row_ranges

ArrowInput = pa.Array | pa.ChunkedArray
_DOUBLE = pa.float64()


def single(arr: ArrowInput) -> pa.Array:
    """One Arrow array from a (chunked) column."""
    if isinstance(arr, pa.ChunkedArray):
        if arr.num_chunks == 1:
            return arr.chunk(0)
        if arr.num_chunks == 0:
            return pa.array([], type=arr.type)
        return arr.combine_chunks()
    return arr


def to_ragged(arr: ArrowInput) -> Ragged:
    """One batch of series from a list array (list or large_list of numbers)."""
    arr = single(arr)
    if not (pa.types.is_list(arr.type) or pa.types.is_large_list(arr.type)):
        raise TypeError(f"expected a list array, got {arr.type}")
    offsets = np.asarray(arr.offsets, dtype=np.int64)
    start, end = int(offsets[0]), int(offsets[-1])
    child = arr.values.slice(start, end - start)
    if not pa.types.is_float64(child.type):
        child = child.cast(pa.float64())
    # Floating-point nulls become NaN; without nulls this is a read-only view.
    values = child.to_numpy(zero_copy_only=child.null_count == 0)
    offsets = offsets - start if start else offsets
    return ragged(values, offsets, np.asarray(arr.is_valid(), dtype=bool) if arr.null_count else None)


def ragged(values: np.ndarray, offsets: np.ndarray, valid: np.ndarray | None) -> Ragged:
    """A batch from flat values, offsets from 0 and row validity, dropping values a NULL row covers."""
    if valid is not None:
        lengths = np.diff(offsets)
        if lengths[~valid].any():  # Arrow lets a NULL row cover values: drop them.
            keep = np.repeat(valid, lengths)
            values = values[keep]
            offsets = np.zeros_like(offsets)
            np.cumsum(np.where(valid, lengths, 0), out=offsets[1:])
    return Ragged(values, offsets, valid)


def to_arrow(sql_type: SqlType, result: Any, valid: np.ndarray) -> pa.Array:
    """A kernel result as the Arrow array of ``sql_type``, rows not ``valid`` NULL.

    DOUBLE (or VARCHAR) from a per-row array, STRUCT from a dict of per-row arrays, T[] from a
    Ragged, STRUCT(...)[] from a RaggedRecords, or from a tuple ``(records, *lists)`` when fields of
    the struct are lists: one Ragged per list field, in field order, with one row per record;
    STRUCT(a T[], ...) from a dict of Ragged (a row is NULL where the first one's row is invalid).
    """
    if isinstance(sql_type, ListOf) and isinstance(sql_type.element, Struct):
        if isinstance(result, tuple):
            records, *lists = result
            names = [n for n, t in sql_type.element.fields if isinstance(t, ListOf)]
            result = RaggedRecords(dict(records.fields, **dict(zip(names, lists))), records.offsets, records.valid)
        assert isinstance(result, RaggedRecords)
        types = {n: t.arrow for n, t in sql_type.element.fields}
        return to_arrow_record_list(result, types, result.row_valid & valid)
    if isinstance(sql_type, ListOf):
        assert isinstance(result, Ragged)
        rows = result.row_valid & valid
        return to_arrow_list(Ragged(result.values, result.offsets, rows), sql_type.element.arrow)
    if isinstance(sql_type, Struct) and isinstance(sql_type.fields[0][1], ListOf):
        return to_arrow_list_struct(result, {n: t.element.arrow for n, t in sql_type.fields}, valid)
    if isinstance(sql_type, Struct):
        return to_arrow_struct(result, {n: t.arrow for n, t in sql_type.fields}, valid)
    if sql_type == VARCHAR:  # a list of str, None = NULL
        return pa.array([r if ok else None for r, ok in zip(result, valid)], type=pa.string())
    return to_arrow_scalar(result, valid)


def to_arrow_scalar(result: np.ndarray, row_valid: np.ndarray | None = None) -> pa.Array:
    """DOUBLE per row; NaN and invalid rows become NULL."""
    result = np.asarray(result, dtype=np.float64)
    mask = np.isnan(result)
    if row_valid is not None:
        mask |= ~row_valid
    return pa.array(result, type=pa.float64(), mask=mask if mask.any() else None)


def to_arrow_struct(
    fields: Mapping[str, np.ndarray], types: Mapping[str, pa.DataType], row_valid: np.ndarray | None = None
) -> pa.StructArray:
    """STRUCT per row; a row whose fields are all NaN (or an invalid row) is NULL."""
    arrays, row_null = [], None
    for name in types:
        values = np.asarray(fields[name], dtype=np.float64)
        missing = np.isnan(values)
        row_null = missing if row_null is None else row_null & missing
        arrays.append(_typed(values, missing, types[name]))
    if row_valid is not None:
        row_null = row_null | ~row_valid
    return pa.StructArray.from_arrays(arrays, names=list(types), mask=pa.array(row_null) if row_null.any() else None)


def to_arrow_list_struct(
    fields: Mapping[str, Ragged], types: Mapping[str, pa.DataType], row_valid: np.ndarray
) -> pa.StructArray:
    """STRUCT of lists per row from Ragged results sharing their rows; NaN elements are NULL."""
    valid = next(iter(fields.values())).row_valid & row_valid
    arrays = [to_arrow_list(Ragged(fields[n].values, fields[n].offsets, valid), t) for n, t in types.items()]
    mask = None if valid.all() else pa.array(~valid)
    return pa.StructArray.from_arrays(arrays, names=list(types), mask=mask)


def to_arrow_list(batch: Ragged, value_type: pa.DataType = _DOUBLE) -> pa.ListArray:
    """LIST per row from a ragged result; NaN elements and invalid rows are NULL."""
    values = np.asarray(batch.values, dtype=np.float64)
    missing = np.isnan(values)
    child = _typed(values, missing, value_type)
    offsets = pa.array(batch.offsets.astype(np.int32))
    mask = None if batch.valid is None or batch.valid.all() else pa.array(~batch.valid)
    return pa.ListArray.from_arrays(offsets, child, mask=mask)


def to_arrow_record_list(
    records: RaggedRecords, types: Mapping[str, pa.DataType], row_valid: np.ndarray | None = None
) -> pa.ListArray:
    """LIST of STRUCT per row from a RaggedRecords; NaN and infinite fields are NULL (an infinite field is a
    bound left open: a path's first ``penalty_to``); a Ragged field is a list per record."""
    arrays = []
    for name, arrow_type in types.items():
        if isinstance(records.fields[name], Ragged):
            arrays.append(to_arrow_list(records.fields[name], arrow_type.value_type))
            continue
        values = np.asarray(records.fields[name])
        missing = ~np.isfinite(values) if values.dtype.kind == "f" else np.zeros(len(values), dtype=bool)
        arrays.append(_typed(values, missing, arrow_type))
    child = pa.StructArray.from_arrays(arrays, names=list(types))
    valid = records.row_valid if row_valid is None else row_valid
    mask = None if valid.all() else pa.array(~valid)
    return pa.ListArray.from_arrays(pa.array(records.offsets.astype(np.int32)), child, mask=mask)


def _typed(values: np.ndarray, missing: np.ndarray, arrow_type: pa.DataType) -> pa.Array:
    if pa.types.is_integer(arrow_type):
        values = np.where(missing, 0, values).astype(arrow_type.to_pandas_dtype())
    return pa.array(values, type=arrow_type, mask=missing if missing.any() else None)


def scalar_parameter(arr: ArrowInput) -> Sequence:
    """A per-row parameter column as a Python list (NULL = None; a STRUCT becomes a tuple)."""
    arr = single(arr)
    if pa.types.is_struct(arr.type):
        return [None if r is None else tuple(r.values()) for r in arr.to_pylist()]
    return arr.to_pylist()


def row_pieces(columns: list[pa.Array], elements: int = CACHE_ELEMENTS, threads: int = 1) -> list[tuple[int, int]]:
    """Row ranges of about ``elements`` list elements each, all columns counted (see :func:`row_ranges`).

    For ``threads`` taking the pieces in turn, as many pieces as a multiple of ``threads``, of even size
    (at most ``elements``): the threads then run out of pieces together, rather than one waiting for
    another's last, larger piece.
    """
    counts = np.zeros(len(columns[0]) + 1, dtype=np.int64)
    for column in columns:
        offsets = np.asarray(column.offsets, dtype=np.int64)
        counts += offsets - offsets[0]
    if threads > 1 and counts[-1] > elements:
        rounds = -(-int(counts[-1]) // (elements * threads))  # each thread takes this many pieces
        elements = -(-int(counts[-1]) // (rounds * threads))
    return row_ranges(counts, elements)
