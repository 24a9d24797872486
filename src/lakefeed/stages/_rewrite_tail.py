"""Write a recomputed table from its first changed date on, leaving the older part files as they are.

A stage that recomputes a whole table (e.g. the forecast stage adding its re-forecast rows to
``features``) compares the new rows with the stored ones by their keys: rows that are equal
(missing values equal), dated before the first difference, stay in their part files; the rows from
that date on are written with :meth:`lakefeed.store.Store.append_arrow`. Equal tables write
nothing. A table whose columns changed is written whole. Must not compute any science.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from lakefeed.store import Store

__all__ = ["first_change", "write_from_first_change"]


def first_change(old: pd.DataFrame, new: pd.DataFrame, *, keys: Sequence[str], date: str) -> pd.Timestamp | None:
    """Earliest ``date`` of a key whose row differs between ``old`` and ``new`` (present in one only, or a
    value differs; missing equals missing), or None when the tables hold the same rows (keys unique)."""
    if sorted(old.columns) != sorted(new.columns):
        return pd.Timestamp(min(old[date].min(), new[date].min()))
    a, b = old.set_index(list(keys)), new.set_index(list(keys))
    union = a.index.union(b.index)
    differ = ~union.isin(a.index) | ~union.isin(b.index)
    a, b = a.reindex(union), b[a.columns].reindex(union)
    for c in a.columns:
        x, y = a[c].to_numpy(), b[c].to_numpy()
        differ |= ~(np.asarray(x == y, dtype=bool) | (pd.isna(x) & pd.isna(y)))
    if not differ.any():
        return None
    return pd.Timestamp(union.get_level_values(date)[differ].min())


def write_from_first_change(
    store: Store,
    table: str,
    lake: str,
    old: pd.DataFrame,
    new: pd.DataFrame,
    *,
    keys: Sequence[str],
    date: str,
    units: Mapping[str, str],
    descriptions: Mapping[str, str] | None = None,
) -> str:
    """Store ``new`` (the whole recomputed table) writing only its rows from the first change on; the
    manifest entry's provenance and metadata are kept. Returns what was done: ``unchanged``,
    ``appended from YYYY-MM-DD`` or ``rewritten`` (columns changed)."""
    entry = store.entry(table, lake) or {}
    kw = dict(
        units=units,
        descriptions=descriptions,
        metadata=entry.get("metadata"),
        inputs=entry.get("inputs"),
        config_hash=entry.get("config_hash"),
        time_column=date,
        sort_by=list(keys),
    )
    old = old.drop(columns=["lake"], errors="ignore")
    new = new.drop(columns=["lake"], errors="ignore")
    since = first_change(old, new, keys=keys, date=date)
    if since is None:
        return "unchanged"
    if list(entry.get("columns") or []) != list(new.columns):
        store.write_table(table, lake, new, **kw)  # type: ignore[arg-type]
        return "rewritten"
    tail = new[pd.to_datetime(new[date]) >= since].reset_index(drop=True)
    schema = pq.read_schema(store.part_files(table, lake)[0]).remove_metadata()
    schema = pa.schema([f.remove_metadata() for f in schema])
    arrow = pa.Table.from_pandas(tail, schema=schema, preserve_index=False)
    store.append_arrow(table, lake, arrow, since=since, **kw)  # type: ignore[arg-type]
    return f"appended from {since.date()}"
