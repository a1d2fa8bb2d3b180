"""The forms of every function, whatever the engine: Arrow columns in, the kernel, Arrow answers out.

A host (DuckDB in :mod:`tsql.binding`, Spark in :mod:`tsql.spark`) adapts its own calls to
these forms; nothing in this package imports an engine.
"""
