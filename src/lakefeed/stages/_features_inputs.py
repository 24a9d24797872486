"""Inputs of the features stage: driver and target tables read from the store, their fingerprints, and how
a refresh can extend the stored table (from the part lists of the driver tables).

Takes a store and a lake; returns pandas frames indexed by date and plain values. Must not compute
features (the pure core does) nor write anything.
"""

from __future__ import annotations

import json

import pandas as pd
import pyarrow as pa

from lakefeed.exceptions import FeatureError
from lakefeed.features import refresh_start
from lakefeed.features.incremental import prefix_digest
from lakefeed.features.windows import as_dates
from lakefeed.stages.refresh_plan import RefreshMode, RefreshPlan
from lakefeed.store import Store, read_units

__all__ = [
    "driver_parts",
    "drivers_digest",
    "load_drivers",
    "partition_hashes",
    "read_dated",
    "refresh_plan",
    "targets_digest",
]

_DRIVER_TABLES = ("drivers_daily", "hydrology_daily")
_TAIL_REACH = pd.Timedelta(days=62)  # driver changes reaching further back are checked by fingerprint
_NOT_DRIVERS = {"valid_fraction", "flags", "load_method", "zone", "date", "lake"}


def read_dated(store: Store, table: str, lake: str, since: object) -> pd.DataFrame:
    """A store table as pandas with its ``date`` column as datetime64 (converted in Arrow: fast),
    only the rows from ``since`` on when given; units in ``attrs``."""
    arrow = store.read_arrow(table, lake, since=since)
    units = read_units(arrow.schema)
    if "date" in arrow.column_names and pa.types.is_date(arrow["date"].type):
        at = arrow.column_names.index("date")
        arrow = arrow.set_column(at, "date", arrow["date"].cast(pa.timestamp("s")).cast(pa.timestamp("ns")))
    frame = arrow.to_pandas()
    frame.attrs["units"] = units
    return frame


def load_drivers(
    store: Store, lake: str, *, zone: str, aois: list[str], wanted: list[str] | None, since: object = None
) -> tuple[dict[str | None, pd.DataFrame], dict[str, str], list[str]]:
    """Daily driver frames (indexed by date) per AOI (key None: the same for all), units, tables read.

    ``since`` (a date): only the driver days from it on (the spill-over of an incremental refresh).
    """
    units: dict[str, str] = {}
    read: list[str] = []
    per_zone: dict[str, pd.DataFrame] = {}
    hyd = None
    if store.has_table("drivers_daily", lake):
        dd = read_dated(store, "drivers_daily", lake, since)
        units.update(dd.attrs.get("units", {}))
        zones = sorted(dd["zone"].astype(str).unique())
        need = [f"aoi:{a}" for a in aois] if zone == "aoi" else [zone]
        missing = [z for z in need if z not in zones]
        if missing:
            raise FeatureError(
                f"drivers_daily of lake {lake!r} has no zone {missing[0]!r} (features.driver_zone = {zone!r}); "
                f"zones present: {zones}. Set features.driver_zone to one of them or enable that zone."
            )
        for z in need:
            per_zone[z] = _values(dd[dd["zone"].astype(str) == z])
        read.append(f"drivers_daily (zone {zone!r})")
    if store.has_table("hydrology_daily", lake):
        h = read_dated(store, "hydrology_daily", lake, since)
        units.update(h.attrs.get("units", {}))
        hyd = _values(h)
        read.append("hydrology_daily")
    keys: list[str | None] = [f"aoi:{a}" for a in aois] if zone == "aoi" and per_zone else [None]
    frames: dict[str | None, pd.DataFrame] = {}
    for key in keys:
        parts = [per_zone[key if key else zone]] if per_zone else []
        if hyd is not None:
            parts.append(hyd)
        empty = pd.DataFrame(index=pd.DatetimeIndex([]))
        frame = pd.concat(parts, axis=1, join="outer").sort_index() if parts else empty
        frames[key.split(":", 1)[1] if key else None] = frame
    available = sorted({c for f in frames.values() for c in f.columns})
    if wanted is not None:
        absent = [c for c in wanted if c not in available]
        if absent:
            raise FeatureError(
                f"driver {absent[0]!r} named in features.drivers of lake {lake!r} is provided by no store table "
                f"(read: {', '.join(read) or 'none: no drivers_daily or hydrology_daily table'}); "
                f"available drivers: {available}. Fix the name or run the stage that writes it."
            )
        frames = {k: f[list(wanted)] for k, f in frames.items()}
    return frames, units, read


