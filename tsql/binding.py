"""Registration of every tsql function on a DuckDB connection.

For each registry entry this creates one vectorised Arrow UDF (internal name
``__tsql_<name>``), then runs the ``sql/`` files, which define the public TEMP
macros with their named defaults and ``*_agg`` forms. Nothing is written to
the database file, so a read-only database works.

Two helpers for other connections of the same database. An in-memory catalog
``tsql_needs_register`` holds one macro per public name that fails with "call
tsql.register(cursor) first", so that DuckDB's "Did you mean" on an
unregistered cursor points there. And every UDF of a database closes over one
:class:`~tsql.kernels.cancel.Cancellation`: :func:`interrupt` bumps it, and long kernels call
:func:`~tsql.kernels.cancel.checkpoint` between chunks of work, so that a long call stops too
(DuckDB itself looks at an interrupt only between UDF calls).

This layer owns SQL types, NULLs and argument errors; the kernels own the
mathematics.
"""

from __future__ import annotations

import inspect
import re
import threading
import time
import weakref
from collections.abc import Callable
from importlib import resources
from typing import Any

import duckdb
import numpy as np
import pyarrow as pa

from tsql import batch as arrow_batch
from tsql.kernels.cancel import INTERRUPTED, Cancellation, checkpoint, watching
from tsql.kernels.ragged import Ragged, RaggedRecords
from tsql.registry import FUNCTIONS, Function, Param

_ARROW_TYPES = {"DOUBLE": pa.float64(), "INTEGER": pa.int32(), "BIGINT": pa.int64(), "VARCHAR": pa.string()}


def connect(
    database: str = ":memory:", read_only: bool = False, config: dict | None = None
) -> duckdb.DuckDBPyConnection:
    """Open a DuckDB connection with every tsql function registered."""
    con = duckdb.connect(database, read_only=read_only, config=config or {})
    return register(con)


def register(con: duckdb.DuckDBPyConnection) -> duckdb.DuckDBPyConnection:
    """Register every tsql function on ``con``; calling it again is harmless.

    The Python UDFs are visible from every cursor of the connection; the TEMP
    macros (the public names) only on the connection or cursor passed here.
    A cursor without them is told to call ``tsql.register(cursor)`` (see
    :func:`_add_reminders`).
    """
    from tsql import timed  # it builds on this module

    _cancellation(con, create=True)
    for fn in FUNCTIONS:
        if not fn.special:
            _create_udf(con, fn)
    timed.create_udfs(con)
    for statement in sql_statements():
        con.execute(statement)
    _add_reminders(con)
    return con


#: The in-memory catalog of reminder macros; its name shows in DuckDB's "Did you mean" line.
REMINDER_CATALOG = "tsql_needs_register"
_REMINDERS_LOCK = threading.Lock()


def reminder(name: str) -> str:
    """What a tsql function says on a connection or cursor where tsql is not registered."""
    return (
        f"{name}: tsql is not registered on this cursor or connection: call tsql.register(cursor) first "
        "(tsql functions are TEMP macros, which DuckDB keeps per connection, and each con.cursor() is a new one)"
    )


def _add_reminders(con: duckdb.DuckDBPyConnection) -> None:
    """Attach, once per database, an in-memory catalog with one macro per public name that raises :func:`reminder`.

    An unregistered cursor's ``acf(...)`` then fails with DuckDB's ``Did you mean
    "tsql_needs_register.acf"?``, and that call (any arguments, named ones too)
    says what to do. The catalog is shared by every cursor and holds no tables; the
    user's own database is not touched. Where DuckDB refuses (say, a locked
    configuration) there are no reminders and nothing else changes.
    """
    exists = f"SELECT count(*) FROM duckdb_databases() WHERE database_name = '{REMINDER_CATALOG}'"
    with _REMINDERS_LOCK:  # cursors registered from several threads at once
        try:
            if con.execute(exists).fetchall()[0][0]:
                return
            # READ_WRITE: DuckDB would open it read-only beside a read-only file, and refuse
            con.execute(f"ATTACH ':memory:' AS {REMINDER_CATALOG} (READ_WRITE)")
        except duckdb.Error:
            return
        signatures = [fn.signature for fn in FUNCTIONS] + [fn.agg_signature for fn in FUNCTIONS if fn.aggregate]
        macros = [
            f"CREATE MACRO {REMINDER_CATALOG}.main.{s} AS error('{reminder(s.split('(')[0])}')" for s in signatures
        ]
        try:
            con.execute(";\n".join(macros))
        except duckdb.Error:
            try:
                con.execute(f"DETACH {REMINDER_CATALOG}")
            except duckdb.Error:
                pass


