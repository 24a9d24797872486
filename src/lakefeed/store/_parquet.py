"""Parquet I/O of store tables with per-column units, a manifest, a writer lock and atomic replace.

Takes pandas DataFrames; writes ``<store>/<table>/lake=<id>/part-0.parquet`` (Hive
partitioning, readable unchanged by pyarrow.dataset, pandas, DuckDB and Spark) on a local
folder or any fsspec URL; reads them back with their units in ``frame.attrs['units']``.
Must not compute any science.

Writes are atomic: the file is written aside (a dot-file, which pyarrow.dataset and the
store's globs ignore) and moved into place (``os.replace`` locally; ``fs.mv`` elsewhere,
atomic only where the filesystem's rename is). A crash leaves the previous version intact.
Writes are idempotent: the same frame gives the same bytes. One writer at a time per store
(:func:`lakefeed.store._lock.store_lock`).
"""

from __future__ import annotations

import hashlib
import json
import os
import uuid
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from lakefeed.exceptions import StoreError
from lakefeed.store._fs import file_digest, is_local, resolve
from lakefeed.store._lock import store_lock
from lakefeed.store._manifest import read_manifest, write_manifest
from lakefeed.store.layout import partition_path, table_path

__all__ = ["PART", "Store", "read_units"]

PART = "part-0.parquet"
#: Candidate time columns for a table's time range in the manifest, in order of preference.
TIME_COLUMNS = ("target_date", "date", "time", "issue_date")


def _schema_with_units(
    table: pa.Table, units: Mapping[str, str], descriptions: Mapping[str, str], extra: Mapping[str, str]
) -> pa.Schema:
    fields = []
    for f in table.schema:
        md = dict(f.metadata or {})
        if f.name in units:
            md[b"unit"] = units[f.name].encode()
        if f.name in descriptions:
            md[b"description"] = descriptions[f.name].encode()
        fields.append(f.with_metadata(md or None))
    meta = dict(table.schema.metadata or {})
    meta[b"lakefeed.units"] = json.dumps(dict(units), sort_keys=True).encode()
    if descriptions:
        meta[b"lakefeed.descriptions"] = json.dumps(dict(descriptions), sort_keys=True).encode()
    for k, v in extra.items():
        meta[f"lakefeed.{k}".encode()] = str(v).encode()
    return pa.schema(fields, metadata=meta)


def _write_options(schema: pa.Schema) -> dict[str, Any]:
    """Parquet options: microsecond timestamps (readable by Spark, which rejects nanoseconds);
    dictionary encoding and statistics for keys, dates and labels, not for float measurements
    (wide feature tables write several times faster; predicate pushdown works on keys and dates)."""
    other = [f.name for f in schema if not pa.types.is_floating(f.type)]
    return {
        "coerce_timestamps": "us",
        "allow_truncated_timestamps": True,
        "use_dictionary": other,
        "write_statistics": other,
    }


def read_units(schema: pa.Schema) -> dict[str, str]:
    """Per-column units stored in a schema (field metadata ``unit``)."""
    out = {}
    for f in schema:
        if f.metadata and b"unit" in f.metadata:
            out[f.name] = f.metadata[b"unit"].decode()
    return out


def read_descriptions(schema: pa.Schema) -> dict[str, str]:
    """Per-column descriptions stored in a schema (field metadata ``description``)."""
    return {f.name: f.metadata[b"description"].decode() for f in schema if f.metadata and b"description" in f.metadata}