def _values(frame: pd.DataFrame) -> pd.DataFrame:
    kinds = {c: dt.kind for c, dt in frame.dtypes.items()}  # numeric, not bool
    cols = [c for c in frame.columns if c not in _NOT_DRIVERS and kinds[c] in "iuf"]
    out = frame.set_index(as_dates(frame["date"]))[cols].astype(float)
    return out[~out.index.duplicated(keep="first")].sort_index()


def drivers_digest(frames: dict[str | None, pd.DataFrame], through: object) -> str:
    """Fingerprint of the driver frames up to the 'known through' date."""
    ordered = sorted(frames.items(), key=lambda kv: str(kv[0]))
    return ";".join(prefix_digest(f, date_column=None, through=through) for _, f in ordered)


def targets_digest(targets: pd.DataFrame, through: object) -> str:
    """Fingerprint of the accepted targets up to the 'known through' date."""
    return prefix_digest(targets, date_column="date", through=through)


def driver_parts(store: Store, lake: str) -> dict[str, list[list[object]]]:
    """Live part files of the driver tables (name, SHA-256, first key date), from the manifest."""
    out: dict[str, list[list[object]]] = {}
    for t in _DRIVER_TABLES:
        entry = store.entry(t, lake)
        if entry and store.has_table(t, lake):
            out[t] = [[p.get("file"), p.get("sha256"), p.get("first")] for p in entry.get("parts") or []]
    return out


def _unchanged_before(
    now: dict[str, list[list[object]]], recorded: dict[str, list[list[object]]], through: object
) -> pd.Timestamp | None:
    """First date from which the driver rows may differ from the previous build's, from the part lists
    alone: the earliest first date of a part that is new or was replaced since then (an appended month,
    or a rewritten tail of provisional days), or the day after ``through``. Rows before it sit in parts
    with the same content hash as then. None when that cannot be told (a table appeared or went, a
    part of unknown range): the caller reads all rows and compares their fingerprint instead."""
    if not now or set(now) != set(recorded):
        return None
    start = pd.Timestamp(through) + pd.Timedelta(days=1)
    for table, parts in now.items():
        old = {(str(p[0]), str(p[1])): p for p in recorded[table]}
        live = {(str(p[0]), str(p[1])) for p in parts}
        if not old:
            return None
        changed = [p for p in parts if (str(p[0]), str(p[1])) not in old]
        changed += [p for key, p in old.items() if key not in live]  # replaced or removed since then
        for p in changed:
            if len(p) < 3 or p[2] is None:
                return None
            start = min(start, pd.Timestamp(p[2]).normalize())
    return start


def partition_hashes(store: Store, lake: str) -> dict[str, str]:
    """Content hashes of the input partitions (from the manifest): provenance and the up-to-date check."""
    out = {}
    for t in ("target_daily", "drivers_daily", "hydrology_daily"):
        entry = store.entry(t, lake)
        if entry and store.has_table(t, lake):
            out[f"{t}/lake={lake}"] = entry.get("content_hash", "")
    return out


def refresh_plan(store: Store, lake: str, prev: dict | None, targets: pd.DataFrame, *, full: bool) -> RefreshPlan:
    """How to refresh the features table.

    ``TAIL`` from ``day`` when the part lists tell from which date the driver rows may have changed (read
    only the last days; ``day`` is that date or the day after the old inputs, whichever is first), ``CHECK``
    from ``day`` when their fingerprint must be compared (read all), ``FULL`` otherwise. ``known`` holds the
    stored ``drivers_through`` and ``targets_through`` dates. The targets' fingerprint is checked here.
    """
    md = (prev or {}).get("metadata", {})
    old = (md.get("drivers_through"), md.get("targets_through"))
    known = {"drivers_through": old[0], "targets_through": old[1]}
    if full or not prev or not store.has_table("features", lake) or not all(old):
        return RefreshPlan.full(**known)
    if targets_digest(targets, old[1]) != md.get("targets_digest_at_through"):
        return RefreshPlan.full(**known)
    since = refresh_start(*old)
    recorded = json.loads(md.get("input_parts") or "{}")
    changed_from = _unchanged_before(driver_parts(store, lake), recorded, old[0])
    # a part rewritten far back (e.g. a whole table written again) may hold the same old rows: reading all
    # and comparing fingerprints then saves recomputing them
    if md.get("drivers_first") and changed_from is not None and changed_from >= since - _TAIL_REACH:
        return RefreshPlan(RefreshMode.TAIL, min(since, changed_from), known=known)
    return RefreshPlan(RefreshMode.CHECK, since, known=known)
