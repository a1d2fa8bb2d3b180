"""The public SQL surface (TEMP macros), shipped inside the package as ``tsql.sql``."""
