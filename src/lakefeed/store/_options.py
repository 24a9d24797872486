"""The options of a store write, as one value: units, descriptions, metadata, provenance, time column, keys.

Takes keyword arguments of :meth:`lakefeed.store.Store.write_table`, ``write_arrow`` and ``append_arrow``
(or a :class:`WriteOptions`); gives the Arrow schema they describe and, for a rewrite of stored rows,
the same options completed from what the store recorded. Must not do file I/O or compute any science.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import pyarrow as pa

from lakefeed.store._meta import read_descriptions, read_units, schema_with_units

__all__ = ["WriteOptions"]


@dataclass(frozen=True)
class WriteOptions:
    """What a store write records beside the rows.

    Parameters
    ----------
    units, descriptions
        Per-column unit strings (e.g. ``{"chla": "mg m-3"}``) and descriptions, stored in the Arrow field
        metadata of every part file.
    metadata
        Extra table-level key/values (schema metadata ``lakefeed.<key>`` and the manifest entry).
    inputs
        Input files: {path or URL: sha256}, or a list of paths to hash.
    config_hash
        Hash of the configuration that produced the table.
    time_column
        Column giving the table's time range (default: the first of target_date, date, time, issue_date);
        required by :meth:`~lakefeed.store.Store.append_arrow`.
    sort_by
        Key columns by which readers sort the rows once a partition holds several part files.
    """

    units: Mapping[str, str] | None = None
    descriptions: Mapping[str, str] | None = None
    metadata: Mapping[str, str] | None = None
    inputs: Mapping[str, str] | Sequence[str] | None = None
    config_hash: str | None = None
    time_column: str | None = None
    sort_by: Sequence[str] | None = None

    @classmethod
    def of(cls, options: WriteOptions | None = None, fields: Mapping[str, Any] | None = None) -> WriteOptions:
        """``options`` (or the defaults) with ``fields`` (keyword arguments of a write) replacing its values."""
        base = options if options is not None else cls()
        if not fields:
            return base
        unknown = sorted(set(fields) - {f.name for f in dataclasses.fields(cls)})
        if unknown:
            raise TypeError(
                f"unknown store write option(s) {unknown}; known: {[f.name for f in dataclasses.fields(cls)]}"
            )
        return dataclasses.replace(base, **fields)

    def schema_for(self, arrow: pa.Table) -> pa.Schema:
        """The schema of ``arrow`` with these units, descriptions and metadata."""
        return schema_with_units(arrow, self.units or {}, self.descriptions or {}, self.metadata or {})

    def completed(self, stored: Mapping[str, Any], schema: pa.Schema) -> WriteOptions:
        """These options, each one left unset taken from the stored partition (manifest entry and schema):
        what a rewrite of stored rows (a compaction) records."""
        return WriteOptions(
            units=self.units or read_units(schema),
            descriptions=self.descriptions or read_descriptions(schema),
            metadata=self.metadata if self.metadata is not None else stored.get("metadata"),
            inputs=self.inputs if self.inputs is not None else stored.get("inputs"),
            config_hash=self.config_hash or stored.get("config_hash"),
            time_column=self.time_column or stored.get("time_column"),
            sort_by=self.sort_by or stored.get("sort_by") or None,
        )
