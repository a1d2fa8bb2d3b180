"""The DuckDB host: connect()/register() create every tsql function on a connection.

For each registry entry, registration creates vectorised Arrow UDFs (``__tsql_<name>`` and, for
an ``*_agg`` form, ``__tsql_<name>_on_grid``) over :mod:`tsql.forms`, and generates the public
TEMP macros (named defaults, the ``*_agg`` forms) from the entry; ``sql/`` holds only the helper
macros they share. Nothing is written to the database file, so a read-only database works.
Also here: the catalog of reminders for unregistered cursors, and :func:`interrupt`.
"""

from __future__ import annotations

import itertools
import sys
import threading
import time
import weakref
from collections.abc import Callable
from dataclasses import replace
from importlib import resources
from typing import Any

import duckdb
import numpy as np
import pyarrow as pa

from tsql.forms import agg
from tsql.forms.arguments import argument_problem, by_settings, with_arity
from tsql.forms.arrow import ragged, row_pieces, single, to_ragged
from tsql.forms.list_form import cut_for_threads, list_udf, threads_setting
from tsql.forms.rows_form import rows_udf
from tsql.forms.time import Clock
from tsql.forms.types import BOOLEAN, SPAN_ARGUMENT, VARCHAR, SqlType, Struct
from tsql.kernels import parallel
from tsql.kernels.cancel import INTERRUPTED, Cancellation, watching
from tsql.kernels.ragged import Ragged
from tsql.registry import BY_NAME, FUNCTIONS, PUBLIC, TABLE_FUNCTIONS, TABLE_MACROS, Function, Param
from tsql.statements import split_statements


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
    _cancellation(con, create=True)
    _create_udfs(con)
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
        signatures = [fn.signature for fn in PUBLIC if fn not in TABLE_MACROS]
        signatures += [fn.agg_signature for fn in FUNCTIONS if fn.aggregate]
        macros = [
            f"CREATE MACRO {REMINDER_CATALOG}.main.{s} AS error('{reminder(s.split('(')[0])}')" for s in signatures
        ]
        macros += [
            f"CREATE MACRO {REMINDER_CATALOG}.main.{fn.signature} AS TABLE "
            f"SELECT *, error('{reminder(fn.name)}') AS q_value FROM query_table({fn.tables[0]})"
            for fn in TABLE_MACROS
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
    """Every macro definition: the helper macros of ``sql/`` (file order), then one or two per registry entry."""
    folder = resources.files("tsql.sql")
    statements = []
    for path in sorted((p for p in folder.iterdir() if p.name.endswith(".sql")), key=lambda p: p.name):
        statements += [s.text for s in split_statements(path.read_text(encoding="utf-8"))]
    for fn in FUNCTIONS:
        statements.append(list_macro(fn))
        if fn.aggregate:
            statements.append(agg_macro(fn))
    statements += [rows_macro(fn) for fn in TABLE_FUNCTIONS]
    statements += [f"CREATE OR REPLACE TEMP MACRO {fn.signature} AS TABLE {fn.body}" for fn in TABLE_MACROS]
    return statements


def list_macro(fn: Function) -> str:
    """``CREATE ... MACRO name(values DOUBLE[], p := default) AS __tsql_name(values, p)``, its arguments checked
    first (:func:`_checked`), and an untyped overload that says what is wrong with the arguments' types."""
    args = ", ".join(list(fn.series) + [_passed(p, agg=False) for p in fn.params])
    if cut_for_threads(fn):
        args += ", current_setting('threads')"
    body = fn.sql_body or f"{fn.udf_name}({args})"
    if fn.name == "on_grid":
        check = "__tsql_check_on_grid(typeof(times), __tsql_span(step), fill, same_time)"
        lengths = "error('on_grid: values and times must have the same length in every row')"
        body = f"CASE WHEN len(values) <> len(times) THEN {lengths} ELSE {body} END"
    else:
        check = f"{_check_name(fn.name)}({', '.join(_passed(p, agg=False) for p in fn.params)})" if fn.params else ""
    return _overloaded(fn.name, fn.series, fn.params, _checked(check, body), aggregate=fn.aggregate)


def agg_macro(fn: Function) -> str:
    """``CREATE ... MACRO name_agg(value DOUBLE, time, ...)``: the group's observations to the grid UDF, its answer
    finished in time terms as the entry's answer kind says; arguments checked first, and an untyped overload
    that says what is wrong with the arguments' types."""
    name = f"{fn.name}_agg"
    grid = ["__tsql_time_type(time)", "__tsql_span(step)", "fill", "same_time"]
    passed = [_passed(p, agg=True) for p in agg_udf_params(fn)]
    packed = "__tsql_observations" if len(fn.agg_values) == 1 else "__tsql_pairs"
    observations = f"{packed}({name!r}, {', '.join(fn.agg_values)}, time)"
    threads = ["current_setting('threads')"] if fn.name in agg.ROW_BY_ROW else []
    call = f"{fn.udf_name}_on_grid({', '.join([observations, *grid, *passed, *threads])})"
    if not fn.answer.errors_inside:
        call = f"__tsql_answer({call})"
    check = f"{_check_name(name)}({', '.join(grid + passed)})"
    body = _checked(check, fn.answer.finish_sql(fn.returns, call))
    return _overloaded(name, (*fn.agg_values, "time"), fn.agg_params, body, list_name=fn.name)


def agg_udf_params(fn: Function) -> tuple[Param, ...]:
    """The arguments an ``*_agg`` UDF takes after the grid's: the function's, then its ``time_params``."""
    return fn.params + fn.time_params


def rows_macro(fn: Function) -> str:
    """``CREATE ... MACRO name(id, series, ...)``: an aggregate over rows. The UDF gets the series in id order
    and answers in positions of that order, which become ids; rows with a NULL id are left out, a repeated
    id is an error."""
    ids = "(list(id ORDER BY id) FILTER (WHERE id IS NOT NULL))"
    per_item = [f"COALESCE({p.name}, false)" if p.sql_type == BOOLEAN else p.name for p in fn.params if p.per_item]
    gathered = [f"list({x} ORDER BY id) FILTER (WHERE id IS NOT NULL)" for x in ["series", *per_item]]
    call = f"{fn.udf_name}({', '.join(gathered + [_passed(p, agg=False) for p in fn.params if not p.per_item])})"
    fields = [
        f"{'id' if n == 'item' else n} := {f'{ids}[r.{n}]' if n in fn.positions else f'r.{n}'}"
        for n, _ in fn.returns.element.fields
    ]
    finish = f"list_transform({call}, lambda r: struct_pack({', '.join(fields)}))"
    repeated = f"error('{fn.name}: id must be unique (one row per item); found a repeated id')"
    body = f"CASE WHEN count(DISTINCT id) < count(id) THEN {repeated} ELSE {finish} END"
    check = f"{_check_name(fn.name)}({', '.join(_passed(p, agg=False) for p in _checked_params(fn))})"
    return _overloaded(fn.name, fn.series, fn.params, _checked(check, body), aggregate=False)


def _check_name(name: str) -> str:
    return f"__tsql_check_{name}"


def _checked(check: str, body: str) -> str:
    """``body`` once ``check`` (SQL giving a message or NULL) finds nothing wrong; else the message as an error.

    With constant arguments DuckDB folds the check when it plans the query: nothing is added per row.
    """
    return f"CASE WHEN {check} IS NULL THEN {body} ELSE error({check}) END" if check else body


# the SQL type names (typeof) of numbers
_NUMBER_TYPE = r"(U?(TINY|SMALL|BIG|HUGE)?INT(EGER)?|FLOAT|DOUBLE|DECIMAL\(\d+,\d+\))"
_TIME_TYPE = r"(DATE|TIMESTAMP(_S|_MS|_NS| WITH TIME ZONE)?)"
_NULL = ".?NULL.?"  # typeof(NULL) is "NULL", quotes included


def _overloaded(
    name: str, series: tuple[str, ...], params: tuple[Param, ...], body: str, aggregate: bool = False, list_name=""
) -> str:
    """The macro with its series typed (``values DOUBLE[]``; an ``*_agg`` form's ``value DOUBLE``), then overloads
    whose body is an error naming the argument that does not fit and the fix. DuckDB picks the typed one
    whenever the arguments can be cast to its types.

    Plain arguments stay untyped: DuckDB converts what it can (the text of ``seriesql run --param`` too) and
    its conversion error points at the argument. A list of text that reads as numbers is converted too:
    a separate ``VARCHAR[]`` overload would make DuckDB find a bare NULL (or a list beside untyped
    arguments) fitting two overloads equally well and refuse the call.
    """
    agg = bool(list_name)
    bare = list(series) + [p.name if p.default is None else f"{p.name} := {p.default}" for p in params]
    typed, whens, text = [], [], ""
    for s in series:
        if agg and s.endswith("value"):  # value, or a_value and b_value of two series
            typed.append(f"{s} DOUBLE")
            whens.append(_value_misuse(name, list_name, s))
            if series == ("value", "time"):
                as_text = ", ".join([f"{s} VARCHAR"] + bare[1:])
                text = f", ({as_text}) AS error('{name}: {s} must be a number, got VARCHAR: cast it, {s}::DOUBLE')"
        elif s == "times":
            typed.append(s)
            whens.append(
                f"WHEN NOT regexp_full_match(typeof(times), '{_TIME_TYPE}\\[\\]|{_NUMBER_TYPE}\\[\\]|{_NULL}') THEN "
                f"'{name}: times must be a list of DATE, TIMESTAMP, TIMESTAMPTZ or numbers, one per value, got ' "
                "|| typeof(times)"
            )
        elif s == "id" or (agg and s == "time"):  # any type that sorts; a time (checked by __tsql_time)
            typed.append(s)
        else:
            typed.append(f"{s} DOUBLE[]")
            whens.append(_series_misuse(name, s, aggregate))
    typed += bare[len(series) :]
    signature = _quoted(f"{name}({', '.join(bare)})")
    misuse = f"CASE {' '.join(whens)} ELSE '{name}: the arguments do not fit {signature}' END"
    return (
        f"CREATE OR REPLACE TEMP MACRO {name}({', '.join(typed)}) AS {body}{text}, "
        f"({', '.join(bare)}) AS error({misuse})"
    )


def _quoted(text: str) -> str:
    return text.replace("'", "''")


def _series_misuse(name: str, s: str, aggregate: bool) -> str:
    rows = f", or {name}_agg(x, t) over the rows" if aggregate else ""
    return (
        f"WHEN NOT regexp_full_match(typeof({s}), '{_NUMBER_TYPE}\\[\\]|{_NULL}') THEN "
        f"'{name}: {s} must be a list of numbers (one series per row), got ' || typeof({s}) || CASE "
        f"WHEN typeof({s}) LIKE '%[]' THEN ': cast the elements, list(x::DOUBLE ORDER BY t)' "
        f"ELSE ': aggregate each series to a list, list(x ORDER BY t) ... GROUP BY the series{rows}' END"
    )


def _value_misuse(name: str, list_name: str, s: str = "value") -> str:
    order = "(value, time)" if s == "value" else "(a_value, b_value, time)"
    return (
        f"WHEN NOT regexp_full_match(typeof({s}), '{_NUMBER_TYPE}|{_NULL}') THEN "
        f"'{name}: {s} must be a number, got ' || typeof({s}) || CASE "
        f"WHEN regexp_full_match(typeof({s}), '{_TIME_TYPE}') "
        f"THEN ': the arguments are {order}, in that order' "
        f"WHEN typeof({s}) LIKE '%[]' THEN ': one row per observation; for a list use {list_name}(values)' "
        f"ELSE ': cast it, {s}::DOUBLE' END"
    )


def _passed(p: Param, agg: bool) -> str:
    """How a macro hands an argument to its UDF: spans (agg forms) as ``__tsql_span``, 'word or number' as text."""
    if agg and p.span:
        return f"__tsql_span({p.name})"
    return f"{p.name}::VARCHAR" if p.number_ok else p.name


# --------------------------------------------------------------------------- #
# the UDFs
# --------------------------------------------------------------------------- #


def _create_udfs(con: duckdb.DuckDBPyConnection) -> None:
    grid_types = [VARCHAR.sql, SPAN_ARGUMENT.sql, VARCHAR.sql, VARCHAR.sql]  # time type, step, fill, same_time
    for fn in FUNCTIONS:
        if fn.special:
            continue
        params = [p.sql_type.sql for p in fn.params]
        cut = cut_for_threads(fn)
        types = ["DOUBLE[]"] * len(fn.series) + params + (["BIGINT"] if cut else [])
        create_udf(con, fn.udf_name, list_udf(fn, threads=cut), types, fn.returns)
        if fn.aggregate:
            params = [SPAN_ARGUMENT.sql if p.span else p.sql_type.sql for p in agg_udf_params(fn)]
            udf_returns = fn.answer.udf_returns(fn.returns)
            udf_returns = udf_returns if fn.answer.errors_inside else _or_error(udf_returns)
            packed = _OBSERVATIONS if len(fn.agg_values) == 1 else _PAIRS
            threads = ["BIGINT"] if fn.name in agg.ROW_BY_ROW else []
            udf_types = [packed] + grid_types + params + threads
            create_udf(con, f"{fn.udf_name}_on_grid", _agg_udf(fn), udf_types, udf_returns)
    for fn in TABLE_FUNCTIONS:
        per_item = [f"{p.sql_type.sql}[]" for p in fn.params if p.per_item]
        settings = [p.sql_type.sql for p in fn.params if not p.per_item]
        create_udf(con, fn.udf_name, rows_udf(fn), ["DOUBLE[][]", *per_item, *settings], fn.returns)
    for fn in FUNCTIONS + TABLE_FUNCTIONS:
        if _checked_params(fn) and not fn.special:
            create_udf(
                con, _check_name(fn.name), _list_check(fn), [p.sql_type.sql for p in _checked_params(fn)], VARCHAR
            )
        if fn.aggregate:
            params = [SPAN_ARGUMENT.sql if p.span else p.sql_type.sql for p in agg_udf_params(fn)]
            create_udf(con, _check_name(f"{fn.name}_agg"), _agg_check(fn), grid_types + params, VARCHAR)
    create_udf(con, _check_name("on_grid"), _agg_check(None), grid_types, VARCHAR)
    create_udf(con, "__tsql_message", _message_udf, ["DOUBLE"], VARCHAR)
    on_grid = with_arity(_on_grid_udf, "__tsql_on_grid", BY_NAME["on_grid"].doc, ["values", "times", *_GRID_ARGS])
    on_grid_returns = _or_error(BY_NAME["on_grid"].returns)
    create_udf(con, "__tsql_on_grid", on_grid, ["DOUBLE[]", "DOUBLE[]"] + grid_types, on_grid_returns)


def create_udf(
    con: duckdb.DuckDBPyConnection, name: str, udf: Callable, param_types: list[str], returns: SqlType
) -> None:
    """Create one vectorised Arrow UDF; one that exists already is left as it is.

    The UDF notes the database's interrupt counter on each call, for :func:`checkpoint`.
    """
    watched = watching(udf, _cancellation(con, create=True))
    try:
        con.create_function(name, watched, param_types, returns.sql, type="arrow", null_handling="special")
    except (duckdb.NotImplementedException, duckdb.CatalogException) as error:
        # UDFs belong to the whole connection: a second register() (or a cursor's) finds them there.
        if "already" not in str(error):
            raise


_GRID_ARGS = ["time_type", "step", "fill", "same_time"]
_TEMPORAL = {
    "DATE": "date",
    "TIMESTAMP": "timestamp",
    "TIMESTAMP_S": "timestamp",
    "TIMESTAMP_MS": "timestamp",
    "TIMESTAMP_NS": "timestamp",
    "TIMESTAMP WITH TIME ZONE": "timestamptz",
}
_NUMERIC = (
    "TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT", "UINTEGER", "UBIGINT", "UHUGEINT",
    "FLOAT", "DOUBLE", "DECIMAL",
)  # fmt: skip
# one group's observations (macro __tsql_observations): per row the bits of its tick (DOUBLE) in the
# high 64 bits and of its value (DOUBLE, NaN for NULL) in the low 64
_OBSERVATIONS = "UHUGEINT[]"
_TICK_WORD, _VALUE_WORD = (0, 1) if sys.byteorder == "big" else (1, 0)
# of a function of two series (macro __tsql_pairs): per row its tick and both values (NaN for NULL)
_PAIRS = "STRUCT(tick DOUBLE, a DOUBLE, b DOUBLE)[]"


def clock(function: str, type_name: str | None) -> Clock:
    """The clock of a time column from DuckDB's ``typeof``; an error naming ``function`` for any other type."""
    if type_name is None:  # an aggregate over no rows: its one NULL row needs no clock
        return Clock(None)
    name = type_name.removesuffix("[]")
    if name in _TEMPORAL:
        return Clock(_TEMPORAL[name])
    if not name.startswith(_NUMERIC):
        raise ValueError(f"{function}: time must be DATE, TIMESTAMP, TIMESTAMPTZ or a number, got {name}")
    return Clock("number")


def observations(column: Any) -> tuple[Ragged, Ragged]:
    """Ticks and values of each group from the macro's packed UHUGEINTs, without copying through Arrow."""
    arr = single(column)
    offsets = np.asarray(arr.offsets, dtype=np.int64)
    first = int(offsets[0])
    records = arr.values.slice(first, int(offsets[-1]) - first)
    # 16 bytes per observation, whatever Arrow calls them (decimal128, or DuckDB's opaque
    # extension type around fixed_size_binary[16]); never NULL (NaN stands for NULL)
    packed = records.storage if isinstance(records, pa.ExtensionArray) else records
    start, n = packed.offset, len(packed)
    words = np.frombuffer(packed.buffers()[1], dtype=np.float64, count=2 * (start + n))[2 * start :]
    offsets = offsets - first
    valid = np.asarray(arr.is_valid(), dtype=bool) if arr.null_count else None
    ticks = ragged(np.ascontiguousarray(words[_TICK_WORD::2]), offsets, valid)
    return ticks, ragged(np.ascontiguousarray(words[_VALUE_WORD::2]), offsets, valid)


def pairs(column: Any) -> tuple[Ragged, tuple[Ragged, Ragged]]:
    """Ticks and both values of each group from the macro's packed structs."""
    arr = single(column)
    offsets = np.asarray(arr.offsets, dtype=np.int64)
    first = int(offsets[0])
    records = arr.values.slice(first, int(offsets[-1]) - first)
    offsets = offsets - first
    valid = np.asarray(arr.is_valid(), dtype=bool) if arr.null_count else None
    # never NULL (NaN stands for NULL): each field is one plain buffer of doubles
    tick, a, b = (
        np.asarray(records.field(n).to_numpy(zero_copy_only=False), dtype=np.float64) for n in ("tick", "a", "b")
    )
    return ragged(tick, offsets, valid), (ragged(a, offsets, valid), ragged(b, offsets, valid))


def _checked_params(fn: Function) -> tuple[Param, ...]:
    """The arguments a macro checks before its call: the settings, not the per-item columns of an aggregate
    over rows (``dtw_nearest``'s ``reference``), which are data."""
    return tuple(p for p in fn.params if not p.per_item)


def _list_check(fn: Function) -> Callable[..., pa.Array]:
    """The UDF behind a macro's check of its plain arguments: per row the message of what is wrong, or NULL."""
    settings_only = replace(fn, params=_checked_params(fn))

    def udf(*settings: Any) -> pa.Array:
        return _messages(len(settings[0]), settings, lambda key: argument_problem(settings_only, key))

    return with_arity(udf, _check_name(fn.name), fn.doc, [p.name for p in settings_only.params])


def _agg_check(fn: Function | None) -> Callable[..., pa.Array]:
    """The UDF behind an ``*_agg`` macro's (or ``on_grid``'s) check of its time type and arguments."""
    name = f"{fn.name}_agg" if fn else "on_grid"

    def udf(type_column: Any, *settings: Any) -> pa.Array:
        def problem(key: tuple) -> str | None:
            type_name, span, fill, same_time, *arguments = key
            return agg.agg_problem(name, fn, lambda: clock(name, type_name), (span, fill, same_time), tuple(arguments))

        return _messages(len(type_column), (type_column, *settings), problem)

    return with_arity(
        udf, _check_name(name), name, [*_GRID_ARGS] + ([p.name for p in agg_udf_params(fn)] if fn else [])
    )


def _messages(n_rows: int, settings: Any, problem: Callable[[tuple], str | None]) -> pa.Array:
    def run(rows: np.ndarray | None, key: tuple) -> pa.Array:
        return pa.array([problem(key)] * (n_rows if rows is None else len(rows)), pa.string())

    return by_settings(n_rows, settings, run)


def _or_error(answer: SqlType) -> Struct:
    """What an ``*_agg`` UDF returns: its answer, or the message of an error found in the data, for the macro's
    ``error()`` (``__tsql_answer``): raised in Python, DuckDB would wrap it in its own words."""
    return Struct((("answer", answer), ("error", VARCHAR)))


def _answers_or_error(name: str, n: int, answers: Callable[[], pa.Array], answer_type: pa.DataType) -> pa.Array:
    """``answers()`` with no errors, or no answers and the message of an error of ``name``'s on every row."""
    try:
        found, errors = answers(), pa.nulls(n, pa.string())
    except ValueError as error:
        if not str(error).startswith(f"{name}: "):
            raise
        found, errors = pa.nulls(n, answer_type), pa.array([str(error)] * n, pa.string())
    return pa.StructArray.from_arrays([found, errors], names=["answer", "error"])


_MESSAGES: dict[int, str] = {}
_MESSAGES_KEPT = 10_000
_MESSAGE_NUMBERS = itertools.count(1)
_MESSAGES_LOCK = threading.Lock()


def _numbered(message: str) -> int:
    """A number for the message of an error found in the data, which ``__tsql_message`` gives back (the newest
    :data:`_MESSAGES_KEPT` are kept: the macro reads one at once, in the query whose UDF call made it)."""
    with _MESSAGES_LOCK:
        number = next(_MESSAGE_NUMBERS)
        _MESSAGES[number] = message
        if len(_MESSAGES) > _MESSAGES_KEPT:
            del _MESSAGES[next(iter(_MESSAGES))]
    return number


def _message_udf(numbers: Any) -> pa.Array:
    """``__tsql_message(number)``: the message numbered by :func:`_numbered`."""
    found = single(numbers).to_numpy(zero_copy_only=False)
    fallback = "an error found in the data, whose message is no longer kept: run the query again"
    return pa.array([_MESSAGES.get(int(x), fallback) if np.isfinite(x) else None for x in found], pa.string())


def _agg_udf(fn: Function) -> Callable[..., pa.Array]:
    """The UDF behind ``<name>_agg``: groups in pieces of about ``AggForm.piece_points`` observations.

    An error the data reveals (a given step that makes too many grid points, a length of time shorter than
    allowed on a group's grid) comes back as the message of every row (see :func:`_or_error`), or for an
    answer with ``errors_inside`` (``forms.answers.Series``) as rows that stand for it (:func:`_numbered`). For
    :data:`~tsql.forms.agg.ROW_BY_ROW` a last column gives DuckDB's number of threads, over which the pieces
    of a call run (a query of fewer groups than two calls would otherwise run on one thread).
    """
    form = agg.AggForm(fn)
    unpack = observations if len(fn.agg_values) == 1 else pairs
    answer_type = fn.answer.udf_returns(fn.returns).arrow
    cut = fn.name in agg.ROW_BY_ROW

    def udf(packed: Any, *settings: Any) -> pa.Array:
        obs = single(packed)
        threads = threads_setting(settings[-1]) if cut else 1
        settings = settings[: len(settings) - cut]

        def run(rows: np.ndarray | None, key: tuple) -> pa.Array:
            part = obs if rows is None else obs.take(pa.array(rows))
            type_name, span, fill, same_time, *arguments = key
            bounds = row_pieces([part], form.piece_points, min(threads, parallel.cores()))
            pieces = fn.answer.pieces(len(bounds), int(part.offsets[-1].as_py()) - int(part.offsets[0].as_py()))

            def work(i: int) -> None:
                lo, hi = bounds[i]
                ticks, values = unpack(part.slice(lo, hi - lo))
                grid = (span, fill, same_time)
                pieces.add(i, form(clock(form.name, type_name), grid, tuple(arguments), ticks, values))

            parallel.run_each(work, len(bounds), threads)
            return pieces.joined()

        if not fn.answer.errors_inside:
            return _answers_or_error(form.name, len(obs), lambda: by_settings(len(obs), settings, run), answer_type)
        try:
            return by_settings(len(obs), settings, run)
        except ValueError as error:
            if not str(error).startswith(f"{form.name}: "):
                raise
            return fn.answer.error_rows(fn.returns, len(obs), _numbered(str(error)))

    names = ["observations", *_GRID_ARGS] + [p.name for p in agg_udf_params(fn)] + (["threads"] if cut else [])
    return with_arity(udf, f"{fn.udf_name}_on_grid", fn.doc, names)


def _on_grid_udf(values: Any, ticks: Any, *settings: Any) -> pa.Array:
    values, ticks = single(values), single(ticks)

    def run(rows: np.ndarray | None, key: tuple) -> pa.Array:
        v = to_ragged(values if rows is None else values.take(pa.array(rows)))
        t = to_ragged(ticks if rows is None else ticks.take(pa.array(rows)))
        type_name, *grid = key
        return agg.on_grid_values(lambda: clock("on_grid", type_name), tuple(grid), t, v)

    return _answers_or_error(
        "on_grid", len(values), lambda: by_settings(len(values), settings, run), pa.list_(pa.float64())
    )
