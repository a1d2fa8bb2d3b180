"""SQL types as small values: each knows its SQL text, its Arrow type and its Spark type."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import pyarrow as pa

#: Field names quoted in type text (as the older hand-written types had them; DuckDB reads both).
_QUOTED = {"time", "text", "interval"}


def _name(field: str, quote: bool) -> str:
    return f'"{field}"' if quote and field in _QUOTED else field


class SqlType:
    """Base of the SQL types an argument or an answer can have."""

    @property
    def sql(self) -> str:
        raise NotImplementedError

    @property
    def arrow(self) -> pa.DataType:
        raise NotImplementedError

    def spark(self, time_type: str | None = None) -> Any:
        raise NotImplementedError

    def __str__(self) -> str:
        return self.sql


@dataclass(frozen=True)
class Scalar(SqlType):
    """One plain value: DOUBLE, INTEGER, BIGINT, TINYINT, VARCHAR, BOOLEAN or INTERVAL."""

    name: str

    @property
    def sql(self) -> str:
        return self.name

    @property
    def arrow(self) -> pa.DataType:
        return _ARROW[self.name]

    def spark(self, time_type: str | None = None) -> Any:
        from pyspark.sql import types as T

        kinds = {"DOUBLE": T.DoubleType, "INTEGER": T.IntegerType, "BIGINT": T.LongType, "VARCHAR": T.StringType}
        kinds.update({"TINYINT": T.ByteType, "BOOLEAN": T.BooleanType})
        return kinds[self.name]()


_ARROW = {
    "DOUBLE": pa.float64(),
    "INTEGER": pa.int32(),
    "BIGINT": pa.int64(),
    "TINYINT": pa.int8(),
    "VARCHAR": pa.string(),
    "BOOLEAN": pa.bool_(),
    "INTERVAL": pa.month_day_nano_interval(),
    "TIMESTAMP": pa.timestamp("us"),
    "TIMESTAMPTZ": pa.timestamp("us", tz="UTC"),
}

DOUBLE, INTEGER, BIGINT, TINYINT = Scalar("DOUBLE"), Scalar("INTEGER"), Scalar("BIGINT"), Scalar("TINYINT")
VARCHAR, BOOLEAN, INTERVAL = Scalar("VARCHAR"), Scalar("BOOLEAN"), Scalar("INTERVAL")
TIMESTAMP, TIMESTAMPTZ = Scalar("TIMESTAMP"), Scalar("TIMESTAMPTZ")


@dataclass(frozen=True)
class TimeOf(SqlType):
    """The type of the time column of an ``*_agg`` call (DATE, TIMESTAMP ... or a number)."""

    @property
    def sql(self) -> str:
        return "time"

    def spark(self, time_type: str | None = None) -> Any:
        from pyspark.sql import types as T

        kinds = {"date": T.DateType, "timestamp_ntz": T.TimestampNTZType, "timestamp": T.TimestampType}
        return kinds.get(time_type, T.DoubleType)()


TIME = TimeOf()


@dataclass(frozen=True)
class Struct(SqlType):
    """STRUCT(name type, ...), fields in order."""

    fields: tuple[tuple[str, SqlType], ...]

    @property
    def sql(self) -> str:
        fields = (f"{_name(n, n != 'time')} {t.sql}" for n, t in self.fields)  # a struct's time field stays bare
        return f"STRUCT({', '.join(fields)})"

    @property
    def arrow(self) -> pa.DataType:
        return pa.struct([(n, t.arrow) for n, t in self.fields])

    def spark(self, time_type: str | None = None) -> Any:
        from pyspark.sql import types as T

        return T.StructType([T.StructField(n, t.spark(time_type)) for n, t in self.fields])

    @property
    def names(self) -> list[str]:
        return [n for n, _ in self.fields]

    def replace(self, **changed: SqlType) -> Struct:
        """The same struct with some fields of another type."""
        return Struct(tuple((n, changed.get(n, t)) for n, t in self.fields))


def struct(**fields: SqlType) -> Struct:
    """``struct(period=DOUBLE, p_value=DOUBLE)``: a Struct whose fields keep the order given."""
    return Struct(tuple(fields.items()))


@dataclass(frozen=True)
class ListOf(SqlType):
    """T[]."""

    element: SqlType

    @property
    def sql(self) -> str:
        return f"{self.element.sql}[]"

    @property
    def arrow(self) -> pa.DataType:
        return pa.list_(self.element.arrow)

    def spark(self, time_type: str | None = None) -> Any:
        from pyspark.sql import types as T

        return T.ArrayType(self.element.spark(time_type))


@dataclass(frozen=True)
class Union(SqlType):
    """UNION(name type, ...): one of several members, as DuckDB has them."""

    members: tuple[tuple[str, SqlType], ...]

    @property
    def sql(self) -> str:
        return f"UNION({', '.join(f'{_name(n, True)} {t.sql}' for n, t in self.members)})"

    @property
    def arrow(self) -> pa.DataType:
        return pa.sparse_union([pa.field(n, t.arrow) for n, t in self.members])


SPAN = Union((("span", INTERVAL), ("number", DOUBLE)))
"""A period in time terms: an INTERVAL for DATE/TIMESTAMP times, a number for numeric times."""
MOMENT = Union((("time", TIMESTAMP), ("time_tz", TIMESTAMPTZ), ("number", DOUBLE)))
"""A grid time: TIMESTAMP for DATE/TIMESTAMP times, TIMESTAMPTZ for TIMESTAMPTZ, else a number."""
SPAN_ARGUMENT = Struct((("text", VARCHAR), ("interval", INTERVAL), ("number", DOUBLE)))
"""How a step or a length of time reaches a UDF: its text (for messages), as an INTERVAL, as a number."""