def _time_range(arrow: pa.Table, time_column: str | None) -> tuple[str | None, list[str | None]]:
    col = time_column or next((c for c in TIME_COLUMNS if c in arrow.column_names), None)
    if col is None or col not in arrow.column_names or arrow.num_rows == 0:
        return col, [None, None]
    try:
        mm = pc.min_max(arrow[col]).as_py()
    except (pa.ArrowNotImplementedError, pa.ArrowInvalid, TypeError):
        return col, [None, None]
    if mm["min"] is None:
        return col, [None, None]
    try:
        return col, [pd.Timestamp(mm["min"]).isoformat(), pd.Timestamp(mm["max"]).isoformat()]
    except (TypeError, ValueError):
        return col, [None, None]


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
        """The store's manifest (schema version, package version, per-table provenance)."""
        return read_manifest(self.fs, self.path)

    def entry(self, table: str, lake: str) -> dict[str, Any] | None:
        """Manifest entry of one table partition, or None."""
        return self.manifest().get("tables", {}).get(table, {}).get(lake)

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
    ) -> str:
        """As :meth:`write_table`, for an Arrow table (e.g. rows merged without pandas)."""
        if "lake" in arrow.column_names:
            arrow = arrow.drop_columns(["lake"])
        arrow = arrow.cast(_schema_with_units(arrow, units or {}, descriptions or {}, metadata or {}))
        part_dir = partition_path(self.path, table, lake)
        final = f"{part_dir}/{PART}"
        with self.lock():
            manifest = self.manifest()
            tmp = f"{table_path(self.path, table)}/.tmp-{lake}-{uuid.uuid4().hex}.parquet"
            try:
                self.fs.makedirs(part_dir, exist_ok=True)
                if self.local:
                    pq.write_table(arrow, tmp, **_write_options(arrow.schema))
                else:
                    with self.fs.open(tmp, "wb") as f:
                        pq.write_table(arrow, f, **_write_options(arrow.schema))
                digest = self._digest(tmp)
                if self.local:
                    os.replace(tmp, final)
                else:
                    self.fs.mv(tmp, final)
            except BaseException as err:
                try:
                    if self.fs.exists(tmp):
                        self.fs.rm(tmp)
                except OSError:
                    pass
                if isinstance(err, OSError):
                    raise StoreError(f"could not write {final}: {err}; the previous version is unchanged") from err
                raise
            col, trange = _time_range(arrow, time_column)
            if isinstance(inputs, Mapping):
                hashes = dict(inputs)
            else:
                hashes = {str(p): file_digest(p) for p in (inputs or [])}
            manifest.setdefault("tables", {}).setdefault(table, {})[lake] = {
                "rows": arrow.num_rows,
                "columns": list(arrow.column_names),
                "time_column": col,
                "time_range": trange,
                "config_hash": config_hash,
                "inputs": dict(sorted(hashes.items())),
                "content_hash": digest,
                "metadata": dict(metadata or {}),
            }
            write_manifest(self.fs, self.path, manifest, local=self.local)
        return final if self.local else self._url(final)

    def _digest(self, path: str) -> str:
        h = hashlib.sha256()
        with self.fs.open(path, "rb") as f:
            while block := f.read(1 << 20):
                h.update(block)
        return h.hexdigest()

    def _url(self, path: str) -> str:
        return self.fs.unstrip_protocol(path)

    # -- reading ----------------------------------------------------------------------------
    def lakes(self, table: str) -> list[str]:
        """Lake ids with a partition of ``table``."""
        root = table_path(self.path, table)
        if not self.fs.exists(root):
            return []
        out = []
        for p in self.fs.ls(root, detail=False):
            name = p.rstrip("/").rsplit("/", 1)[-1]
            if name.startswith("lake=") and self.fs.exists(f"{p.rstrip('/')}/{PART}"):
                out.append(name.split("=", 1)[1])
        return sorted(out)

    def tables(self) -> list[str]:
        """Tables present in the store."""
        if not self.fs.exists(self.path):
            return []
        names = [p.rstrip("/").rsplit("/", 1)[-1] for p in self.fs.ls(self.path, detail=False)]
        return sorted(n for n in names if not n.startswith((".", "_")) and self.lakes(n))

    def part_file(self, table: str, lake: str) -> str:
        """Path of a partition's Parquet file (as the store's filesystem names it)."""
        return f"{partition_path(self.path, table, lake)}/{PART}"

    def read_arrow(self, table: str, lake: str, *, columns: Sequence[str] | None = None) -> pa.Table:
        """One lake's partition as an Arrow table (schema metadata with units kept)."""
        self.manifest()  # refuses newer schema versions
        path = self.part_file(table, lake)
        if not self.fs.exists(path):
            raise StoreError(f"table {table!r} has no partition for lake {lake!r} in {self.url}; run the stage first")
        if self.local:
            return pq.read_table(path, columns=list(columns) if columns else None)
        with self.fs.open(path, "rb") as f:
            return pq.read_table(f, columns=list(columns) if columns else None)

    def read_table(self, table: str, lake: str | None = None, *, columns: Sequence[str] | None = None) -> pd.DataFrame:
        """Read a table (one lake, or all lakes) as pandas with a ``lake`` column first.

        Units are in ``frame.attrs['units']``, descriptions in ``frame.attrs['descriptions']``.
        """
        lakes = [lake] if lake is not None else self.lakes(table)
        if not lakes:
            self.manifest()
            raise StoreError(f"table {table!r} not found in {self.url}; run the stage first")
        frames, units, descr = [], {}, {}
        for lk in lakes:
            t = self.read_arrow(table, lk, columns=columns)
            units.update(read_units(t.schema))
            descr.update(read_descriptions(t.schema))
            f = t.to_pandas(coerce_temporal_nanoseconds=True)
            f.insert(0, "lake", lk)
            frames.append(f)
        frame = frames[0] if len(frames) == 1 else pd.concat(frames, ignore_index=True)
        frame.attrs["units"] = units
        frame.attrs["descriptions"] = descr
        return frame

    def has_table(self, table: str, lake: str) -> bool:
        """True when ``table`` has a partition for ``lake``."""
        return bool(self.fs.exists(self.part_file(table, lake)))
