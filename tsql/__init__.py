"""tsql: time-series diagnostics as SQL functions over DuckDB."""

from tsql.binding import connect, interrupt, register

__all__ = ["connect", "interrupt", "register", "__version__"]
__version__ = "0.1.0"
