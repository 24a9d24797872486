"""Arrow schema metadata (units, descriptions), Parquet write options and manifest entries of the store.

Takes Arrow tables and schemas; returns schemas with per-column units and descriptions, the
Parquet options the store writes with, time ranges and the manifest entry of a partition.
Must not compute any science and does no file I/O beyond hashing named input files.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping, Sequence
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from lakefeed.store._fs import file_digest

__all__ = [
    "TIME_COLUMNS",
    "make_entry",
    "read_descriptions",
    "read_units",
    "schema_with_units",
    "time_range",
    "with_schema",
    "write_options",
]

#: Candidate time columns for a table's time range in the manifest, in order of preference.
TIME_COLUMNS = ("target_date", "date", "time", "issue_date")


def with_schema(table: pa.Table, schema: pa.Schema) -> pa.Table:
    """``table`` under ``schema`` (same names and types, new metadata) without casting column by column."""
    if table.schema.types == schema.types:
        return pa.Table.from_arrays(table.columns, schema=schema)
    return table.cast(schema)


def schema_with_units(
    table: pa.Table, units: Mapping[str, str], descriptions: Mapping[str, str], extra: Mapping[str, str]
) -> pa.Schema:
    """The schema of ``table`` with per-column units and descriptions (field metadata ``unit``,
    ``description``) and table-level metadata ``lakefeed.<key>`` from ``extra``."""
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


def write_options(schema: pa.Schema) -> dict[str, Any]:
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


def time_range(arrow: pa.Table, time_column: str | None) -> tuple[str | None, list[str | None]]:
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


def make_entry(
    arrow: pa.Table,
    parts: list[dict[str, Any]],
    time_column: str | None,
    inputs: Mapping[str, str] | Sequence[str] | None,
    config_hash: str | None,
    metadata: Mapping[str, str] | None,
    sort_by: Sequence[str] | None,
) -> dict[str, Any]:
    """Manifest entry of a partition: totals over its parts, provenance, the live part list."""
    hashes = dict(inputs) if isinstance(inputs, Mapping) else {str(p): file_digest(p) for p in (inputs or [])}
    firsts = [p["first"] for p in parts if p["first"] is not None]
    lasts = [p["last"] for p in parts if p["last"] is not None]
    trange = [min(firsts, key=pd.Timestamp) if firsts else None, max(lasts, key=pd.Timestamp) if lasts else None]
    content = (
        parts[0]["sha256"]
        if len(parts) == 1
        else hashlib.sha256(",".join(p["sha256"] for p in parts).encode()).hexdigest()
    )
    return {
        "rows": int(sum(p["rows"] for p in parts)),
        "columns": list(arrow.column_names),
        "time_column": time_column,
        "time_range": trange,
        "config_hash": config_hash,
        "inputs": dict(sorted(hashes.items())),
        "content_hash": content,
        "metadata": dict(metadata or {}),
        "parts": parts,
        "sort_by": list(sort_by or []),
    }