# --------------------------------------------------------------------------- #
# interrupting a long call
# --------------------------------------------------------------------------- #

#: How long after its request :func:`interrupt` stops once more the calls that began meanwhile (s).
_LATE_START = 0.05

_CANCELLATIONS: weakref.WeakValueDictionary[int, Cancellation] = weakref.WeakValueDictionary()
_BY_CONNECTION: weakref.WeakKeyDictionary[duckdb.DuckDBPyConnection, Cancellation] = weakref.WeakKeyDictionary()
_CANCELLATION_UDF = "__tsql_cancellation"


def _cancellation(con: duckdb.DuckDBPyConnection, create: bool) -> Cancellation | None:
    """The :class:`Cancellation` of ``con``'s database: made on its first registration (``create``), else found
    through the UDF ``__tsql_cancellation()`` (on a new cursor: ``con`` may be busy). None: tsql never registered."""
    cancel = _BY_CONNECTION.get(con)
    if cancel is not None:
        return cancel
    if create:
        fresh = Cancellation()
        _CANCELLATIONS[fresh.key] = fresh
        try:
            con.create_function(_CANCELLATION_UDF, lambda: fresh.key, [], "BIGINT")
            cancel = fresh
        except (duckdb.NotImplementedException, duckdb.CatalogException) as error:
            if "already" not in str(error):
                raise
    if cancel is None:
        look = con.cursor()
        try:
            cancel = _CANCELLATIONS.get(look.execute(f"SELECT {_CANCELLATION_UDF}()").fetchall()[0][0])
        except duckdb.CatalogException:  # no tsql on this database
            return None
        finally:
            look.close()
    if cancel is not None:
        _BY_CONNECTION[con] = cancel
    return cancel


def interrupt(con: duckdb.DuckDBPyConnection) -> None:
    """Stop the query ``con`` is running, also in the middle of a long tsql function call.

    ``con.interrupt()`` alone is seen by DuckDB only between two calls of a
    Python function, so one long call (a DTW pair of 100,000-point series) runs
    to its end. This calls it and also makes every tsql call running at that
    moment on ``con``'s database stop at its next :func:`checkpoint` (within about
    0.1 s for the DTW kernels), with the error ``interrupted by tsql.interrupt()``
    if DuckDB has not stopped the query first. That includes the calls of queries
    on other cursors of the same database: the UDFs cannot tell the connections
    apart. Calls that begin within 0.05 s are stopped too (DuckDB may have looked
    at the interrupt just before it came), which is why this returns after about
    0.05 s; calls that begin after it returns run normally. Safe from another
    thread or a signal handler; the connection stays usable.
    """
    cancel = _cancellation(con, create=False)
    con.interrupt()
    if cancel is not None:
        cancel.bump()
        time.sleep(_LATE_START)
        cancel.bump()


def was_interrupted(error: BaseException) -> bool:
    """Whether a query failed because of ``con.interrupt()`` or :func:`interrupt`."""
    return isinstance(error, duckdb.InterruptException) or INTERRUPTED in str(error)


def sql_statements() -> list[str]:
    """The macro definitions from ``sql/``, one statement each, in file order."""
    folder = resources.files("tsql.sql")
    statements = []
    for path in sorted((p for p in folder.iterdir() if p.name.endswith(".sql")), key=lambda p: p.name):
        text = path.read_text(encoding="utf-8")
        statements += [s.strip() for s in _split_statements(text) if s.strip()]
    return statements


