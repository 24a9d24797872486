"""Reading the store from outside lakefeed's own writer: DuckDB views and the feature loader.

Takes a :class:`~lakefeed.store.Store`; gives a DuckDB connection with one view per table
(Hive partitioning, so ``lake`` is a column) and :func:`load_features`, a lake's feature
table as pandas with its units. Must not write to the store.
"""

from __future__ import annotations

import re
import warnings
from collections.abc import Collection
from typing import Any

import pandas as pd

from lakefeed.exceptions import DamagedPartError, LakefeedWarning, StoreError
from lakefeed.store._parquet import Store
from lakefeed.store._sql import check_read_only, lock_down, new_connection
from lakefeed.store.verify import partition_damage

__all__ = ["connect", "load_features", "query"]

_IDENT = re.compile(r"^[a-z][a-z0-9_]*$")


def _files(store: Store, table: str, exclude: Collection[tuple[str, str]]) -> tuple[list[str], list[DamagedPartError]]:
    """The live part files of every lake of a table (the manifest's lists: a consistent snapshot), leaving out
    the partitions in ``exclude`` and those with a part whose Parquet footer is damaged (returned apart)."""
    files: list[str] = []
    bad: list[DamagedPartError] = []
    for lake in store.lakes(table):
        if (table, lake) in exclude:
            continue
        problems = partition_damage(store, table, lake, deep=False)
        if problems:  # the whole partition is left out: part of a lake's rows would mislead
            bad += problems
            continue
        parts = store.part_files(table, lake)
        files += parts if store.local else [store.fs.unstrip_protocol(f) for f in parts]
    return files, bad


def _open(
    store: Store, tables: list[str] | None, *, read_only: bool, exclude: Collection[tuple[str, str]] = ()
) -> tuple[Any, list[DamagedPartError]]:
    store.check_version()  # refuses newer schema versions
    con = new_connection()
    if not store.local:
        con.register_filesystem(store.fs)
    allowed: list[str] = []
    bad: list[DamagedPartError] = []
    for name in tables or store.tables():
        if not _IDENT.fullmatch(name):
            continue
        files, problems = _files(store, name, exclude)
        bad += problems
        if not files:
            continue
        allowed += files
        listed = ", ".join("'" + f.replace("'", "''") + "'" for f in files)
        con.execute(
            f"CREATE VIEW {name} AS SELECT * FROM read_parquet([{listed}], hive_partitioning = true, "
            "union_by_name = true)"
        )
    if read_only:
        lock_down(con, allowed)
    return con, bad


def connect(store: Store, *, tables: list[str] | None = None, read_only: bool = True) -> Any:
    """An in-memory DuckDB connection with a view per store table (``SELECT * FROM features``).

    Views read the part files of the store's current generation (:func:`lakefeed.store.snapshot`: every
    table from the same run, a run in progress never seen) with Hive partitioning; remote stores are read
    through the store's fsspec filesystem.

    ``read_only`` (default): the connection can read only those part files: it cannot write, attach,
    export, install or load extensions, read other files or change its settings. Extension
    auto-install and auto-load are off either way (no network). A lake whose part has a damaged
    Parquet footer is left out of the views, with a :class:`LakefeedWarning` naming the file.
    """
    con, bad = _open(store.pinned(), tables, read_only=read_only)
    for err in bad:
        warnings.warn(f"{err}; left out of the views", LakefeedWarning, stacklevel=2)
    return con


def _hash_damage(store: Store, tables: list[str], exclude: Collection[tuple[str, str]]) -> list[DamagedPartError]:
    """Parts whose bytes differ from the manifest's hash, over the partitions not yet excluded."""
    return [
        err
        for table in tables
        for lake in store.lakes(table)
        if (table, lake) not in exclude
        for err in partition_damage(store, table, lake)
    ]


def query(store: Store, sql: str) -> pd.DataFrame:
    """Run one read-only SQL statement over the store's tables (as views by name) and return a pandas frame.

    Refuses (:class:`StoreError`) anything but one SELECT / WITH / DESCRIBE / SHOW / SUMMARIZE / EXPLAIN
    statement, and runs it on a :func:`connect` connection that can read only the store's part files.
    Lakes with a damaged part file are left out and named in ``frame.attrs['damaged']`` (one message
    each): a Parquet footer check first, and, when DuckDB fails on a file, a content-hash check of
    every part against the manifest, then one more try without the damaged lakes.
    """
    import duckdb

    statement = check_read_only(sql)
    store = store.pinned()  # every table and every retry from one generation
    tables = store.tables()
    bad: list[DamagedPartError] = []
    retried = False
    while True:  # at most twice: once more without the lakes a hash check finds damaged
        exclude = {(e.table, e.lake) for e in bad}
        con, found = _open(store, tables, read_only=True, exclude=exclude)
        bad += found
        try:
            frame = con.execute(statement).fetchdf()
            frame.attrs["damaged"] = [str(e) for e in bad]
            return frame
        except duckdb.PermissionException as err:
            raise StoreError(
                f"query refused: it reaches outside the store ({err}). lakefeed query reads only the store's "
                "tables, by name (e.g. SELECT * FROM features)"
            ) from err
        except duckdb.Error as err:
            more = [] if retried else _hash_damage(store, tables, exclude | {(e.table, e.lake) for e in bad})
            if more:
                bad += more
                retried = True
                continue
            hint = "".join(f"; {e}" for e in bad)
            raise StoreError(
                f"query failed: {err}; tables in {store.url}: {', '.join(tables) or 'none'}{hint}"
            ) from err
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
