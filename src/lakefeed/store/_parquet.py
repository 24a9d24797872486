"""Parquet I/O of store tables with per-column units, a manifest, a writer lock and atomic replace.

Takes pandas DataFrames; writes ``<store>/<table>/lake=<id>/part-*.parquet`` (Hive
partitioning, readable unchanged by pyarrow.dataset, pandas, DuckDB and Spark) on a local
folder or any fsspec URL; reads them back with their units in ``frame.attrs['units']``.
Must not compute any science.

Writes are atomic: each file is written aside (a dot-file without the ``.parquet`` extension,
which no reader's glob matches) and moved into place in one rename (``os.replace`` locally;
``fs.mv`` elsewhere, atomic only where the filesystem's rename is); the manifest, which lists
the live part files, is replaced last. A crash leaves the previous version intact.

- ``write_table``/``write_arrow`` (full): a partition of one part is replaced in place (one
  rename: every reader sees the old or the new table). A partition of several parts gets a new,
  content-named base part; the manifest switches to it, then the old parts are removed (lakefeed's
  readers switch at the manifest; a plain glob may see both for that moment, or after a crash
  until the next write removes the unlisted file).
- ``append_arrow`` (incremental): adds one part or rewrites the last one, in one rename; a plain
  glob read never sees a key twice, at any moment.
- ``compact``: merges the parts (a full write of the same rows).

Writes are idempotent: the same frame gives the same bytes. One writer at a time per store
(:func:`lakefeed.store._lock.store_lock`).
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from lakefeed.exceptions import LakefeedWarning, StoreError
from lakefeed.store._fs import is_local, resolve
from lakefeed.store._integrity import read_checked
from lakefeed.store._lock import store_lock
from lakefeed.store._manifest import read_entry, read_head, read_manifest, write_entry
from lakefeed.store._meta import (
    make_entry,
    read_descriptions,
    read_units,
    schema_with_units,
    time_range,
    with_schema,
    write_options,
)
from lakefeed.store._parts import (
    BASE,
    date_part_name,
    ensure_intact,
    folder_names,
    glob_parts,
    live_parts,
    part_hashes,
    pending_files,
    read_parts,
    write_file,
)
from lakefeed.store.layout import partition_path, table_path

__all__ = ["PART", "Store", "read_units"]

PART = BASE
# names used by other modules before the split into _meta (kept importable)
_write_options = write_options


class Store:
    """A lakefeed store rooted at a local folder or an fsspec URL (``s3://bucket/store``, ``memory://x``).

    Parameters
    ----------
    root
        Folder or URL of the store (created on first write).
    lock_timeout
        Seconds a writer waits for another writer on the same store before giving up.
    storage_options
        Passed to fsspec (credentials etc. for remote filesystems).

    Examples
    --------
    >>> store = Store("/tmp/lakefeed-store")  # doctest: +SKIP
    >>> store.write_table("features", "tallow", frame, units={"chla": "mg m-3"})  # doctest: +SKIP
    """

    def __init__(
        self,
        root: str | os.PathLike[str],
        *,
        lock_timeout: float = 300.0,
        storage_options: dict[str, Any] | None = None,
    ) -> None:
        self.url = str(root)
        self.fs, self.path = resolve(root, storage_options)
        self.local = is_local(self.fs)
        self.root = self.path if self.local else self.url.rstrip("/")
        self.lock_timeout = lock_timeout
        if self.local and os.path.exists(self.path) and not os.path.isdir(self.path):
            advice = "choose another folder (--store DIR or 'store:' in sources.yaml)"
            raise StoreError(f"store {self.url!r} is a file, not a folder; {advice}")

    def __repr__(self) -> str:
        return f"Store({self.url!r})"

    # -- locking and manifest ---------------------------------------------------------------
    def _ensure_root(self) -> None:
        try:
            if self.fs.exists(self.path) and not self.fs.isdir(self.path):
                raise StoreError(f"store path {self.url!r} is a file, not a folder; choose a folder for the store")
            self.fs.makedirs(self.path, exist_ok=True)
            if self.local and not os.access(self.path, os.W_OK):
                raise PermissionError(f"no write permission on {self.path}")
        except (OSError, PermissionError) as err:
            raise StoreError(
                f"store path {self.url!r} is not writable ({err}); choose a folder you can write to "
                "(--store DIR or 'store:' in sources.yaml) or fix its permissions"
            ) from err

    @contextmanager
    def lock(self) -> Iterator[None]:
        """Hold the store's writer lock (re-entrant); a second writer waits, then refuses."""
        self._ensure_root()
        with store_lock(self.fs, self.path, timeout=self.lock_timeout):
            yield

    def manifest(self) -> dict[str, Any]:
        """The store's whole manifest (schema version, package version, per-table provenance of every
        lake; reads every entry: use :meth:`entry` for one partition)."""
        return read_manifest(self.fs, self.path)

    def check_version(self) -> None:
        """Refuse a store written by a newer schema version (reads only the store's head file)."""
        read_head(self.fs, self.path)

    def entry(self, table: str, lake: str) -> dict[str, Any] | None:
        """Manifest entry of one table partition, or None (read-only: do not modify it); refuses a store
        of a newer schema version."""
        return read_entry(self.fs, self.path, table, lake)

    def _set_entry(self, table: str, lake: str, entry: dict[str, Any]) -> None:
        write_entry(self.fs, self.path, table, lake, entry, local=self.local)

    # -- writing ----------------------------------------------------------------------------
    def write_table(
        self,
        table: str,
        lake: str,
        frame: pd.DataFrame,
        *,
        units: Mapping[str, str] | None = None,
        descriptions: Mapping[str, str] | None = None,
        metadata: Mapping[str, str] | None = None,
        inputs: Mapping[str, str] | Sequence[str] | None = None,
        config_hash: str | None = None,
        time_column: str | None = None,
        sort_by: Sequence[str] | None = None,
    ) -> str:
        """Atomically replace the partition of ``lake`` in ``table`` with ``frame``; record it in the manifest.

        Parameters
        ----------
        frame
            The rows; a ``lake`` column is dropped (it is the Hive partition key).
        units, descriptions
            Per-column unit strings and descriptions, stored in the Arrow field metadata.
        metadata
            Extra table-level key/values (schema metadata ``lakefeed.<key>`` and the manifest).
        inputs
            Input files: either {path or URL: sha256} or a list of paths to hash.
        config_hash
            Hash of the configuration that produced the table.
        time_column
            Column giving the table's time range (default: the first of target_date, date, time).
        sort_by
            Key columns by which readers sort the rows once the partition holds several part files
            (after :meth:`append_arrow`).

        Returns
        -------
        str
            Path (or URL) of the written file.
        """
        frame = frame.drop(columns=["lake"], errors="ignore").reset_index(drop=True)
        frame.attrs = {}
        arrow = pa.Table.from_pandas(frame, preserve_index=False)
        return self.write_arrow(
            table,
            lake,
            arrow,
            units=units,
            descriptions=descriptions,
            metadata=metadata,
            inputs=inputs,
            config_hash=config_hash,
            time_column=time_column,
            sort_by=sort_by,
        )

    def write_arrow(
        self,
        table: str,
        lake: str,
        arrow: pa.Table,
        *,
        units: Mapping[str, str] | None = None,
        descriptions: Mapping[str, str] | None = None,
        metadata: Mapping[str, str] | None = None,
        inputs: Mapping[str, str] | Sequence[str] | None = None,
        config_hash: str | None = None,
        time_column: str | None = None,
        sort_by: Sequence[str] | None = None,
    ) -> str:
        """As :meth:`write_table`, for an Arrow table (e.g. rows merged without pandas).

        ``sort_by``: key columns by which a reader sorts the rows of several part files (recorded
        in the manifest; :meth:`append_arrow` keeps it).
        """
        if "lake" in arrow.column_names:
            arrow = arrow.drop_columns(["lake"])
        arrow = with_schema(arrow, schema_with_units(arrow, units or {}, descriptions or {}, metadata or {}))
        part_dir = partition_path(self.path, table, lake)
        with self.lock():
            old = live_parts(self.entry(table, lake), self.fs, part_dir)
            # a single base part is replaced in place (one rename: atomic for every reader); a partition
            # of several parts gets a new, content-named base, listed in the manifest before the old
            # parts are removed (lakefeed's readers switch at the manifest; see the module docstring)
            name: Any = BASE if BASE not in old or old == [BASE] else (lambda d: f"part-0-{d[:16]}.parquet")
            name, digest = write_file(self.fs, self.local, part_dir, name, arrow, write_options(arrow.schema))
            col, trange = time_range(arrow, time_column)
            parts = [{"file": name, "rows": arrow.num_rows, "first": trange[0], "last": trange[1], "sha256": digest}]
            self._set_entry(table, lake, make_entry(arrow, parts, col, inputs, config_hash, metadata, sort_by))
            self._remove_unlisted(part_dir, [name])
        return self._located(f"{part_dir}/{name}")

    def append_arrow(
        self,
        table: str,
        lake: str,
        arrow: pa.Table,
        *,
        since: object,
        time_column: str,
        units: Mapping[str, str] | None = None,
        descriptions: Mapping[str, str] | None = None,
        metadata: Mapping[str, str] | None = None,
        inputs: Mapping[str, str] | Sequence[str] | None = None,
        config_hash: str | None = None,
        sort_by: Sequence[str] | None = None,
        max_parts: int = 24,
    ) -> str:
        """Replace the rows keyed on or after ``since`` by ``arrow`` without rewriting the older rows.

        The rows of ``arrow`` (all keyed on or after ``since`` in ``time_column``) go into one part
        file. When no live part holds rows on or after ``since``, that is a new file
        ``part-<since>.parquet``. When only the last part does (the spill-over rows of the previous
        refresh), that part is rewritten under its own name with its rows before ``since`` plus
        ``arrow`` (one rename). Either way one file appears or changes in one atomic step, so a plain
        glob read (DuckDB, pandas, pyarrow.dataset) sees the old or the new rows, never both. Any other
        overlap, or more than ``max_parts`` parts afterwards, rewrites the partition in full (a
        compaction). The columns must equal the stored ones. Without a stored partition this is
        :meth:`write_arrow`.

        Returns
        -------
        str
            Path (or URL) of the part file written.
        """
        since = pd.Timestamp(since)
        part_dir = partition_path(self.path, table, lake)
        if "lake" in arrow.column_names:
            arrow = arrow.drop_columns(["lake"])
        arrow = with_schema(arrow, schema_with_units(arrow, units or {}, descriptions or {}, metadata or {}))
        kw = dict(units=units, descriptions=descriptions, metadata=metadata, inputs=inputs, config_hash=config_hash,
                  time_column=time_column, sort_by=sort_by)  # fmt: skip
        with self.lock():
            entry = self.entry(table, lake)
            parts = [dict(p) for p in (entry or {}).get("parts") or []]
            if not parts and self._present(table, lake, entry):
                return self._rewrite(table, lake, [(since, arrow)], **kw)  # a store without part list: merge
            if not parts or not self.fs.exists(f"{part_dir}/{parts[0]['file']}"):
                return self.write_arrow(table, lake, arrow, **kw)  # type: ignore[arg-type]
            ensure_intact(self.fs, self.local, part_dir, entry)  # never extend a damaged partition
            if list(entry.get("columns", [])) != arrow.column_names:
                raise StoreError(
                    f"cannot append to {table}/lake={lake}: columns differ from the stored ones; rewrite it in full"
                )
            after = [i for i, p in enumerate(parts) if p.get("last") is None or pd.Timestamp(p["last"]) >= since]
            if not after and arrow.num_rows == 0:  # nothing to add or replace: new provenance, same files
                new = make_entry(arrow, parts, entry.get("time_column") or time_column, inputs, config_hash, metadata,
                                 sort_by)  # fmt: skip
                self._set_entry(table, lake, new)
                return self._located(f"{part_dir}/{parts[-1]['file']}")
            if after and after != [len(parts) - 1]:
                return self._rewrite(table, lake, [(since, arrow)], **kw)
            if after:  # the last part holds spill-over rows: keep its rows before `since`, add the new ones
                name = parts[-1]["file"]
                old = read_checked(self.fs, self.local, f"{part_dir}/{name}", part_hashes(entry).get(name), None)
                tcol = old[time_column]
                kept = old.filter(pc.less(tcol, _bound(since, tcol.type)))
                arrow = pa.concat_tables([kept, arrow.cast(kept.schema)])
                if sort_by:  # one part file is read back as stored: keep it in key order
                    arrow = arrow.sort_by([(k, "ascending") for k in sort_by])
                parts = parts[:-1]
            else:
                name = date_part_name(since)
            if len(parts) + 1 > max_parts:
                return self._rewrite(table, lake, [(since, arrow)], **kw)
            name, digest = write_file(self.fs, self.local, part_dir, name, arrow, write_options(arrow.schema))
            col, trange = time_range(arrow, time_column)
            parts.append({"file": name, "rows": arrow.num_rows, "first": trange[0], "last": trange[1],
                          "sha256": digest})  # fmt: skip
            self._set_entry(table, lake, make_entry(arrow, parts, col, inputs, config_hash, metadata, sort_by))
            self._remove_unlisted(part_dir, [p["file"] for p in parts])
        return self._located(f"{part_dir}/{name}")

    def _rewrite(
        self, table: str, lake: str, replace: list[tuple[pd.Timestamp, pa.Table]] | None = None, **kw: Any
    ) -> str:
        """Rewrite a partition as one base part (compaction), optionally replacing rows from a date on."""
        current = self.read_arrow(table, lake)
        entry = self.entry(table, lake) or {}
        sort_by = kw.get("sort_by") or entry.get("sort_by")
        col = kw.get("time_column") or entry.get("time_column")
        for since, rows in replace or []:
            tcol = current[col]
            kept = current.filter(pc.less(tcol, _bound(since, tcol.type)))
            current = pa.concat_tables([kept, rows.cast(kept.schema)])
        if sort_by:
            current = current.sort_by([(k, "ascending") for k in sort_by])
        units = kw.get("units") or read_units(current.schema)
        descriptions = kw.get("descriptions") or read_descriptions(current.schema)
        metadata = kw.get("metadata") if kw.get("metadata") is not None else entry.get("metadata")
        inputs = kw.get("inputs") if kw.get("inputs") is not None else entry.get("inputs")
        config_hash = kw.get("config_hash") or entry.get("config_hash")
        return self.write_arrow(table, lake, current, units=units, descriptions=descriptions, metadata=metadata,
                                inputs=inputs, config_hash=config_hash, time_column=col, sort_by=sort_by)  # fmt: skip

    def compact(self, table: str, lake: str) -> str:
        """Merge the part files of a partition into one (same rows, same order as a fresh full write)."""
        with self.lock():
            return self._rewrite(table, lake)

    def _remove_unlisted(self, part_dir: str, keep: Sequence[str]) -> None:
        """Remove part files the manifest no longer lists (superseded parts, leftovers of a crash) and
        temporary files of writers that died mid-write (under the lock no other writer is busy here)."""
        names = folder_names(self.fs, part_dir)
        stale = [n for n in glob_parts(self.fs, part_dir, names) if n not in keep] + pending_files(names)
        for n in stale:
            try:
                self.fs.rm(f"{part_dir}/{n}")
            except FileNotFoundError:
                pass

    def _url(self, path: str) -> str:
        return self.fs.unstrip_protocol(path)

    def _located(self, path: str) -> str:
        """A written file as the caller names it: a local path, or a URL on a remote filesystem."""
        return path if self.local else self._url(path)

    # -- reading ----------------------------------------------------------------------------
    def lakes(self, table: str) -> list[str]:
        """Lake ids with a partition of ``table``."""
        root = table_path(self.path, table)
        if not self.fs.exists(root):
            return []
        out = []
        for p in self.fs.ls(root, detail=False):
            name = p.rstrip("/").rsplit("/", 1)[-1]
            if name.startswith("lake="):
                lake = name.split("=", 1)[1]
                if self._present(table, lake, self.entry(table, lake)):
                    out.append(lake)
        return sorted(out)

    def _present(self, table: str, lake: str, entry: Mapping[str, Any] | None) -> bool:
        part_dir = partition_path(self.path, table, lake)
        names = live_parts(entry, self.fs, part_dir)
        return bool(names) and bool(self.fs.exists(f"{part_dir}/{names[0]}"))

    def tables(self) -> list[str]:
        """Tables present in the store."""
        if not self.fs.exists(self.path):
            return []
        names = [p.rstrip("/").rsplit("/", 1)[-1] for p in self.fs.ls(self.path, detail=False)]
        return sorted(n for n in names if not n.startswith((".", "_")) and self.lakes(n))

    def part_files(self, table: str, lake: str) -> list[str]:
        """Paths (as the store's filesystem names them) of a partition's live part files, base first."""
        part_dir = partition_path(self.path, table, lake)
        return [f"{part_dir}/{n}" for n in live_parts(self.entry(table, lake), self.fs, part_dir)]

    def part_file(self, table: str, lake: str) -> str:
        """Path of a partition's first (base) Parquet part file; see :meth:`part_files` for all of them."""
        files = self.part_files(table, lake)
        return files[0] if files else f"{partition_path(self.path, table, lake)}/{BASE}"

    def num_rows(self, table: str, lake: str) -> int:
        """Rows of a partition over all its part files (from the manifest's part list, else the Parquet footers)."""
        parts = (self.entry(table, lake) or {}).get("parts")
        if parts and all("rows" in p for p in parts):
            return int(sum(p["rows"] for p in parts))
        total = 0
        for path in self.part_files(table, lake):
            with self.fs.open(path, "rb") as f:
                total += pq.ParquetFile(f).metadata.num_rows
        return total

    def read_arrow(
        self, table: str, lake: str, *, columns: Sequence[str] | None = None, since: object = None
    ) -> pa.Table:
        """One lake's partition (all live part files) as an Arrow table (schema metadata with units kept).

        Several part files are concatenated and sorted by the keys recorded at write time, so the
        result equals that of one full write. ``since`` (a date) returns only the rows whose time
        column (recorded at write time) is on or after it, reading only the part files that can
        hold them (an incremental refresh reads the tail of a long record, not all of it).
        """
        part_dir = partition_path(self.path, table, lake)
        arrow, entry = read_parts(
            self.fs, self.local, part_dir, lambda: self.entry(table, lake), columns=columns, since=since
        )
        if arrow is None:
            raise StoreError(f"table {table!r} has no partition for lake {lake!r} in {self.url}; run the stage first")
        if since is not None:
            col = (entry or {}).get("time_column")
            if not col or col not in arrow.column_names:
                raise StoreError(
                    f"cannot read {table}/lake={lake} from a date on: no time column recorded"
                    + (f" ({col!r} not among the columns read)" if col else "")
                    + "; read it whole or include the time column"
                )
            tcol = arrow[col]
            arrow = arrow.filter(pc.greater_equal(tcol, _bound(pd.Timestamp(since), tcol.type)))
        sort_by = [k for k in (entry or {}).get("sort_by") or [] if k in arrow.column_names]
        if len((entry or {}).get("parts") or []) > 1 and sort_by:
            arrow = arrow.sort_by([(k, "ascending") for k in sort_by])
        return arrow

    def read_table(
        self, table: str, lake: str | None = None, *, columns: Sequence[str] | None = None, since: object = None
    ) -> pd.DataFrame:
        """Read a table (one lake, or all lakes) as pandas with a ``lake`` column first.

        Units are in ``frame.attrs['units']``, descriptions in ``frame.attrs['descriptions']``;
        ``since`` as for :meth:`read_arrow`. A column whose description starts with ``DEPRECATED``
        (e.g. ``target_daily.trophic_class``) gives a :class:`~lakefeed.exceptions.LakefeedWarning`
        quoting that description; pass ``columns`` without it to read quietly.
        """
        lakes = [lake] if lake is not None else self.lakes(table)
        if not lakes:
            self.check_version()
            raise StoreError(f"table {table!r} not found in {self.url}; run the stage first")
        frames, units, descr = [], {}, {}
        for lk in lakes:
            t = self.read_arrow(table, lk, columns=columns, since=since)
            units.update(read_units(t.schema))
            descr.update(read_descriptions(t.schema))
            f = t.to_pandas(coerce_temporal_nanoseconds=True)
            f.insert(0, "lake", lk)
            frames.append(f)
        frame = frames[0] if len(frames) == 1 else pd.concat(frames, ignore_index=True)
        frame.attrs["units"] = units
        frame.attrs["descriptions"] = descr
        for col in [c for c in frame.columns if str(descr.get(c, "")).startswith("DEPRECATED")]:
            warnings.warn(f"{table}.{col}: {descr[col]}", LakefeedWarning, stacklevel=2)
        return frame

    def has_table(self, table: str, lake: str) -> bool:
        """True when ``table`` has a partition for ``lake``."""
        return self._present(table, lake, self.entry(table, lake))


def _bound(day: pd.Timestamp, kind: pa.DataType) -> pa.Scalar:
    """A date as a scalar comparable with a date or timestamp column."""
    return pa.scalar(day.date() if pa.types.is_date(kind) else day.to_pydatetime(), kind)
