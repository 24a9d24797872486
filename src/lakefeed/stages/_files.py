"""Write a frame to one Parquet file outside the store, with each column's unit in its field metadata.

Takes a pandas frame, the column units and optional schema metadata; writes the file aside and moves it
into place. Used by the library calls behind ``lakefeed zonal`` and ``lakefeed scenes``. Must not write
into a store (the store writes its own tables).
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path

import pandas as pd

__all__ = ["write_parquet"]


def write_parquet(
    frame: pd.DataFrame, path: Path, units: Mapping[str, str], *, metadata: Mapping[str, str] | None = None
) -> None:
    """Write ``frame`` to ``path`` with each column's unit in its Arrow field metadata (``unit``).

    ``metadata``: extra schema metadata entries (key -> text), kept beside pandas' own.
    """
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.Table.from_pandas(frame, preserve_index=False)
    fields = [f.with_metadata({b"unit": units[f.name].encode()}) if f.name in units else f for f in table.schema]
    meta = dict(table.schema.metadata or {}) | {k.encode(): v.encode() for k, v in (metadata or {}).items()}
    table = table.cast(pa.schema(fields, metadata=meta))
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    pq.write_table(table, tmp)
    tmp.replace(path)
