"""Part files of one table partition: naming, the live list, atomic file writes and consistent reads.

A partition ``<store>/<table>/lake=<id>/`` holds one or more Parquet part files, together one
Hive-partitioned table for pyarrow.dataset, pandas, DuckDB and Spark:

- ``part-0.parquet`` (or ``part-0-<hash>.parquet``): the base, written by a full write;
- ``part-<YYYYMMDD>.parquet``: rows keyed on or after that date, appended by an incremental
  refresh (:meth:`lakefeed.store.Store.append_arrow`).

The live list is the manifest entry's ``parts`` (name, rows, first and last key date, content
hash): lakefeed's own readers use it (a snapshot: files not listed are ignored; a listed file
that a concurrent full rewrite removed makes the reader re-read the manifest). Every write
changes at most one listed file, in one rename, so any moment's files form the old or the new
table. Stores without
``parts`` (older ones, or written by other tools) are read by globbing ``part-*.parquet``.

Temporary files are dot-files without the ``.parquet`` extension, so neither pyarrow.dataset
(ignores ``.``/``_`` prefixes) nor a ``*.parquet`` glob (DuckDB, pandas, Spark) ever sees them.
Must not compute any science.
"""

from __future__ import annotations

import hashlib
import os
import time
import uuid
from collections.abc import Callable, Mapping, Sequence
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq

from lakefeed.exceptions import DamagedPartError, StoreError
from lakefeed.store._integrity import damaged, hash_problem, mark_verified, read_checked

__all__ = [
    "BASE",
    "date_part_name",
    "ensure_intact",
    "folder_names",
    "glob_parts",
    "live_parts",
    "part_hashes",
    "pending_files",
    "read_parts",
    "write_file",
]

BASE = "part-0.parquet"
_RETRIES = 50


def date_part_name(since: object) -> str:
    """Name of an appended part holding rows keyed on or after ``since`` (a date)."""
    import pandas as pd

    return f"part-{pd.Timestamp(since):%Y%m%d}.parquet"


def folder_names(fs: Any, part_dir: str) -> list[str]:
    """Names in a partition folder (empty when there is none)."""
    try:
        return [p.rstrip("/").rsplit("/", 1)[-1] for p in fs.ls(part_dir, detail=False)]
    except (FileNotFoundError, NotADirectoryError):
        return []


def glob_parts(fs: Any, part_dir: str, names: list[str] | None = None) -> list[str]:
    """Part files present in a partition folder (sorted: base first, then by date); ``names``: its listing."""
    names = folder_names(fs, part_dir) if names is None else names
    return sorted(n for n in names if n.startswith("part-") and n.endswith(".parquet"))


def pending_files(names: list[str]) -> list[str]:
    """Temporary files of unfinished writes (``.tmp-*.pending``) among a partition folder's names."""
    return sorted(n for n in names if n.startswith(".tmp-") and n.endswith(".pending"))


def live_parts(entry: Mapping[str, Any] | None, fs: Any, part_dir: str) -> list[str]:
    """Names of the live parts: the manifest's list when it has one, else the folder's part files."""
    if entry and entry.get("parts"):
        return [p["file"] for p in entry["parts"]]
    return glob_parts(fs, part_dir)


def write_file(
    fs: Any, local: bool, part_dir: str, name: str | Callable[[str], str], arrow: pa.Table, options: dict[str, Any]
) -> tuple[str, str]:
    """Write ``arrow`` as ``part_dir/name`` in one atomic step.

    Locally the file is written aside (a dot-file), then moved into place in one rename; on other
    filesystems (object stores) the bytes are made in memory and written in one whole-object PUT, which
    a reader sees whole or not at all. ``name`` may be a function of the file's SHA-256 (content-named
    parts). Returns (final name, SHA-256 of the bytes). A failure removes the temporary file and leaves
    whatever was at the final name before unchanged.
    """
    if not local:
        return _put_file(fs, part_dir, name, arrow, options)
    final = f"{part_dir}/{name}" if isinstance(name, str) else ""
    tmp = f"{part_dir}/.tmp-{uuid.uuid4().hex}.pending"
    try:
        fs.makedirs(part_dir, exist_ok=True)
        pq.write_table(arrow, tmp, **options)
        digest = _digest(fs, tmp)
        if not isinstance(name, str):
            final = f"{part_dir}/{name(digest)}"
        os.replace(tmp, final)
        mark_verified(fs, local, final, digest)
    except BaseException as err:
        try:
            if fs.exists(tmp):
                fs.rm(tmp)
        except OSError:
            pass
        if isinstance(err, OSError):
            raise StoreError(f"could not write {final or part_dir}: {err}; the previous version is unchanged") from err
        raise
    return final.rsplit("/", 1)[-1], digest


