"""One generation of the store as a list of files, for readers outside lakefeed (pandas, pyarrow, DuckDB, Spark).

Takes a :class:`~lakefeed.store.Store`; gives :class:`Snapshot`, the part files of every table (or of the
tables asked for) as one published generation lists them, so that a reader never sees a run half done,
nor the superseded part files the store keeps for the older generations. Must not write to the store.
"""

from __future__ import annotations

from collections.abc import Collection
from dataclasses import dataclass, field

from lakefeed.store._parquet import Store

__all__ = ["Snapshot", "snapshot"]


@dataclass(frozen=True)
class Snapshot:
    """The part files of one generation.

    Attributes
    ----------
    generation
        The generation's number (None: a store written before generations, read through its entry files).
    tables
        Table name -> its part files (local paths, or URLs on a remote filesystem), lake by lake.
    lakes
        Table name -> lake id of each file in ``tables`` (the Hive partition key, also in the file's path).
    """

    generation: int | None
    tables: dict[str, list[str]] = field(default_factory=dict)
    lakes: dict[str, list[str]] = field(default_factory=dict)

    @property
    def files(self) -> list[str]:
        """Every part file of the snapshot."""
        return [f for files in self.tables.values() for f in files]


def snapshot(store: Store | str, *, tables: Collection[str] | None = None) -> Snapshot:
    """The part files of the store's current generation: a consistent file list for pandas, pyarrow or DuckDB.

    Files stay in place while the generation is kept (``keep_generations`` newer runs), so a read of the
    list is never disturbed by a run that publishes meanwhile. A plain glob of the store's folders sees
    the superseded files of older kept generations too: read through a snapshot instead.

    Parameters
    ----------
    store
        A :class:`~lakefeed.store.Store` or its root (folder or fsspec URL).
    tables
        Only these tables (default: every table of the generation).

    Returns
    -------
    Snapshot

    Examples
    --------
    >>> snap = snapshot("store", tables=["features"])  # doctest: +SKIP
    >>> duckdb.sql(f"SELECT * FROM read_parquet({snap.tables['features']}, hive_partitioning = true)")  # doctest: +SKIP
    >>> files = snap.tables["features"]
    >>> pyarrow.dataset.dataset(files, partitioning="hive", partition_base_dir="store/features")  # doctest: +SKIP
    """
    st = (store if isinstance(store, Store) else Store(store)).pinned()
    out: dict[str, list[str]] = {}
    lakes: dict[str, list[str]] = {}
    for table in st.tables():
        if tables is not None and table not in tables:
            continue
        for lake in st.lakes(table):
            for path in st.part_files(table, lake):
                out.setdefault(table, []).append(path if st.local else st.fs.unstrip_protocol(path))
                lakes.setdefault(table, []).append(lake)
    return Snapshot(st.generation(), out, lakes)
