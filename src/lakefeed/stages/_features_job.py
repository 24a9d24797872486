"""One lake's features build between reading its inputs and writing its tables: what to read and recompute.

Takes a :class:`~lakefeed.config.Project` and a :class:`~lakefeed.store.Store`; reads the lake's targets and
driver tables, decides how to refresh (:func:`lakefeed.stages._features_inputs.refresh_plan`) and returns a
:class:`FeatureJob` ready to compute, or the :class:`~lakefeed.stages.StageResult` when there is nothing to
compute (skipped, or up to date). Must not compute features nor write anything.
"""

from __future__ import annotations

import hashlib
import json
import warnings
from dataclasses import dataclass

import pandas as pd

from lakefeed.config import Project
from lakefeed.exceptions import ConfigError, LakefeedWarning
from lakefeed.features import WindowPlan
from lakefeed.features.batch import Series
from lakefeed.features.windows import as_dates
from lakefeed.progress import Progress
from lakefeed.stages._features_inputs import (
    drivers_digest,
    load_drivers,
    partition_hashes,
    read_dated,
    refresh_plan,
)
from lakefeed.stages._result import StageResult
from lakefeed.stages.refresh_plan import RefreshMode
from lakefeed.store import Store

__all__ = ["FeatureJob", "features_config_hash", "prepare_job"]


def features_config_hash(project: Project, columns: list[str]) -> str:
    """Hash of the lake's feature options and the driver columns: a build with another one starts afresh."""
    payload = {"lake": project.lake.id, "features": project.lake.features.model_dump(mode="json"), "drivers": columns}
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()


@dataclass(eq=False)
class FeatureJob:
    """One lake's build between reading its inputs and writing its tables."""

    project: Project
    result: StageResult
    progress: Progress
    mode: RefreshMode  # see lakefeed.stages._features_inputs.refresh_plan
    since: pd.Timestamp | None  # first recomputed target date; None: every row
    prev: dict | None
    frames: dict[str | None, pd.DataFrame]
    columns: list[str]
    driver_units: dict[str, str]
    read: list[str]
    targets: pd.DataFrame
    plan: WindowPlan
    record: tuple[pd.Timestamp | None, pd.Timestamp | None]
    through: tuple[pd.Timestamp, pd.Timestamp]
    inputs: dict[str, str]
    options_hash: str
    config_hash: str
    allow_shrink: bool = False  # write even when stored rows or values would be lost (see stages._guard)

    def series(self) -> list[Series]:
        """The lake's series: per driver frame (all AOIs, or each AOI's own zone) and lead."""
        out = []
        for key, drivers in self.frames.items():
            tg = self.targets if key is None else self.targets[self.targets["aoi"] == key]
            out += [Series(tg, drivers, lead=h, since=self.since) for h in self.project.lake.features.leads]
        return out

    def batch_key(self) -> tuple:
        """Lakes computed in one pass share the window plan (windows, statistics, window options)."""
        p = self.plan
        return (p.windows, tuple(p.stats.items()), p.include_target_day, p.max_missing_fraction)

    def recorded_drivers_digest(self, day: object) -> str:
        """Fingerprint of the drivers up to ``day``; unknown (empty) when only the tail was read: the next
        check then rebuilds instead of trusting it."""
        return "" if self.mode is RefreshMode.TAIL else drivers_digest(self.frames, day)


