"""Incremental refresh of the forecast stage: which stored raw daily forecast drivers a build reuses.

Takes the stored ``forecast_drivers_daily`` partition (its manifest entry and rows), the lazily opened
:class:`~lakefeed.sources.forecasts.ForecastArchive`, ``since`` (optional), the current input hashes and
the build's signature; returns the stored raw rows (``adjustment == "raw"``) of the issues that need not
be read again and the issue times that must be read (:func:`refresh_plan`), or why a full build is
needed. :func:`raw_drivers` puts the reused and the newly extracted rows together (the extraction itself is
the stage's, passed in). Must not read a forecast grid itself (only coordinates) nor adjust anything.

Which issues are read: those issued on or after ``since`` (midnight UTC of the first day of the earliest
changed source month: the file names' months are the issue months, issues being UTC), and every issue
of a forecast file whose content hash differs from the one recorded in the manifest (or that is new).
The stage compares the hashes itself, so ``since`` is a hint: without it (a refresh in which only the
reanalysis changed, or a plain run) an unchanged archive is not read at all. The raw rows of an issue
depend on that issue's grids, the zones and the settings only (checked: extracting a subset of issues
gives the same rows as the whole archive), so the reused rows plus the new ones equal a full build's.

A full build is needed when there is no stored table, when the configuration (file hash or the
in-memory lake and forecast settings), the columns or a geometry layer differ, when a recorded
forecast file is gone, when the stored raw issues outside the read set differ from the archive's, or
when every issue has to be read anyway.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable, Mapping, Sequence
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pandas as pd

from lakefeed.extract.daily import DAILY_COLUMNS
from lakefeed.extract.forecast_daily import FORECAST_KEYS
from lakefeed.sources.forecasts import ISSUE
from lakefeed.stages._provenance import config_hash, input_hashes, layer_paths
from lakefeed.stages.refresh_plan import RefreshMode, RefreshPlan

if TYPE_CHECKING:
    from lakefeed.sources.forecasts import ForecastArchive
    from lakefeed.store import Store

__all__ = [
    "RAW_COLUMNS",
    "SIGNATURE",
    "content_hash",
    "raw_drivers",
    "raw_signature",
    "refresh_plan",
    "stored_raw",
    "table_columns",
]

#: Columns of the raw daily forecast frame (:func:`lakefeed.extract.forecast_daily.to_daily_by_lead`).
RAW_COLUMNS = FORECAST_KEYS + DAILY_COLUMNS[2:]
_KEYS = ["zone", "issue_date", "lead_days", "adjustment", "issue_time", "date"]
#: Manifest metadata key holding :func:`raw_signature`.
SIGNATURE = "raw_signature"


def table_columns() -> list[str]:
    """Columns of ``forecast_drivers_daily`` as the stage writes them."""
    return _KEYS + [c for c in RAW_COLUMNS if c not in _KEYS] + ["fitted_through"]


def raw_signature(project: Any) -> str:
    """Hash of the settings the raw rows depend on (lake model and forecast source, in memory)."""
    lake, src = project.lake, project.sources.forecast
    payload = lake.model_dump_json() + "\0" + (src.model_dump_json() if src is not None else "")
    return hashlib.sha256(payload.encode()).hexdigest()[:16]


def stored_raw(stored: pd.DataFrame) -> pd.DataFrame:
    """The raw rows of a stored ``forecast_drivers_daily`` frame with the dtypes of a fresh extraction."""
    raw = stored.loc[stored["adjustment"] == "raw", RAW_COLUMNS].copy()
    raw["zone"] = raw["zone"].astype(str).astype(object)
    for c in ("issue_date", "issue_time"):
        raw[c] = pd.to_datetime(raw[c]).astype("datetime64[ns]")
    raw["date"] = pd.to_datetime(raw["date"]).astype("datetime64[s]")
    raw["lead_days"] = raw["lead_days"].astype("int16")
    return raw.reset_index(drop=True)


def _file_issues(path: str) -> pd.DatetimeIndex:
    from lakefeed.sources.forecasts import open_forecasts

    return open_forecasts(path).issue_times


def refresh_plan(
    entry: Mapping[str, Any] | None,
    stored: pd.DataFrame | None,
    issues: pd.DatetimeIndex,
    *,
    files: Sequence[str | Path],
    since: object,
    inputs: Mapping[str, str],
    config_hash: str,
    signature: str,
) -> RefreshPlan:
    """The stored raw rows to reuse (``reuse``) and the issue times to read (``read``), or a full build and why.

    Parameters
    ----------
    entry, stored
        Manifest entry and rows of the stored ``forecast_drivers_daily`` partition (None: no table).
    issues
        Issue times (UTC) of the whole current archive.
    files
        The archive's files.
    since
        First day of the earliest changed forecast month (None: only the hashes decide).
    inputs
        Current content hashes ({absolute path: sha256}) of the forecast files and geometry layers.
    config_hash, signature
        The configuration hash and :func:`raw_signature` the build records.
    """
    if not entry or not entry.get("parts") or stored is None:
        return RefreshPlan.full("no stored table")
    if entry.get("config_hash") != config_hash or (entry.get("metadata") or {}).get(SIGNATURE) != signature:
        return RefreshPlan.full("configuration changed")
    if [c for c in (entry.get("columns") or []) if c != "lake"] != table_columns():
        return RefreshPlan.full("stored columns differ")
    old: Mapping[str, str] = entry.get("inputs") or {}
    grid_files = {str(Path(f).absolute()) for f in files}
    if any(old.get(p) != h for p, h in inputs.items() if p not in grid_files):
        return RefreshPlan.full("a geometry layer changed")
    if any(p not in inputs for p in old if not p.startswith("drivers_daily/")):
        return RefreshPlan.full("a forecast file recorded in the table is gone")
    read = pd.DatetimeIndex([])
    if since is not None:
        read = issues[issues >= pd.Timestamp(since).tz_localize(None).normalize()]
    for path in sorted(p for p in grid_files if old.get(p) != inputs.get(p)):
        read = read.union(_file_issues(path))
    read = issues[issues.isin(read)]
    keep = issues[~issues.isin(read)]
    if keep.empty:
        return RefreshPlan.full("every forecast issue is new or changed")
    raw = stored_raw(stored)
    mine = raw["issue_time"].isin(keep)
    have = pd.DatetimeIndex(raw.loc[mine, "issue_time"].unique()).sort_values()
    if not have.equals(keep):
        return RefreshPlan.full("the stored raw issues differ from the archive's unchanged issues")
    first = since if since is not None else (read.min() if len(read) else None)
    day = None if first is None else pd.Timestamp(first).date()
    # without issues to read, the raw drivers are all reused and only the adjustment is redone
    reason = "" if len(read) else "incremental (forecast archive unchanged: raw drivers reused, adjustment redone)"
    return RefreshPlan(RefreshMode.TAIL, day, reason, reuse=raw.loc[mine].reset_index(drop=True), read=read)


def raw_drivers(
    project: Any,
    store: Store,
    archive: ForecastArchive,
    *,
    since: object,
    full: bool,
    extract: Callable[..., tuple[pd.DataFrame, list[str]]],
    progress: Any = None,
) -> tuple[pd.DataFrame, list[str], dict[str, str], str]:
    """Raw daily forecast drivers of the whole archive, warnings, input hashes and the build's reason.

    Reuses the stored raw rows of the issues whose files are unchanged and that lie before ``since``
    (:func:`refresh_plan`); only the other issues' grids are read, by ``extract`` (the stage's
    :func:`~lakefeed.stages.forecast.daily_forecasts`: archive, project, cache_dir, progress -> rows, warnings).
    """
    lake = project.lake
    zone_layers = [lake.lake, lake.aois if lake.zones.aois else None]
    zone_layers += [lake.subbasins] if lake.zones.catchment or lake.zones.subbasins else []
    inputs = input_hashes([*archive.files, *layer_paths(*zone_layers)])
    cache = Path(store.root) / "_cache" / "weights"
    plan = RefreshPlan.full("requested")
    if not full:
        entry = store.entry("forecast_drivers_daily", lake.id)
        stored = None
        if entry and store.has_table("forecast_drivers_daily", lake.id):
            stored = store.read_table("forecast_drivers_daily", lake.id)
        plan = refresh_plan(
            entry,
            stored,
            archive.issue_times,
            files=archive.files,
            since=since,
            inputs=inputs,
            config_hash=config_hash(project),
            signature=raw_signature(project),
        )
    if plan.reuse is None:
        raw, warnings = extract(archive, project, cache_dir=cache, progress=progress)
        return raw, warnings, inputs, plan.summary()
    warnings: list[str] = []
    frames = [plan.reuse]
    if plan.read is not None and len(plan.read):
        part = replace(archive, dataset=archive.dataset.sel({ISSUE: plan.read}))
        new, warnings = extract(part, project, cache_dir=cache, progress=progress)
        frames.append(new)
    raw = pd.concat(frames, ignore_index=True)
    raw = raw.sort_values(["zone", "issue_date", "lead_days"], kind="stable").reset_index(drop=True)
    return raw, warnings, inputs, plan.summary()


def content_hash(raw: pd.DataFrame) -> str:
    """Content hash of the raw drivers (the stored whole-overlap quantile table is reused only for the same)."""
    values = pd.util.hash_pandas_object(raw.astype({"flags": str}), index=False).to_numpy()
    return hashlib.sha256(values.tobytes()).hexdigest()[:16]
