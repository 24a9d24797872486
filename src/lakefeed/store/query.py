"""Reading the store from outside lakefeed's own writer: DuckDB views and the feature loader.

Takes a :class:`~lakefeed.store.Store`; gives a DuckDB connection with one view per table
(Hive partitioning, so ``lake`` is a column) and :func:`load_features`, a lake's feature
table as pandas with its units. Must not write to the store.
"""

from __future__ import annotations

import re
from typing import Any

import pandas as pd

from lakefeed.exceptions import StoreError
from lakefeed.store._parquet import Store

__all__ = ["connect", "load_features", "query"]

_IDENT = re.compile(r"^[a-z][a-z0-9_]*$")


def _files(store: Store, table: str) -> list[str]:
    """The live part files of every lake of a table (the manifest's lists: a consistent snapshot)."""
    files = [f for lake in store.lakes(table) for f in store.part_files(table, lake)]
    return files if store.local else [store.fs.unstrip_protocol(f) for f in files]


def connect(store: Store, *, tables: list[str] | None = None) -> Any:
    """An in-memory DuckDB connection with a view per store table (``SELECT * FROM features``).

    Views read the live part files ``<store>/<table>/lake=*/part-*.parquet`` listed in the manifest
    (so a write in progress is never half seen) with Hive partitioning; remote stores are read
    through the store's fsspec filesystem. A plain ``read_parquet('<store>/features/*/*.parquet',
    hive_partitioning = true)`` reads the same rows once no write is in progress.
    """
    import duckdb

    store.check_version()  # refuses newer schema versions
    con = duckdb.connect(":memory:")
    if not store.local:
        con.register_filesystem(store.fs)
    for name in tables or store.tables():
        if not _IDENT.fullmatch(name):
            continue
        files = ", ".join("'" + f.replace("'", "''") + "'" for f in _files(store, name))
        if not files:
            continue
        con.execute(
            f"CREATE VIEW {name} AS SELECT * FROM read_parquet([{files}], hive_partitioning = true, "
            "union_by_name = true)"
        )
    return con


def query(store: Store, sql: str) -> pd.DataFrame:
    """Run SQL over the store's tables (as views by name) and return a pandas frame."""
    import duckdb

    con = connect(store)
    try:
        return con.execute(sql).fetchdf()
    except duckdb.Error as err:
        raise StoreError(f"query failed: {err}; tables in {store.url}: {', '.join(store.tables()) or 'none'}") from err
    finally:
        con.close()


def load_features(store: Store | str, lake: str, aoi: str | None = None, *, lead: int | None = None) -> pd.DataFrame:
    """A lake's feature table as pandas, with units in ``.attrs['units']``.

    Parameters
    ----------
    store
        A :class:`Store` or its root (folder or fsspec URL).
    lake
        Lake id.
    aoi
        Keep only this area of interest (default: all).
    lead
        Keep only this lead time in days (default: all).

    Returns
    -------
    pandas.DataFrame
        One row per (aoi, target_date, lead_days), sorted; units of each value column in
        ``.attrs['units']`` (e.g. ``chla``: mg m-3).
    """
    st = store if isinstance(store, Store) else Store(store)
    frame = st.read_table("features", lake)
    attrs = dict(frame.attrs)
    if aoi is not None:
        if aoi not in set(frame["aoi"].astype(str)):
            present = sorted(frame["aoi"].astype(str).unique())
            raise StoreError(f"lake {lake!r} has no features for AOI {aoi!r}; AOIs present: {present}")
        frame = frame[frame["aoi"].astype(str) == aoi]
    if lead is not None:
        frame = frame[frame["lead_days"] == lead]
    frame = frame.sort_values(["aoi", "target_date", "lead_days"]).reset_index(drop=True)
    frame.attrs = attrs
    return frame
