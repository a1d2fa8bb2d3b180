"""tsql: time-series diagnostics as SQL functions over DuckDB."""
