"""The store: Parquet tables with per-column units, a manifest, locks and published generations.

Takes pandas DataFrames; writes ``<store>/<table>/lake=<id>/part-*.parquet`` (Hive partitioning, readable
unchanged by pyarrow.dataset, pandas, DuckDB and Spark) on a local folder or any fsspec URL
(``s3://bucket/store``); reads them back with their units in ``frame.attrs['units']``. Writing is in
:mod:`lakefeed.store._write`, generations in :mod:`lakefeed.store._generations`. Must not compute any science.

Readers see whole runs: a :class:`Store` reads the store's current generation (each call resolves it
anew; :meth:`Store.pinned` holds one for many reads), never a run's unpublished writes. A store opened
``staged=True`` (by a run, for its stages) reads and writes the writers' view and publishes at the end.
"""

from __future__ import annotations

import copy
import os
import warnings
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from lakefeed.exceptions import LakefeedWarning, StoreError
from lakefeed.store._fs import is_local, resolve
from lakefeed.store._generations import current_generation, generation_entry, generations, read_generation
from lakefeed.store._lock import writer_lock
from lakefeed.store._manifest import read_head, read_manifest
from lakefeed.store._meta import read_descriptions, read_units
from lakefeed.store._parts import BASE, live_parts, read_parts
from lakefeed.store._write import StoreWriter, day_bound
from lakefeed.store.layout import partition_path, table_path

__all__ = ["Store", "read_descriptions", "read_units"]


