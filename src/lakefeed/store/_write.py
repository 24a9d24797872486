"""Writing store tables: full writes, incremental appends, compaction, and publishing what was written.

Takes pandas or Arrow tables with their :class:`~lakefeed.store._options.WriteOptions`; writes part files
and the writers' manifest entry of one partition (``<store>/<table>/lake=<id>/``), then publishes:

- a write of a store opened ``staged=True`` (a run: build, refresh, a writing command) changes only the
  writers' view; the run publishes everything it wrote at its end in one step (:meth:`StoreWriter.publish`);
- any other write publishes its own partition when it is done.

A part file that a kept generation lists is never overwritten or removed by a write (a new version gets a
content-named file, ``part-0-<hash>.parquet``); superseded files are collected by a later publish.

- full write (:meth:`StoreWriter.write_arrow`): one base part (``part-0.parquet``);
- append (:meth:`StoreWriter.append_arrow`): one new part from a date on, or the last part rewritten with its
  rows before that date, or, for any other overlap or too many parts, a compaction;
- compaction (:meth:`StoreWriter.compact`): the parts merged into one base part (same rows).

Writes are idempotent (the same frame gives the same bytes) and one at a time per store (the writer lock).
Must not compute any science.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import AbstractContextManager, contextmanager
from dataclasses import dataclass
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from lakefeed.exceptions import StoreError
from lakefeed.store._generations import DEFAULT_KEEP, mark_pending, protected_parts, publish
from lakefeed.store._integrity import read_checked
from lakefeed.store._manifest import read_entry, read_head, write_entry
from lakefeed.store._meta import make_entry, time_range, with_schema, write_options
from lakefeed.store._options import WriteOptions
from lakefeed.store._parts import BASE, date_part_name, ensure_intact, live_parts, part_hashes, read_parts, write_file
from lakefeed.store.layout import partition_path

__all__ = ["StoreWriter", "day_bound"]


def day_bound(day: pd.Timestamp, kind: pa.DataType) -> pa.Scalar:
    """A date as a scalar comparable with a date or timestamp column."""
    return pa.scalar(day.date() if pa.types.is_date(kind) else day.to_pydatetime(), kind)


@dataclass(frozen=True)
class _Tail:
    """Where an append's rows go: ``kind`` is ``same`` (no rows, no overlap: new provenance only), ``new`` (a
    new part), ``last`` (the last part rewritten with its rows before ``since``) or ``compact``."""

    kind: str
    parts: list[dict[str, Any]]


def _plan_tail(parts: list[dict[str, Any]], since: pd.Timestamp, rows: int, max_parts: int) -> _Tail:
    after = [i for i, p in enumerate(parts) if p.get("last") is None or pd.Timestamp(p["last"]) >= since]
    if not after and rows == 0:
        return _Tail("same", parts)
    if after and after != [len(parts) - 1]:
        return _Tail("compact", parts)
    kept = parts[:-1] if after else parts
    if len(kept) + 1 > max_parts:
        return _Tail("compact", parts)
    return _Tail("last" if after else "new", kept)


class StoreWriter:
    """The writing half of :class:`lakefeed.store.Store` (see there for the attributes)."""

    fs: Any
    path: str
    url: str
    local: bool
    staged: bool
    keep_generations: int | None
    _depth: int

    def lock(self) -> AbstractContextManager[None]:  # provided by Store
        raise NotImplementedError

    def writer_entry(self, table: str, lake: str) -> dict[str, Any] | None:
        """The writers' manifest entry of a partition (what the next write extends; unpublished changes
        included), or None. Read-only."""
        return read_entry(self.fs, self.path, table, lake)

    def _located(self, path: str) -> str:
        return path if self.local else self.fs.unstrip_protocol(path)

    # -- publishing ---------------------------------------------------------------------------------------
    def keep(self) -> int:
        """Generations kept before they are collected: this store's option, else the store's recorded one, else 3."""
        if self.keep_generations is not None:
            return self.keep_generations
        recorded = read_head(self.fs, self.path).get("keep_generations")
        return recorded if isinstance(recorded, int) and recorded >= 1 else DEFAULT_KEEP

    def publish(self) -> int | None:
        """Publish every unpublished change (of this run, or of a run that died) as the next generation, in
        one atomic step; collect generations beyond :meth:`keep`. Returns the current generation."""
        with self.lock():
            return publish(self.fs, self.path, local=self.local, keep=self.keep())

    @contextmanager
    def publishing(self) -> Iterator[None]:
        """Inside the block this store is staged (reads the writers' view, writes stay unpublished); at a clean
        end everything unpublished is published as one generation. After an exception nothing is published:
        readers keep the previous generation, and the next publish includes what was written."""
        was = self.staged
        self.staged = True
        try:
            yield
        finally:
            self.staged = was
        self.publish()

    @contextmanager
    def _writing(self, table: str, lake: str) -> Iterator[None]:
        """Hold the writer lock for a write of one partition, mark it changed, publish it at the end of the
        outermost write unless the store is staged (a run publishes once, at its end)."""
        with self.lock():
            mark_pending(self.fs, self.path, table, lake, local=self.local)
            self._depth += 1
            try:
                yield
            finally:
                self._depth -= 1
            if self._depth == 0 and not self.staged:
                publish(self.fs, self.path, local=self.local, only=[(table, lake)], keep=self.keep())

    # -- writing ------------------------------------------------------------------------------------------
    def write_table(
        self, table: str, lake: str, frame: pd.DataFrame, options: WriteOptions | None = None, **fields: Any
    ) -> str:
        """Atomically replace the partition of ``lake`` in ``table`` with ``frame``; record it in the manifest.

        Parameters
        ----------
        frame
            The rows; a ``lake`` column is dropped (it is the Hive partition key).
        options, **fields
            A :class:`~lakefeed.store.WriteOptions`, and/or its fields as keywords (``units``, ``descriptions``,
            ``metadata``, ``inputs``, ``config_hash``, ``time_column``, ``sort_by``), which take precedence.

        Returns
        -------
        str
            Path (or URL) of the written file.
        """
        frame = frame.drop(columns=["lake"], errors="ignore").reset_index(drop=True)
        frame.attrs = {}
        return self.write_arrow(table, lake, pa.Table.from_pandas(frame, preserve_index=False), options, **fields)

    def write_arrow(
        self, table: str, lake: str, arrow: pa.Table, options: WriteOptions | None = None, **fields: Any
    ) -> str:
        """As :meth:`write_table`, for an Arrow table (e.g. rows merged without pandas)."""
        opts = WriteOptions.of(options, fields)
        arrow = self._prepared(arrow, opts)
        with self._writing(table, lake):
            return self._replace(table, lake, arrow, opts)

    def append_arrow(
        self,
        table: str,
        lake: str,
        arrow: pa.Table,
        options: WriteOptions | None = None,
        *,
        since: object,
        max_parts: int = 24,
        **fields: Any,
    ) -> str:
        """Replace the rows keyed on or after ``since`` by ``arrow`` without rewriting the older rows.

        The rows of ``arrow`` (all keyed on or after ``since`` in the options' ``time_column``, which is
        required) go into one part file: a new one (``part-<since>.parquet``) when no live part holds rows on
        or after ``since``; the last part rewritten with its rows before ``since`` plus ``arrow`` when only
        it does (the spill-over rows of the previous refresh). Any other overlap, or more than ``max_parts``
        parts afterwards, rewrites the partition in full (a compaction). The columns must equal the stored
        ones. Without a stored partition this is :meth:`write_arrow`.

        Returns
        -------
        str
            Path (or URL) of the part file written.
        """
        opts = WriteOptions.of(options, fields)
        if not opts.time_column:
            raise TypeError("append_arrow needs the time column (time_column=...) that 'since' refers to")
        since = pd.Timestamp(since)
        arrow = self._prepared(arrow, opts)
        with self._writing(table, lake):
            return self._extend(table, lake, arrow, since, opts, max_parts)

    def compact(self, table: str, lake: str) -> str:
        """Merge the part files of a partition into one (same rows, same order as a fresh full write)."""
        with self._writing(table, lake):
            return self._rewrite(table, lake, WriteOptions())

    # -- the steps ----------------------------------------------------------------------------------------
    @staticmethod
    def _prepared(arrow: pa.Table, opts: WriteOptions) -> pa.Table:
        if "lake" in arrow.column_names:
            arrow = arrow.drop_columns(["lake"])
        return with_schema(arrow, opts.schema_for(arrow))

    def _new_part(
        self, table: str, lake: str, wanted: str | None, arrow: pa.Table, opts: WriteOptions
    ) -> dict[str, Any]:
        """Write one part file and return its record. ``wanted``: its name; None: the base, content-named
        (``part-0-<hash>.parquet``). A name that a kept generation lists for other bytes gets the hash too."""
        listed = protected_parts(self.fs, self.path, table, lake)

        def name(digest: str) -> str:
            stem = wanted or f"part-0-{digest[:16]}.parquet"
            if stem in listed and listed[stem] != digest:
                return f"{stem[: -len('.parquet')]}-{digest[:16]}.parquet"
            return stem

        part_dir = partition_path(self.path, table, lake)
        file, digest = write_file(self.fs, self.local, part_dir, name, arrow, write_options(arrow.schema))
        _, trange = time_range(arrow, opts.time_column)
        return {"file": file, "rows": arrow.num_rows, "first": trange[0], "last": trange[1], "sha256": digest}

    def _record(self, table: str, lake: str, arrow: pa.Table, parts: list[dict[str, Any]], opts: WriteOptions) -> None:
        col, _ = time_range(arrow.slice(0, 0), opts.time_column)  # the column only (no rows: no min/max)
        entry = make_entry(arrow, parts, col, opts.inputs, opts.config_hash, opts.metadata, opts.sort_by)
        write_entry(self.fs, self.path, table, lake, entry, local=self.local)

    def _replace(self, table: str, lake: str, arrow: pa.Table, opts: WriteOptions) -> str:
        """A full write: one base part, ``part-0.parquet`` when the partition is that one part or has no base
        yet (replaced in place unless a kept generation lists it), else content-named."""
        old = live_parts(self.writer_entry(table, lake), self.fs, partition_path(self.path, table, lake))
        part = self._new_part(table, lake, BASE if BASE not in old or old == [BASE] else None, arrow, opts)
        self._record(table, lake, arrow, [part], opts)
        return self._located(f"{partition_path(self.path, table, lake)}/{part['file']}")

    def _extend(
        self, table: str, lake: str, arrow: pa.Table, since: pd.Timestamp, opts: WriteOptions, max_parts: int
    ) -> str:
        part_dir = partition_path(self.path, table, lake)
        entry = self.writer_entry(table, lake)
        parts = [dict(p) for p in (entry or {}).get("parts") or []]
        if not parts and live_parts(entry, self.fs, part_dir):
            return self._rewrite(table, lake, opts, since, arrow)  # a partition without part list: merge
        if not parts or not self.fs.exists(f"{part_dir}/{parts[0]['file']}"):
            return self._replace(table, lake, arrow, opts)
        ensure_intact(self.fs, self.local, part_dir, entry)  # never extend a damaged partition
        if list(entry.get("columns", [])) != arrow.column_names:  # type: ignore[union-attr]
            raise StoreError(
                f"cannot append to {table}/lake={lake}: columns differ from the stored ones; rewrite it in full"
            )
        tail = _plan_tail(parts, since, arrow.num_rows, max_parts)
        if tail.kind == "compact":
            return self._rewrite(table, lake, opts, since, arrow)
        if tail.kind == "same":  # nothing to add or replace: new provenance, same files
            col = entry.get("time_column") or opts.time_column  # type: ignore[union-attr]
            self._record(table, lake, arrow, parts, WriteOptions.of(opts, {"time_column": col}))
            return self._located(f"{part_dir}/{parts[-1]['file']}")
        if tail.kind == "last":
            arrow, wanted = self._merged_last(part_dir, entry, parts[-1]["file"], arrow, since, opts), parts[-1]["file"]
        else:
            wanted = date_part_name(since)
        part = self._new_part(table, lake, wanted, arrow, opts)
        self._record(table, lake, arrow, [*tail.parts, part], opts)
        return self._located(f"{part_dir}/{part['file']}")

    def _merged_last(
        self, part_dir: str, entry: Any, name: str, arrow: pa.Table, since: pd.Timestamp, opts: WriteOptions
    ) -> pa.Table:
        """The last part's rows before ``since`` followed by ``arrow`` (sorted by the keys, as one file reads)."""
        old = read_checked(self.fs, self.local, f"{part_dir}/{name}", part_hashes(entry).get(name), None)
        tcol = old[opts.time_column]
        kept = old.filter(pc.less(tcol, day_bound(since, tcol.type)))
        merged = pa.concat_tables([kept, arrow.cast(kept.schema)])
        return merged.sort_by([(k, "ascending") for k in opts.sort_by]) if opts.sort_by else merged

    def _rewrite(
        self, table: str, lake: str, opts: WriteOptions, since: pd.Timestamp | None = None, rows: pa.Table | None = None
    ) -> str:
        """Rewrite a partition as one base part (compaction), its rows from ``since`` on replaced by ``rows``."""
        part_dir = partition_path(self.path, table, lake)
        current, entry = read_parts(self.fs, self.local, part_dir, lambda: self.writer_entry(table, lake))
        if current is None:
            raise StoreError(f"table {table!r} has no partition for lake {lake!r} in {self.url}; run the stage first")
        opts = opts.completed(entry or {}, current.schema)
        if since is not None and rows is not None:
            tcol = current[opts.time_column]
            kept = current.filter(pc.less(tcol, day_bound(since, tcol.type)))
            current = pa.concat_tables([kept, rows.cast(kept.schema)])
        if opts.sort_by:
            current = current.sort_by([(k, "ascending") for k in opts.sort_by])
        return self._replace(table, lake, self._prepared(current, opts), opts)
