"""The Parquet store: tables with units and provenance; atomic, idempotent, incremental; readers see whole runs.

Takes pandas DataFrames and writes ``<store>/<table>/lake=<id>/part-*.parquet`` (Hive
partitioning; readable by pyarrow.dataset, pandas, DuckDB and Spark) on a local folder or any
fsspec URL, with a manifest (``_manifest.json``: the schema version; ``_manifest/<table>/<lake>.json``:
package version, config hash, input content hashes, time range and live part files of each
partition) and a writer lock; reads them
back with their units. A full write gives one part (``part-0.parquet``); an incremental refresh
appends one part (``part-<first date>.parquet``) or rewrites the last one
(:meth:`Store.append_arrow`); :meth:`Store.compact` merges them. Parts are checked against their
manifest hash when read or extended, and :func:`verify_store` checks a whole store. :func:`query` runs one
read-only statement on a DuckDB connection locked to the store's part files. Readers read one published
generation (a run's tables appear together, in one step); :func:`snapshot` gives its file list to other
readers. Must not compute any science.
"""

from lakefeed.store._fs import file_digest
from lakefeed.store._lock import run_lock
from lakefeed.store._manifest import SCHEMA_VERSION
from lakefeed.store._meta import schema_with_units
from lakefeed.store._options import WriteOptions
from lakefeed.store._parquet import Store, read_descriptions, read_units
from lakefeed.store._sql import check_read_only
from lakefeed.store.layout import TABLES, partition_path, table_path
from lakefeed.store.location import store_location_problem
from lakefeed.store.query import connect, load_features, query
from lakefeed.store.snapshot import Snapshot, snapshot
from lakefeed.store.verify import partition_damage, verify_store

__all__ = [
    "SCHEMA_VERSION",
    "TABLES",
    "Snapshot",
    "Store",
    "WriteOptions",
    "check_read_only",
    "connect",
    "file_digest",
    "load_features",
    "partition_damage",
    "partition_path",
    "query",
    "read_descriptions",
    "read_units",
    "run_lock",
    "schema_with_units",
    "snapshot",
    "store_location_problem",
    "table_path",
    "verify_store",
]
