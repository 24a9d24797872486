"""Integrity check of a whole store: every live part file against its manifest entry.

Takes a :class:`~lakefeed.store.Store`; returns one :class:`~lakefeed.exceptions.DamagedPartError`
per damaged file (table, lake, path and what is wrong), without raising them:

- a part file listed in the manifest that is missing;
- a Parquet footer that cannot be read (truncated or overwritten end; cheap);
- bytes that differ from the SHA-256 the manifest recorded at the write (``deep``, the default:
  every byte is read, so a zeroed block inside the data is found too);
- a manifest entry that cannot be read (the entry file is named).

Partitions of stores written before part lists existed have no hashes: only their footers are
checked. Must not write to the store and must not compute any science.
"""

from __future__ import annotations

from collections.abc import Collection

from lakefeed.exceptions import DamagedPartError, StoreError
from lakefeed.store._integrity import damaged, footer_problem, hash_problem
from lakefeed.store._manifest import ENTRY_DIR
from lakefeed.store._parquet import Store
from lakefeed.store._parts import folder_names, part_hashes

__all__ = ["partition_damage", "verify_store"]


def partition_damage(store: Store, table: str, lake: str, *, deep: bool = True) -> list[DamagedPartError]:
    """The damaged files of one partition (empty when intact): footers always, content hashes when ``deep``."""
    try:
        entry = store.entry(table, lake)
    except StoreError as err:
        return [DamagedPartError(table, lake, f"{store.path}/{ENTRY_DIR}/{table}/{lake}.json", str(err))]
    hashes = part_hashes(entry)
    out = []
    for path in store.part_files(table, lake):
        sha = hashes.get(path.rsplit("/", 1)[-1])
        problem = footer_problem(store.fs, path)
        if problem is None and deep and sha:
            problem = hash_problem(store.fs, store.local, path, sha)
        if problem:
            out.append(damaged(path, problem))
    return out


def _lake_folders(store: Store, table: str) -> list[str]:
    names = folder_names(store.fs, f"{store.path}/{table}")
    from_folders = {n.split("=", 1)[1] for n in names if n.startswith("lake=")}
    from_entries = {
        n[: -len(".json")]
        for n in folder_names(store.fs, f"{store.path}/{ENTRY_DIR}/{table}")
        if n.endswith(".json") and not n.startswith(".")
    }
    return sorted(from_folders | from_entries)


def verify_store(
    store: Store,
    *,
    tables: Collection[str] | None = None,
    lakes: Collection[str] | None = None,
    deep: bool = True,
) -> list[DamagedPartError]:
    """Every damaged part file of the store (or of the given tables and lakes), in table and lake order.

    Parameters
    ----------
    store
        The store to check.
    tables, lakes
        Restrict the check (default: every table and lake, found from the partition folders and the
        manifest's entry files, so a partition whose files are all gone is found too).
    deep
        Compare every byte with the manifest's SHA-256 (default); False checks the Parquet footers only.

    Returns
    -------
    list of DamagedPartError
        One per damaged file; empty when the store is intact.

    Examples
    --------
    >>> for problem in verify_store(Store("store")):  # doctest: +SKIP
    ...     print(problem.table, problem.lake, problem.path, problem.problem)
    """
    store.check_version()
    names = folder_names(store.fs, store.path) + folder_names(store.fs, f"{store.path}/{ENTRY_DIR}")
    found = sorted({n for n in names if not n.startswith((".", "_")) and "." not in n})
    out: list[DamagedPartError] = []
    for table in found if tables is None else [t for t in found if t in tables]:
        for lake in _lake_folders(store, table):
            if lakes is None or lake in lakes:
                try:
                    out += partition_damage(store, table, lake, deep=deep)
                except ValueError:  # a folder name that is not a lake id: not a store partition
                    continue
    return out