class Store(StoreWriter):
    """A lakefeed store rooted at a local folder or an fsspec URL (``s3://bucket/store``, ``memory://x``).

    Parameters
    ----------
    root
        Folder or URL of the store (created on first write).
    lock_timeout
        Seconds a writer waits for another writer on the same store before giving up.
    storage_options
        Passed to fsspec (e.g. an endpoint URL for S3-compatible storage). Credentials are best left to the
        environment or a profile; they are never written to the store.
    staged
        For a run's stages: read the writers' view (what this run wrote so far) and leave writes unpublished
        until :meth:`publish` (the run publishes once at its end). Default: read the current generation,
        and publish each write when it is done.
    lock_expiry
        Seconds after which the writer lock of a remote store (an object store, where no OS lock exists) is
        taken as left by a writer that died, and taken over.
    keep_generations
        Published generations kept before they are collected (recorded in the store at the next publish;
        default: the store's recorded value, else 3).

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
        staged: bool = False,
        keep_generations: int | None = None,
        lock_expiry: float = 3600.0,
    ) -> None:
        if keep_generations is not None and (not isinstance(keep_generations, int) or keep_generations < 1):
            raise StoreError(f"keep_generations must be a whole number of at least 1, not {keep_generations!r}")
        self.url = str(root)
        self.fs, self.path = resolve(root, storage_options)
        self.local = is_local(self.fs)
        self.root = self.path if self.local else self.url.rstrip("/")
        self.lock_timeout = lock_timeout
        if self.local and os.path.exists(self.path) and not os.path.isdir(self.path):
            advice = "choose another folder (--store DIR or 'store:' in sources.yaml)"
            raise StoreError(f"store {self.url!r} is a file, not a folder; {advice}")
        self.lock_expiry = lock_expiry
        self.staged = staged
        self.keep_generations = keep_generations
        self._depth = 0
        self._pin: int | None = None

    def __repr__(self) -> str:
        return f"Store({self.url!r})"

    # -- locking, manifest and generations ----------------------------------------------------------------
    def _ensure_root(self) -> None:
        if not self.local:
            self._check_remote()
            return
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

    def _check_remote(self) -> None:
        """A remote store's bucket (or top folder) must exist and be reachable: it is never created, and a
        refusal writes nothing. Messages name the URL, never credentials."""
        top = self.path.split("/", 1)[0]
        try:
            self.fs.ls(top, detail=False)
        except FileNotFoundError as err:
            raise StoreError(
                f"store {self.url!r}: bucket {top!r} does not exist; create it first or fix 'store:' "
                "(nothing was written)"
            ) from err
        except (PermissionError, OSError) as err:
            raise StoreError(
                f"store {self.url!r}: access to bucket {top!r} refused ({type(err).__name__}); check "
                "the credentials (environment variables or profile) and the endpoint (nothing was "
                "written)"
            ) from err

    @contextmanager
    def lock(self) -> Iterator[None]:
        """Hold the store's writer lock (re-entrant); a second writer waits, then refuses."""
        self._ensure_root()
        with writer_lock(self.fs, self.path, timeout=self.lock_timeout, stale_after=self.lock_expiry):
            yield

    def generation(self) -> int | None:
        """The generation this store reads: the pinned one, else the current one (None: a store without
        generations, or a staged store, which reads the writers' view)."""
        if self.staged:
            return None
        return self._pin if self._pin is not None else current_generation(self.fs, self.path)

    def pinned(self) -> Store:
        """This store with its reads held to the current generation (for a report or a query reading several
        tables: all from one run). A staged store is returned unchanged."""
        out = copy.copy(self)
        if not self.staged:
            out._pin = current_generation(self.fs, self.path)
        return out

    def at(self, generation: int) -> Store:
        """This store with its reads held to a kept ``generation`` (:class:`StoreError` when it is not kept)."""
        if generation not in generations(self.fs, self.path):
            kept = generations(self.fs, self.path)
            raise StoreError(
                f"store {self.url!r}: generation {generation} is not kept (collected, or never published); kept: {kept}"
            )
        out = copy.copy(self)
        out.staged, out._pin = False, generation
        return out

    def _generation_doc(self) -> dict[str, Any] | None:
        read_head(self.fs, self.path)  # refuses a store of a newer schema version
        n = self.generation()
        return None if n is None else read_generation(self.fs, self.path, n)

    def manifest(self) -> dict[str, Any]:
        """The whole manifest as readers see it (schema and package version, ``tables`` -> lake -> entry;
        reads every entry: use :meth:`entry` for one partition)."""
        doc = self._generation_doc()
        if doc is None:
            return read_manifest(self.fs, self.path)
        out = {k: v for k, v in read_head(self.fs, self.path).items() if k != "tables"}
        out["generation"] = doc["generation"]
        out["tables"] = {
            t: {lk: generation_entry(self.fs, self.path, doc, t, lk) for lk in lakes}
            for t, lakes in doc.get("partitions", {}).items()
        }
        return out

    def check_version(self) -> None:
        """Refuse a store written by a newer schema version (reads only the store's head file)."""
        read_head(self.fs, self.path)

    def entry(self, table: str, lake: str) -> dict[str, Any] | None:
        """Manifest entry of one table partition as this store reads it, or None (read-only: do not modify
        it); refuses a store of a newer schema version."""
        doc = self._generation_doc()
        if doc is None:
            return self.writer_entry(table, lake)
        return generation_entry(self.fs, self.path, doc, table, lake)

    # -- reading ------------------------------------------------------------------------------------------
    def lakes(self, table: str) -> list[str]:
        """Lake ids with a partition of ``table``."""
        doc = self._generation_doc()
        if doc is not None:
            names = list(doc.get("partitions", {}).get(table, {}))
        else:
            root = table_path(self.path, table)
            if not self.fs.exists(root):
                return []
            names = [
                n.split("=", 1)[1]
                for p in self.fs.ls(root, detail=False)
                if (n := p.rstrip("/").rsplit("/", 1)[-1]).startswith("lake=")
            ]
        return sorted(lk for lk in names if self._present(table, lk, self.entry(table, lk)))

    def _present(self, table: str, lake: str, entry: dict[str, Any] | None) -> bool:
        part_dir = partition_path(self.path, table, lake)
        names = live_parts(entry, self.fs, part_dir)
        return bool(names) and bool(self.fs.exists(f"{part_dir}/{names[0]}"))

    def tables(self) -> list[str]:
        """Tables present in the store."""
        doc = self._generation_doc()
        if doc is not None:
            return sorted(t for t in doc.get("partitions", {}) if self.lakes(t))
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
            arrow = arrow.filter(pc.greater_equal(tcol, day_bound(pd.Timestamp(since), tcol.type)))
        sort_by = [k for k in (entry or {}).get("sort_by") or [] if k in arrow.column_names]
        if len((entry or {}).get("parts") or []) > 1 and sort_by:
            arrow = arrow.sort_by([(k, "ascending") for k in sort_by])
        return arrow

    def read_table(
        self, table: str, lake: str | None = None, *, columns: Sequence[str] | None = None, since: object = None
    ) -> pd.DataFrame:
        """Read a table (one lake, or all lakes, from one generation) as pandas with a ``lake`` column first.

        Units are in ``frame.attrs['units']``, descriptions in ``frame.attrs['descriptions']``;
        ``since`` as for :meth:`read_arrow`. A column whose description starts with ``DEPRECATED``
        (e.g. ``target_daily.trophic_class``) gives a :class:`~lakefeed.exceptions.LakefeedWarning`
        quoting that description; pass ``columns`` without it to read quietly.
        """
        store = self if lake is not None else self.pinned()
        lakes = [lake] if lake is not None else store.lakes(table)
        if not lakes:
            self.check_version()
            raise StoreError(f"table {table!r} not found in {self.url}; run the stage first")
        frames, units, descr = [], {}, {}
        for lk in lakes:
            t = store.read_arrow(table, lk, columns=columns, since=since)
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