def _split_statements(text: str) -> list[str]:
    body = "\n".join(line for line in text.splitlines() if not line.lstrip().startswith("--"))
    return body.split(";")


def _create_udf(con: duckdb.DuckDBPyConnection, fn: Function) -> None:
    param_types = ["DOUBLE[]"] * len(fn.series) + [p.sql_type for p in fn.params]
    create_udf(con, fn.udf_name, make_udf(fn), param_types, fn.returns)


def create_udf(con: duckdb.DuckDBPyConnection, name: str, udf: Callable, param_types: list[str], returns: str) -> None:
    """Create one vectorised Arrow UDF; one that exists already is left as it is.

    The UDF notes the database's interrupt counter on each call, for :func:`checkpoint`.
    """
    watched = watching(udf, _cancellation(con, create=True))
    try:
        con.create_function(name, watched, param_types, returns, type="arrow", null_handling="special")
    except (duckdb.NotImplementedException, duckdb.CatalogException) as error:
        # UDFs belong to the whole connection: a second register() (or a cursor's) finds them there.
        if "already" not in str(error):
            raise


def make_udf(fn: Function) -> Callable[..., pa.Array]:
    """The vectorised function DuckDB (or another Arrow host) calls.

    It receives one Arrow column per argument for a whole vector of rows.
    Plain parameters are usually the same on every row; rows are grouped by
    their parameter values so the kernel always sees one setting per call.
    """
    convert = _Converter(fn.returns)
    n_series = len(fn.series)

    def udf(*columns: Any) -> pa.Array:
        series = [arrow_batch._single(c) for c in columns[:n_series]]

        def run(rows: np.ndarray | None, key: tuple) -> pa.Array:
            subset = series if rows is None else [s.take(pa.array(rows)) for s in series]
            return _run(fn, convert, subset, key, len(series[0]) if rows is None else len(rows))

        return by_settings(len(series[0]), columns[n_series:], run)

    return with_arity(udf, fn.udf_name, fn.doc, list(fn.series) + [p.name for p in fn.params])


def with_arity(udf: Callable, name: str, doc: str, argument_names: list[str]) -> Callable:
    """Name ``udf`` and give it a signature of exactly these arguments (DuckDB checks the arity)."""
    udf.__name__ = name
    udf.__doc__ = doc
    positional = inspect.Parameter.POSITIONAL_ONLY
    udf.__signature__ = inspect.Signature([inspect.Parameter(n, positional) for n in argument_names])
    return udf


def by_settings(n_rows: int, setting_columns: Any, run: Callable[[np.ndarray | None, tuple], pa.Array]) -> pa.Array:
    """Call ``run(rows, settings)`` once per distinct tuple of plain arguments and reassemble the rows.

    Plain parameters are usually the same on every row (``rows`` is then None: all of them).
    """
    settings = [arrow_batch.scalar_parameter(c) for c in setting_columns]
    return by_keys(list(zip(*settings)) if settings else [()] * n_rows, run)


def by_keys(keys: list[tuple], run: Callable[[np.ndarray | None, tuple], pa.Array]) -> pa.Array:
    """Call ``run(rows, key)`` once per distinct key (one per row) and put the rows back in order."""
    distinct = dict.fromkeys(keys)
    if len(distinct) <= 1:
        return run(None, next(iter(distinct), ()))
    groups: dict[tuple, list[int]] = {key: [] for key in distinct}
    for i, key in enumerate(keys):
        groups[key].append(i)
    parts, order = [], []
    for key, members in groups.items():
        checkpoint()
        rows = np.asarray(members, dtype=np.int64)
        parts.append(run(rows, key))
        order.append(rows)
    joined = pa.concat_arrays(parts)
    return joined.take(pa.array(np.argsort(np.concatenate(order), kind="stable")))


def _run(fn: Function, convert: Callable, series: list[pa.Array], key: tuple, n_rows: int) -> pa.Array:
    kwargs = checked_arguments(fn, key)
    if kwargs is None:  # a NULL argument that has no "not set" meaning
        return pa.nulls(n_rows, type=convert.arrow_type)
    batches = [arrow_batch.to_ragged(s) for s in series]
    result = fn.kernel(*batches, **kwargs)
    valid = batches[0].row_valid
    for b in batches[1:]:
        valid = valid & b.row_valid
    return convert(result, valid)


