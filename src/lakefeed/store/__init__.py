"""The Parquet store: tables with units and provenance; atomic, idempotent, incremental.

Takes pandas DataFrames and writes ``<store>/<table>/lake=<id>/part-0.parquet`` (Hive
partitioning; readable by pyarrow.dataset, pandas, DuckDB and Spark); reads them back with
their units. Must not compute any science.
"""

from lakefeed.store._parquet import Store, read_units
from lakefeed.store.layout import TABLES, partition_path, table_path

__all__ = ["TABLES", "Store", "partition_path", "read_units", "table_path"]
