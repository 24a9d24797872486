"""Parquet I/O of store tables with per-column units in the Arrow schema metadata."""

from __future__ import annotations

import json
import os
import uuid
from collections.abc import Mapping
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from lakefeed.exceptions import StoreError
from lakefeed.store.layout import partition_path, table_path

__all__ = ["Store", "read_units"]

PART = "part-0.parquet"


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
    for k, v in extra.items():
        meta[f"lakefeed.{k}".encode()] = v.encode()
    return pa.schema(fields, metadata=meta)


def read_units(schema: pa.Schema) -> dict[str, str]:
    """Per-column units stored in a schema (field metadata ``unit``)."""
    out = {}
    for f in schema:
        if f.metadata and b"unit" in f.metadata:
            out[f.name] = f.metadata[b"unit"].decode()
    return out


class Store:
    """A lakefeed store rooted at a local folder.

    Parameters
    ----------
    root
        Folder of the store (created on first write).
    """

    def __init__(self, root: str | os.PathLike[str]) -> None:
        self.root = str(root)

    def write_table(
        self,
        table: str,
        lake: str,
        frame: pd.DataFrame,
        *,
        units: Mapping[str, str] | None = None,
        descriptions: Mapping[str, str] | None = None,
        metadata: Mapping[str, str] | None = None,
    ) -> str:
        """Atomically replace the partition of ``lake`` in ``table`` with ``frame``.

        The file is written aside and moved into place with ``os.replace``; a reader never
        sees half a table and a crash leaves the previous version intact. The ``lake``
        column is not stored in the file (it is the Hive partition key). Returns the path.
        """
        frame = frame.drop(columns=["lake"], errors="ignore").reset_index(drop=True)
        arrow = pa.Table.from_pandas(frame, preserve_index=False)
        arrow = arrow.cast(_schema_with_units(arrow, units or {}, descriptions or {}, metadata or {}))
        part_dir = Path(partition_path(self.root, table, lake))
        try:
            part_dir.mkdir(parents=True, exist_ok=True)
        except OSError as err:
            raise StoreError(f"store {self.root!r} is not writable ({err}); choose a writable folder") from err
        final = part_dir / PART
        tmp = part_dir.parent / f".tmp-{lake}-{uuid.uuid4().hex}.parquet"
        try:
            pq.write_table(arrow, tmp)
            os.replace(tmp, final)
        except OSError as err:
            tmp.unlink(missing_ok=True)
            raise StoreError(f"could not write {final}: {err}") from err
        return str(final)

    def read_table(self, table: str, lake: str | None = None) -> pd.DataFrame:
        """Read a table (one lake, or all lakes with a ``lake`` column) as pandas.

        Units are in ``frame.attrs['units']``.
        """
        if lake is not None:
            path = Path(partition_path(self.root, table, lake)) / PART
            if not path.exists():
                raise StoreError(
                    f"table {table!r} has no partition for lake {lake!r} in {self.root}; run the stage first"
                )
            t = pq.read_table(path)
            frame = t.to_pandas()
            frame.insert(0, "lake", lake)
        else:
            root = Path(table_path(self.root, table))
            parts = sorted(root.glob("lake=*/" + PART))
            if not parts:
                raise StoreError(f"table {table!r} not found in {self.root}; run the stage first")
            frames = []
            t = None
            for p in parts:
                t = pq.read_table(p)
                f = t.to_pandas()
                f.insert(0, "lake", p.parent.name.split("=", 1)[1])
                frames.append(f)
            frame = pd.concat(frames, ignore_index=True)
        frame.attrs["units"] = read_units(t.schema)
        return frame

    def has_table(self, table: str, lake: str) -> bool:
        """True when ``table`` has a partition for ``lake``."""
        return (Path(partition_path(self.root, table, lake)) / PART).exists()
