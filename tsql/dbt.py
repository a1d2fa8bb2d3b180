"""dbt host: a dbt-duckdb plugin that makes every tsql function callable from models.

List it under the DuckDB target in ``profiles.yml``::

    my_project:
      target: dev
      outputs:
        dev:
          type: duckdb
          path: warehouse.duckdb
          plugins:
            - module: tsql.dbt

No ``module_paths`` entry is needed: the module is installed with tsql
(``pip install 'seriesql[dbt]'``). A model can then call any tsql function::

    select item, seasonality_agg(units, month) as seasonality
    from {{ ref('monthly_units') }}
    group by item

The functions are TEMP macros, so they exist only on connections where tsql is
registered. A model materialised as a view that calls them can be read only
where tsql is loaded; materialise it as a table for other readers.

This is the only module of tsql that imports dbt; ``import tsql`` works without it.
"""

from __future__ import annotations

import duckdb
from dbt.adapters.duckdb.plugins import BasePlugin

from tsql.binding import register


class Plugin(BasePlugin):
    """Registers tsql on each connection and each cursor dbt-duckdb opens."""

    def configure_connection(self, conn: duckdb.DuckDBPyConnection) -> None:
        """Called once per new DuckDB connection."""
        register(conn)

    def configure_cursor(self, cursor: duckdb.DuckDBPyConnection) -> None:
        """Called for each cursor (one per dbt thread); TEMP macros do not carry over from the connection."""
        register(cursor)