def _put_file(
    fs: Any, part_dir: str, name: str | Callable[[str], str], arrow: pa.Table, options: dict[str, Any]
) -> tuple[str, str]:
    sink = pa.BufferOutputStream()
    pq.write_table(arrow, sink, **options)
    data = sink.getvalue().to_pybytes()
    digest = hashlib.sha256(data).hexdigest()
    final = f"{part_dir}/{name if isinstance(name, str) else name(digest)}"
    try:
        fs.pipe_file(final, data)
    except OSError as err:
        raise StoreError(f"could not write {final}: {err}; the previous version is unchanged") from err
    return final.rsplit("/", 1)[-1], digest


def _digest(fs: Any, path: str) -> str:
    h = hashlib.sha256()
    with fs.open(path, "rb") as f:
        while block := f.read(1 << 20):
            h.update(block)
    return h.hexdigest()


def part_hashes(entry: Mapping[str, Any] | None) -> dict[str, str]:
    """Part file name -> SHA-256 recorded in a manifest entry (empty for stores without a part list)."""
    return {p["file"]: p["sha256"] for p in (entry or {}).get("parts") or [] if p.get("sha256")}


def ensure_intact(fs: Any, local: bool, part_dir: str, entry: Mapping[str, Any] | None) -> None:
    """Raise :class:`DamagedPartError` for the first live part whose bytes differ from the manifest's hash
    (files verified before in this process and unchanged since are not read again)."""
    for name, sha in part_hashes(entry).items():
        problem = hash_problem(fs, local, f"{part_dir}/{name}", sha)
        if problem:
            raise damaged(f"{part_dir}/{name}", problem)


def read_parts(
    fs: Any,
    local: bool,
    part_dir: str,
    entry_of: Callable[[], dict[str, Any] | None],
    *,
    columns: Sequence[str] | None = None,
    since: object = None,
) -> tuple[pa.Table | None, dict[str, Any] | None]:
    """All live parts of a partition concatenated (schemas unified), and the manifest entry used.

    ``since`` (a date): only the parts whose last key date is on or after it (from the manifest's
    part list; parts of unknown range are read too); the caller filters the rows.
    Returns (None, entry) when the partition has no part. A concurrent full rewrite may remove a
    listed part between the manifest read and the file read: the reader then re-reads the manifest.
    """
    for _ in range(_RETRIES):
        entry = entry_of()
        names = live_parts(entry, fs, part_dir)
        if since is not None and entry and entry.get("parts"):
            import pandas as pd

            start = pd.Timestamp(since)
            names = [p["file"] for p in entry["parts"] if p.get("last") is None or pd.Timestamp(p["last"]) >= start]
            names = names or [entry["parts"][-1]["file"]]  # an empty table of the right schema
        if not names:
            return None, entry
        hashes = part_hashes(entry)
        try:
            tables = [read_checked(fs, local, f"{part_dir}/{n}", hashes.get(n), columns) for n in names]
        except FileNotFoundError:
            time.sleep(0.01)
            continue
        except DamagedPartError as err:  # damaged, unless a writer replaced the file since the manifest was read
            name = err.path.rsplit("/", 1)[-1]
            if part_hashes(entry_of()).get(name) != hashes.get(name):
                continue
            raise
        if len(tables) == 1:
            return tables[0], entry
        return pa.concat_tables(tables, promote_options="default"), entry
    raise StoreError(
        f"partition {part_dir} changed under the reader {_RETRIES} times (a writer is busy or the manifest "
        "does not match the files); retry, or re-run the stage that writes it"
    )