def prepare_job(project: Project, store: Store, *, progress: Progress, full: bool) -> FeatureJob | StageResult:
    """Read what the lake's build needs and decide how to refresh; a result when there is nothing to compute."""
    lake, opts = project.lake, project.lake.features
    result = StageResult(stage="features", lake=lake.id)
    if opts.fold_kind == "blocked" and opts.effective_embargo_days < max(opts.windows):
        msg = (
            f"features.embargo_days {opts.effective_embargo_days} is shorter than the longest antecedent window "
            f"({max(opts.windows)} d): rows just after a fold boundary have windows reaching into the neighbouring "
            f"fold's period, so cross-validation leaks; leave embargo_days unset (= {max(opts.windows)}) or raise it"
        )
        warnings.warn(f"lake {lake.id}: {msg}", LakefeedWarning, stacklevel=2)
        result.warnings.append(msg)
    if not store.has_table("target_daily", lake.id):
        if opts.drivers:
            load_drivers(store, lake.id, zone=opts.driver_zone, aois=[], wanted=list(opts.drivers))
        result.skipped, result.reason = True, "no target_daily table for this lake; run the target (scenes) stage first"
        return result
    inputs = partition_hashes(store, lake.id)
    options_hash = features_config_hash(project, [])
    prev = store.entry("features", lake.id)
    if (
        not full
        and prev
        and prev.get("inputs") == inputs
        and prev.get("metadata", {}).get("options_hash") == options_hash
        and store.has_table("features", lake.id)
        and store.has_table("diagnostics", lake.id)
    ):  # same inputs, same configuration: the stored tables are the result (nothing to recompute)
        diag = store.read_table("diagnostics", lake.id)
        result.warnings = [f"AOI {d['aoi']}: {d['warnings']}" for _, d in diag.iterrows() if d["warnings"]]
        result.tables = {"features": prev["rows"], "diagnostics": len(diag)}
        progress("features: up to date", 3, 3)
        return result
    progress("features: reading", 0, 3)
    td = read_dated(store, "target_daily", lake.id, None)
    targets = td.loc[td["chla"].notna(), ["aoi", "date", "chla"]].copy()
    targets["aoi"] = targets["aoi"].astype(str)
    targets["date"] = as_dates(targets["date"])
    targets = targets.sort_values(["aoi", "date"]).reset_index(drop=True)
    if targets.empty:
        result.skipped, result.reason = True, "target_daily has no chlorophyll-a values for this lake"
        return result
    aois = sorted(targets["aoi"].unique())
    wanted = list(opts.drivers) if opts.drivers else None
    md = (prev or {}).get("metadata", {})
    refresh = refresh_plan(store, lake.id, prev, targets, full=full)
    mode, since = refresh.mode, refresh.day
    tail = mode is RefreshMode.TAIL
    tail_from = since - pd.Timedelta(days=max(opts.windows) + max(opts.leads) + 1) if tail else None
    frames, driver_units, read = load_drivers(
        store, lake.id, zone=opts.driver_zone, aois=aois, wanted=wanted, since=tail_from
    )
    if mode is RefreshMode.TAIL and any(f.empty for f in frames.values()):  # no days to extend: read all
        mode = RefreshMode.CHECK
        frames, driver_units, read = load_drivers(store, lake.id, zone=opts.driver_zone, aois=aois, wanted=wanted)
    present = {c for f in frames.values() for c in f.columns}
    columns = [c for c in wanted if c in present] if wanted else sorted(present)
    frames = {k: f.reindex(columns=columns) for k, f in frames.items()}
    if not columns:
        result.warnings.append("no driver tables (drivers_daily, hydrology_daily): features hold no window columns")
    cfg = features_config_hash(project, columns)
    if mode is not RefreshMode.FULL and prev.get("config_hash") != cfg:
        if mode is RefreshMode.TAIL:
            frames, driver_units, read = load_drivers(store, lake.id, zone=opts.driver_zone, aois=aois, wanted=wanted)
            frames = {k: f.reindex(columns=columns) for k, f in frames.items()}
        mode, since = RefreshMode.FULL, None
    known_through = refresh.known.get("drivers_through")
    if mode is RefreshMode.CHECK and drivers_digest(frames, known_through) != md.get("drivers_digest_at_through"):
        mode, since = RefreshMode.FULL, None
    stats = {c: list(s) for c, s in (opts.drivers or {}).items() if s}
    plan = WindowPlan.build(
        columns,
        windows=opts.windows,
        stats=stats,
        include_target_day=opts.include_target_day,
        max_missing_fraction=opts.max_missing_fraction,
    )
    all_days = [f.index for f in frames.values() if len(f)]
    record = (min(i.min() for i in all_days), max(i.max() for i in all_days)) if all_days else (None, None)
    if mode is RefreshMode.TAIL:
        record = (pd.Timestamp(md["drivers_first"]), record[1])
    if record[0] is not None and (
        too_long := opts.record_problems(record[0].date(), record[1].date(), record="the stored driver record")
    ):
        raise ConfigError(f"{project.lake_file}: features cannot be built for lake {lake.id}", too_long)
    through = (record[1] if record[1] is not None else pd.Timestamp("1900-01-01"), targets["date"].max())
    return FeatureJob(
        project=project,
        result=result,
        progress=progress,
        mode=mode,
        since=since,
        prev=prev,
        frames=frames,
        columns=columns,
        driver_units=driver_units,
        read=read,
        targets=targets,
        plan=plan,
        record=record,
        through=through,
        inputs=inputs,
        options_hash=options_hash,
        config_hash=cfg,
    )
