"""Incremental refresh of the target stage: which stored per-scene statistics a build from ``since`` reuses.

Takes the stored ``target_obs`` partition (its manifest entry and rows), the scene table of the current
catalogue (:func:`lakefeed.sources.scenes.list_scenes`), ``since`` and the current configuration and layer
hashes; returns the raw per-scene rows of the scenes before ``since`` (statistics and read-failure reasons,
the acceptance reasons taken off again), the content hashes known without hashing again (the recorded ones
of their rasters, the JSON files and layers just hashed), or why a full build is needed (:func:`refresh_plan`,
a :class:`~lakefeed.stages.refresh_plan.RefreshPlan`). Must not read a raster or screen observations.

Which scenes are reused: those whose time (UTC, as the item datetimes and the scene file names) lies
before ``since`` and that the catalogue lists as usable. Scenes from ``since`` on, and items the catalogue
rejects (no datetime, duplicate id: no raster is read for them), are listed afresh. The caller (the refresh
flow) names ``since`` from content hashes of the scene files by month; the stage checks what it can without
reading the old rasters: the set of scenes before ``since`` (against the stored rows), every item and
sub-catalogue JSON (hashed; a changed one dated before ``since`` or undated forces a full build), the
geometry layers, each reused scene's sensor, time and raster paths against the stored rows and the recorded
inputs. The old rasters' recorded hashes are carried over unread when their file names carry a month before
``since`` (the months the caller hashed); other rasters of reused scenes are hashed and checked.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from lakefeed.config.lake import LakeConfig, TargetOptions
from lakefeed.extract.screening import accept
from lakefeed.stages._provenance import input_hashes, layer_paths
from lakefeed.stages.refresh_plan import RefreshMode, RefreshPlan

__all__ = ["input_files", "raster_paths", "raw_reasons", "refresh_plan", "since_utc"]

_MONTH = re.compile(r"(?<!\d)(\d{4})-?(0[1-9]|1[0-2])(?:-?\d{2})?(?!\d)")  # as the refresh flow's months
_HREFS = ["value_href", "quality_href", "uncertainty_href"]


def since_utc(since: object) -> pd.Timestamp:
    """``since`` (a day or date string) as midnight UTC (tz-aware)."""
    stamp = pd.Timestamp(since)
    return stamp.tz_convert("UTC") if stamp.tzinfo else stamp.normalize().tz_localize("UTC")


def raster_paths(scenes: pd.DataFrame) -> pd.Series:
    """Absolute local raster paths of each scene (a list per row; remote hrefs left out)."""
    return scenes[_HREFS].apply(
        lambda r: [str(Path(h).absolute()) for h in r if isinstance(h, str) and h and "://" not in h], axis=1
    )


def raw_reasons(stored: pd.DataFrame, options: TargetOptions) -> pd.Series:
    """The read-failure reason of each stored ``target_obs`` row ("" when the row was read).

    A stored reason is the read-failure reason when there was one, else the acceptance reasons, which
    :func:`~lakefeed.extract.screening.accept` derives from the row's statistics alone: the reason is
    therefore a read failure exactly when it differs from what acceptance gives for the statistics with
    the same options (the configuration hash is checked first).
    """
    found = accept(
        stored.assign(reason=""),
        min_valid_fraction=options.min_valid_fraction,
        min_valid_pixels=options.min_valid_pixels,
        max_cv=options.max_cv,
    )["reason"]
    reason = stored["reason"].fillna("").astype(str)
    return reason.where(reason != found, "")


def _month_of(path: str) -> str | None:
    m = _MONTH.search(Path(path).name)
    return f"{m.group(1)}-{m.group(2)}" if m else None


def refresh_plan(
    entry: Mapping[str, Any] | None,
    stored: pd.DataFrame | None,
    scenes: pd.DataFrame,
    *,
    since: object,
    config_hash: str,
    columns: Sequence[str],
    aoi_ids: Sequence[str],
    layer_hashes: Mapping[str, str],
    json_hashes: Mapping[str, str],
    catalog: str | None,
    options: TargetOptions,
) -> RefreshPlan:
    """The stored raw rows of the scenes before ``since`` to reuse (``reuse``), or a full build and why.

    Parameters
    ----------
    entry, stored
        Manifest entry and rows of the stored ``target_obs`` partition (None: no table).
    scenes
        The current scene table (``attrs["source_files"]``: catalogue and item JSON files).
    since
        First day (UTC) of the earliest changed scene month.
    config_hash, columns
        The configuration hash and the ``target_obs`` columns a build would record.
    aoi_ids
        The AOIs of the current layer.
    layer_hashes, json_hashes
        Current content hashes ({absolute path: sha256}) of the geometry layers and of the catalogue's JSON files.
    catalog
        The root catalogue file (it lists the items: its change alone does not force a full build).
    options
        The lake's target options (to tell read-failure reasons from acceptance reasons).
    """
    if not entry or stored is None:
        return RefreshPlan.full("no stored target_obs")
    if entry.get("config_hash") != config_hash:
        return RefreshPlan.full("configuration changed")
    if list(entry.get("columns") or []) != [c for c in columns if c != "lake"]:
        return RefreshPlan.full("stored columns differ")
    old: Mapping[str, str] = entry.get("inputs") or {}
    if any(old.get(p) != h for p, h in layer_hashes.items()):
        return RefreshPlan.full("a geometry layer changed")
    if set(stored["aoi"]) != set(aoi_ids) and len(stored):
        return RefreshPlan.full("the stored AOIs differ from the layer's")
    start = since_utc(since)
    month = f"{start:%Y-%m}"
    root = Path(catalog).resolve() if catalog else None
    for path, digest in json_hashes.items():
        if Path(path).resolve() != root and old.get(path) != digest and ((m := _month_of(path)) is None or m < month):
            state = "new" if path not in old else "changed"
            return RefreshPlan.full(f"{state} catalogue file {Path(path).name} dated before {since} or undated")
    before_stored = set(stored.loc[stored["time"] < start, "scene_id"])
    before_now = set(scenes.loc[scenes["time"] < start, "scene_id"])
    if before_stored != before_now:
        added, gone = len(before_now - before_stored), len(before_stored - before_now)
        return RefreshPlan.full(f"scenes before {since} differ from the stored ones ({added} added, {gone} gone)")
    usable = scenes[(scenes["time"] < start) & (scenes["reason"].fillna("") == "")]
    if usable.empty:
        return RefreshPlan.full(f"no stored scene before {since}")
    rows = stored[stored["scene_id"].isin(set(usable["scene_id"]))]
    first = rows.drop_duplicates("scene_id").set_index("scene_id")[["sensor", "time"]]
    now = usable.set_index("scene_id")[["sensor", "time"]].loc[first.index]
    if not (first["sensor"].eq(now["sensor"]) & first["time"].eq(now["time"])).all():
        return RefreshPlan.full(f"the sensor or time of a scene before {since} changed")
    known = dict(json_hashes) | dict(layer_hashes)  # hashed just now: not again for the provenance
    for p in sorted({p for paths in raster_paths(usable) for p in paths}):
        if p in old and Path(p).is_file():
            if (m := _month_of(p)) is None or m >= month:  # not named by the caller's months: check it
                if input_hashes([p])[p] != old[p]:
                    return RefreshPlan.full(f"raster {Path(p).name} of a scene before {since} changed")
            known[p] = old[p]
        elif p in old or Path(p).is_file():  # recorded but gone, or not recorded (unreadable then) but there
            return RefreshPlan.full(f"raster {Path(p).name} of a scene before {since} appeared or is gone")
    reuse = rows.assign(reason=raw_reasons(rows, options)).drop(columns=["accepted", "outlier"])
    return RefreshPlan(RefreshMode.TAIL, start.date(), reuse=reuse, known=known)


def input_files(scenes: pd.DataFrame, lake: LakeConfig, *, known: Mapping[str, str] | None = None) -> dict[str, str]:
    """Content hashes of the catalogue and item JSONs, every local raster asset of the listed scenes
    and the AOI/lake layers (the rasters too: a re-processed GeoTIFF under the same item changes them).
    ``known``: hashes already recorded for unchanged files ({absolute path: sha256}), not hashed again."""
    known = dict(known or {})
    hrefs = scenes[["value_href", "quality_href", "uncertainty_href"]].to_numpy().ravel()
    rasters = [Path(h) for h in pd.unique(hrefs[pd.notna(hrefs)]) if "://" not in str(h) and Path(h).is_file()]
    files = [*scenes.attrs.get("source_files", []), *rasters, *layer_paths(lake.lake, lake.aois)]
    todo = [f for f in files if str(Path(f).absolute()) not in known]
    return dict(sorted((known | input_hashes(todo)).items()))
