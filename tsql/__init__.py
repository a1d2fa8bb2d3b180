"""tsql: time-series diagnostics as SQL functions over DuckDB."""

from typing import Any

__all__ = ["connect", "interrupt", "period_parts", "register", "report", "__version__"]
__version__ = "0.1.0"


def __getattr__(name: str) -> Any:
    # the DuckDB host loads on first use, so that other hosts (Spark) never import duckdb
    if name in ("connect", "interrupt", "register"):
        from tsql import binding

        return getattr(binding, name)
    if name == "report":
        from tsql.reporting import report

        return report
    if name == "period_parts":
        from tsql.forms.time import period_parts

        return period_parts
    raise AttributeError(f"module 'tsql' has no attribute {name!r}")