def checked_arguments(fn: Function, key: tuple, name: str | None = None) -> dict | None:
    """The plain arguments as keyword arguments for the kernel, checked; None when a NULL one makes the row NULL.

    Errors name ``name`` (default: the function's own name; the *_agg forms pass theirs).
    """
    name = name or fn.name
    kwargs = {}
    for p, value in zip(fn.params, key):
        if value is None:
            if not p.none_ok:
                return None
            kwargs[p.name] = None
            continue
        kwargs[p.name] = check_argument(name, p, value)
    for smaller, larger, message in fn.relations:
        a, b = kwargs.get(smaller), kwargs.get(larger)
        if a is not None and b is not None and b < a:
            raise ValueError(f"{name}: {message}, got {smaller} = {_show(a)} and {larger} = {_show(b)}")
    problem = fn.check(kwargs) if fn.check else None
    if problem:
        raise ValueError(f"{name}: {problem}")
    return kwargs


def check_argument(function: str, p: Param, value: Any) -> Any:
    """Validate one plain argument; raise ``ValueError`` naming what is allowed."""
    if p.choices:
        if value in p.choices:
            return value
        allowed = ", ".join(repr(c) for c in p.choices)
        if not p.number_ok:
            raise ValueError(f"{function}: {p.name} must be one of {allowed}, got {value!r}")
        try:
            value = float(value)
        except ValueError:
            raise ValueError(f"{function}: {p.name} must be one of {allowed} or a number, got {value!r}") from None
    if isinstance(value, float) and not np.isfinite(value):
        raise ValueError(f"{function}: {p.name} must be a finite number, got {value}")
    if p.whole:
        if float(value) != int(value):
            raise ValueError(f"{function}: {p.name} must be a whole number, got {_show(value)}")
        value = int(value)
    if p.minimum is not None and value < p.minimum:
        raise ValueError(f"{function}: {p.name} must be >= {_show(p.minimum)}, got {_show(value)}")
    if p.maximum is not None and value > p.maximum:
        raise ValueError(f"{function}: {p.name} must be <= {p.maximum:,g}, got {_show(value)}")
    return value


def _show(x: Any) -> str:
    return str(int(x)) if isinstance(x, float) and x.is_integer() else str(x)


class _Converter:
    """Turns a kernel result into the Arrow array of the declared SQL type.

    DOUBLE from a per-row array; STRUCT(...) from a dict of per-row arrays;
    T[] from a Ragged; STRUCT(...)[] from a RaggedRecords.
    """

    def __init__(self, sql_type: str):
        self.sql_type = sql_type
        self.is_list = sql_type.endswith("[]")
        element = sql_type[:-2] if self.is_list else sql_type
        struct = re.fullmatch(r"STRUCT\((.*)\)", element)
        if struct:
            fields = [f.strip().split() for f in struct.group(1).split(",")]
            self.fields = {name: _ARROW_TYPES[t] for name, t in fields}
            self.element = pa.struct(list(self.fields.items()))
        else:
            self.fields = None
            self.element = _ARROW_TYPES[element]
        self.arrow_type = pa.list_(self.element) if self.is_list else self.element

    def __call__(self, result: Any, valid: np.ndarray) -> pa.Array:
        if self.is_list and self.fields:
            assert isinstance(result, RaggedRecords)
            return arrow_batch.to_arrow_record_list(result, self.fields, result.row_valid & valid)
        if self.is_list:
            assert isinstance(result, Ragged)
            rows = result.row_valid & valid
            return arrow_batch.to_arrow_list(Ragged(result.values, result.offsets, rows), self.element)
        if self.fields:
            return arrow_batch.to_arrow_struct(result, self.fields, valid)
        if pa.types.is_string(self.element):  # a list of str, None = NULL
            return pa.array([r if ok else None for r, ok in zip(result, valid)], type=pa.string())
        return arrow_batch.to_arrow_scalar(result, valid)
