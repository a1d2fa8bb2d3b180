"""tsql: time-series diagnostics as SQL functions over DuckDB."""

from tsql.binding import connect, register

__all__ = ["connect", "register", "__version__"]
__version__ = "0.1.0"
