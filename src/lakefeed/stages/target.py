"""Stage `target`: chlorophyll-a observations and the fused daily target of one lake.

Reads the scene catalogue and the AOI/lake polygons (:mod:`lakefeed.sources`), extracts windowed AOI
statistics, screens them, harmonises the sensors, screens each AOI's harmonised series of all sensors
once more (a sparse sensor's spike gets the frequent sensor's values as neighbours) and fuses same-day
values (:mod:`lakefeed.extract`), and writes the store tables ``target_obs``, ``target_daily`` and
``sensor_bias``. Must not hold science of its own beyond wiring.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from datetime import date
from typing import Any

import numpy as np
import pandas as pd

from lakefeed.config import Project
from lakefeed.config.lake import SensorConfig, TargetOptions, Threshold
from lakefeed.extract.harmonise import BIAS_COLUMNS, apply_bias, fit_bias, fuse_daily, matchups
from lakefeed.extract.scene_stats import STAT_COLUMNS, aoi_statistics
from lakefeed.extract.screening import accept
from lakefeed.extract.screening_reference import cross_sensor_screen, total_screening
from lakefeed.extract.trophic import CAUTION, UNSCREENED, class_columns, exceedance_flags
from lakefeed.progress import Progress, no_progress
from lakefeed.sources.scenes import SceneReader, list_scenes, read_scenes
from lakefeed.sources.vectors import read_layer
from lakefeed.stages import _target_refresh
from lakefeed.stages._guard import refuse_shrink
from lakefeed.stages._provenance import config_hash, input_hashes, layer_paths
from lakefeed.stages._result import StageResult
from lakefeed.stages.refresh_plan import RefreshPlan
from lakefeed.store import Store

__all__ = [
    "OBS_COLUMNS",
    "OBS_UNITS",
    "RAW_COLUMNS",
    "build_target",
    "cross_sensor_outliers",
    "daily_target",
    "extract_observations",
    "scene_statistics",
    "screen_observations",
    "screen_total",
]

RAW_COLUMNS = ["lake", "aoi", "scene_id", "sensor", "time", "date", *STAT_COLUMNS, "reason"]
OBS_COLUMNS = [*RAW_COLUMNS[:-1], "accepted", "reason", "outlier", "screened", "screening"]
OBS_UNITS = {
    "median": "mg m-3",
    "mean": "mg m-3",
    "p10": "mg m-3",
    "p90": "mg m-3",
    "std": "mg m-3",
    "cv": "1",
    "n_valid": "1",
    "valid_fraction": "1",
    "uncertainty": "1",
}
DAILY_UNITS = {"chla": "mg m-3", "chla_uncertainty": "mg m-3", "n_obs": "1", "tsi": "1"}
KEYS = ["aoi", "date"]  # one row of target_daily
_DESCRIPTIONS = {
    "uncertainty": "mean relative 1-sigma uncertainty of the valid pixels (fraction), NaN without a band",
    "valid_fraction": "valid pixels / pixels whose centre lies in the shore-buffered AOI",
    "outlier": "flagged by the outlier screening (leave-one-out robust trend of the AOI's own-sensor series, "
    "of all harmonised sensors, or the seasonal climatology of earlier years); kept here, left out of target_daily",
    "screened": "false: no screening rule could examine the value (too few neighbours and no climatology); kept, "
    "see 'screening'",
    "screening": "how the value was screened (rule and window), or why it could not be",
    "oecd_class": "OECD (1982) trophic category from chla with the fixed boundaries 1, 2.5, 8, 25 mg m-3 (each "
    "boundary in the lower class; meant for the annual mean, here of the daily value). " + CAUTION,
    "carlson_class": "Carlson (1977) trophic state class from tsi: < 40 oligotrophic, 40-50 mesotrophic, 50-70 "
    "eutrophic, >= 70 hypereutrophic (Carlson & Simpson 1996 bands; a boundary in the upper class). " + CAUTION,
    "trophic_class": "DEPRECATED alias of oecd_class (OECD 1982 categories, not Carlson's); removed in the next "
    "release. " + CAUTION,
    "flags": f"';'-joined: {UNSCREENED} (a fused value was not screened for outliers: read thresholds with care)",
    "tsi": "Carlson (1977) trophic state index of chla, 9.81 ln(chla) + 30.6. " + CAUTION,
    "chla_uncertainty": "1-sigma uncertainty of the inverse-variance weighted mean",
}


def scene_statistics(
    scenes: pd.DataFrame,
    reader: SceneReader,
    *,
    lake: str,
    timezone: str = "UTC",
    sensors: Mapping[str, SensorConfig] | None = None,
    options: TargetOptions | None = None,
    shore_buffer_m: float | None = None,
    bad_quality_bits: Sequence[int] | None = None,
    progress: Progress | None = None,
) -> pd.DataFrame:
    """Raw rows (``RAW_COLUMNS``): one per AOI and scene with the statistics, before any screening.

    ``reason`` holds only read failures (unreadable scene, item rejected by the catalogue, AOI not read);
    acceptance is :func:`screen_observations`. ``shore_buffer_m`` overrides every sensor's buffer (metres);
    sensors without a config use one pixel of the scene. ``bad_quality_bits`` overrides every sensor's bad
    quality bits (and values); sensors without a config and no override count any non-zero flag as bad.
    """
    sensors = dict(sensors or {})
    options = options or TargetOptions()
    buffers = {s: c.effective_shore_buffer_m for s, c in sensors.items()}
    if shore_buffer_m is not None:
        buffers = dict.fromkeys(set(scenes["sensor"]) | set(buffers), float(shore_buffer_m))
    aoi_ids = list(reader.aois.index)
    empty = dict.fromkeys(STAT_COLUMNS, np.nan) | {"n_valid": 0, "valid_fraction": 0.0}
    rows = []
    for scene, win, reason in read_scenes(scenes, reader, shore_buffer_m=buffers, progress=progress):
        base = {"scene_id": scene["scene_id"], "sensor": scene["sensor"], "time": scene["time"]}
        if win is None:
            rows.extend(base | empty | {"aoi": a, "reason": reason} for a in aoi_ids)
            continue
        cfg = sensors.get(scene["sensor"])
        rules = dict(
            nodata=win.nodata,
            bad_bits=tuple(bad_quality_bits) if bad_quality_bits is not None else (cfg.bad_quality_bits if cfg else ()),
            bad_values=() if bad_quality_bits is not None else (cfg.bad_quality_values if cfg else ()),
            valid_range=tuple(options.valid_range),
        )
        for aoi in aoi_ids:
            if aoi in win.pixels:
                px = win.pixels[aoi]
                stats = aoi_statistics(px.values, px.quality, px.uncertainty, n_outside=px.n_outside, **rules)
                rows.append(base | stats | {"aoi": aoi, "reason": ""})
            else:
                rows.append(base | empty | {"aoi": aoi, "reason": win.skipped.get(aoi, "AOI not read")})
    obs = pd.DataFrame(rows, columns=[c for c in RAW_COLUMNS if c not in ("lake", "date")])
    return _normalised(obs.assign(lake=lake), timezone)


def _normalised(raw: pd.DataFrame, timezone: str) -> pd.DataFrame:
    """Raw rows with the canonical dtypes, local ``date`` from ``time``, sorted by AOI, time and scene."""
    raw = raw.copy()
    raw["time"] = pd.to_datetime(raw["time"], utc=True).astype("datetime64[ns, UTC]")
    raw["date"] = raw["time"].dt.tz_convert(timezone).dt.date
    raw["n_valid"] = raw["n_valid"].fillna(0).astype("int64")
    for c in STAT_COLUMNS:
        if c != "n_valid":
            raw[c] = raw[c].astype("float64")
    raw["reason"] = raw["reason"].fillna("").astype(str)
    raw = raw[RAW_COLUMNS].sort_values(["aoi", "time", "scene_id"], kind="stable")
    return raw.reset_index(drop=True)


def screen_observations(raw: pd.DataFrame, *, options: TargetOptions | None = None) -> pd.DataFrame:
    """Acceptance and per-sensor outlier flags of raw rows (:func:`scene_statistics`): ``OBS_COLUMNS``.

    Works on the whole record at once (the outlier window looks at neighbours in time); the rows come
    back sorted by AOI, time and scene id.
    """
    options = options or TargetOptions()
    if raw.empty:
        return pd.DataFrame(columns=OBS_COLUMNS)
    obs = accept(
        raw.sort_values(["aoi", "time", "scene_id"], kind="stable").reset_index(drop=True),
        min_valid_fraction=options.min_valid_fraction,
        min_valid_pixels=options.min_valid_pixels,
        max_cv=options.max_cv,
    )
    obs[["outlier", "screened", "screening"]] = screen_total(obs, pd.DataFrame(), options=options)
    return obs[OBS_COLUMNS]


def screen_total(obs: pd.DataFrame, fits: pd.DataFrame, *, options: TargetOptions | None = None) -> pd.DataFrame:
    """``outlier``, ``screened`` and ``screening`` of accepted observations with the lake's target options:
    :func:`lakefeed.extract.screening_reference.total_screening` (``fits`` empty: no harmonisation yet)."""
    return total_screening(obs, fits, **_filter(options))


def _filter(options: TargetOptions | None) -> dict[str, float]:
    """The outlier filter's window, widest window (days) and threshold from the lake's target options."""
    o = options or TargetOptions()
    return {
        "window_days": o.outlier_window_days,
        "max_window_days": o.outlier_max_window_days,
        "threshold": o.outlier_threshold,
    }


def extract_observations(
    scenes: pd.DataFrame, reader: SceneReader, *, options: TargetOptions | None = None, **kwargs: Any
) -> pd.DataFrame:
    """One row per AOI and scene with statistics, acceptance and outlier flags (``OBS_COLUMNS``):
    :func:`screen_observations` of :func:`scene_statistics` (``lake``, ``timezone``, ``sensors``,
    ``shore_buffer_m``, ``bad_quality_bits``, ``progress`` as there). Unreadable scenes and skipped
    AOIs are rows with ``reason`` set."""
    return screen_observations(scene_statistics(scenes, reader, options=options, **kwargs), options=options)


def daily_target(
    obs: pd.DataFrame,
    *,
    sensors: Mapping[str, SensorConfig] | None = None,
    reference: str | None = None,
    options: TargetOptions | None = None,
    thresholds: list[Threshold] | Mapping[str, float] = (),  # type: ignore[assignment]
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Harmonise and fuse accepted, non-outlier observations: ``(target_daily, sensor_bias)``.

    Without a reference sensor the values are fused unadjusted (``sensor_bias`` is then empty).
    The relative uncertainty of an observation is its band's mean, else the sensor's configured
    ``uncertainty`` (default 0.3).
    """
    sensors = dict(sensors or {})
    options = options or TargetOptions()
    use = obs[obs["accepted"].astype(bool) & ~obs["outlier"].astype(bool) & (obs["median"] > 0)].copy()
    default_rel = (
        use["sensor"]
        .map({s: c.uncertainty for s, c in sensors.items()})
        .fillna(SensorConfig.model_fields["uncertainty"].default)
    )
    use["relative_sigma"] = use["uncertainty"].where(use["uncertainty"] > 0, default_rel)
    if reference is not None:
        pairs = matchups(use, reference=reference, window_days=options.matchup_window_days)
        fits = fit_bias(
            pairs,
            reference=reference,
            sensors=sorted(set(use["sensor"])),
            model=options.bias_model,
            min_matchups=options.min_matchups,
        )
        if reference not in set(use["sensor"]):
            absent = fits["sensor"] != reference
            fits.loc[absent, "note"] = f"too few matchups: reference sensor {reference} has no usable observation"
            fits.loc[~absent, "note"] = "reference; no usable observation"
    else:
        fits = pd.DataFrame(columns=BIAS_COLUMNS)
    if len(fits):
        use[["value", "sigma"]] = apply_bias(use, fits)
    else:
        use["value"] = use["median"]
        use["sigma"] = use["median"] * use["relative_sigma"]
    daily = fuse_daily(use, by=("lake", "aoi", "date"))
    daily["n_obs"] = daily["n_obs"].astype("int64")
    daily = pd.concat([daily, class_columns(daily["chla"])], axis=1)
    screened = use.get("screened", pd.Series(True, index=use.index)).astype(bool)
    keys = ["lake", "aoi", "date"]
    all_screened = screened.groupby([use[k] for k in keys]).all().rename("screened").reset_index()
    daily = daily.merge(all_screened, on=keys, how="left", validate="one_to_one")
    daily["screened"] = daily["screened"].fillna(True).astype(bool)
    daily["flags"] = np.where(daily["screened"], "", UNSCREENED).astype(object)
    daily = pd.concat([daily, exceedance_flags(daily["chla"], thresholds)], axis=1)
    return daily, fits


def cross_sensor_outliers(obs: pd.DataFrame, fits: pd.DataFrame, *, options: TargetOptions | None = None) -> pd.Series:
    """Outlier flags (bool Series aligned with ``obs``) from screening each AOI's series of ALL harmonised
    sensors: :func:`lakefeed.extract.screening_reference.cross_sensor_screen` with the lake's options."""
    return cross_sensor_screen(obs, fits, **_filter(options))["outlier"]


def _plan(project: Project, store: Store, scenes: pd.DataFrame, aoi_ids: list[str], since: object) -> RefreshPlan:
    """What a build from ``since`` can reuse of the stored ``target_obs`` (see :mod:`._target_refresh`)."""
    lake = project.lake
    entry = store.entry("target_obs", lake.id) if store.has_table("target_obs", lake.id) else None
    stored = store.read_table("target_obs", lake.id) if entry else None
    return _target_refresh.refresh_plan(
        entry,
        stored,
        scenes,
        since=since,
        config_hash=config_hash(project),
        columns=OBS_COLUMNS,
        aoi_ids=aoi_ids,
        layer_hashes=input_hashes(layer_paths(lake.lake, lake.aois)),
        json_hashes=input_hashes(scenes.attrs.get("source_files", [])),
        catalog=project.sources.scenes.catalog if project.sources.scenes else None,
        options=lake.target,
    )


def build_target(
    project: Project,
    store: Store,
    *,
    progress: Progress | None = None,
    since: str | date | None = None,
    allow_shrink: bool = False,
) -> StageResult:
    """Build ``target_obs``, ``target_daily`` and ``sensor_bias`` for one lake.

    Parameters
    ----------
    since
        First day (UTC) of the earliest new or changed scene month (``YYYY-MM-DD``); None: a full build.
        With it, the stored per-scene statistics of the scenes before that day are reused and only the
        scenes from that day on are read; acceptance, outlier screening, harmonisation and fusion are
        redone on the whole record, so the tables equal a full build's. The stage falls back to a full
        build when it cannot reuse the stored rows (no table, configuration, layers, columns or the
        scenes before ``since`` differ: see :mod:`lakefeed.stages._target_refresh`).
        ``StageResult.reason`` says which (e.g. ``"incremental from 2022-12-01"``).
    allow_shrink
        Write even when a scene's statistics that were valid would become missing or an AOI's daily record
        would shorten (scenes removed or settings narrowed on purpose); otherwise that is a
        :class:`~lakefeed.exceptions.ShrinkError` and no table is written (:mod:`lakefeed.stages._guard`).
        An unreadable scene is not an error: it is kept in ``target_obs`` as rejected with the reason naming
        its file, and counted in the warnings (a scene archive is a set of independent observations);
        a scene whose stored statistics were valid and that can no longer be read is refused as above.

    Examples
    --------
    >>> from lakefeed.config import load_project
    >>> build_target(load_project("config/lake-tallow.yaml"), Store("store"))  # doctest: +SKIP
    """
    lake = project.lake
    result = StageResult(stage="target", lake=lake.id)
    source = project.sources.scenes
    if source is None:
        result.skipped, result.reason = True, "no 'scenes' section in the sources configuration"
        return result
    progress = progress or no_progress
    aois = read_layer(lake.aois, what="areas of interest", id_field=lake.aois.id_field)
    lake_poly = read_layer(lake.lake, what="lake polygon")
    reader = SceneReader(aois, id_field=lake.aois.id_field, lake=lake_poly)
    scenes = list_scenes(source)
    plan = RefreshPlan.full()
    if since is not None:
        plan = _plan(project, store, scenes, list(reader.aois.index), since)
    result.reason = plan.summary()
    read = scenes if plan.reuse is None else scenes[~scenes["scene_id"].isin(set(plan.reuse["scene_id"]))]
    raw = scene_statistics(
        read, reader, lake=lake.id, timezone=lake.timezone, sensors=lake.sensors, options=lake.target, progress=progress
    )
    if plan.reuse is not None and len(plan.reuse):
        raw = _normalised(
            pd.concat([plan.reuse.assign(lake=lake.id), raw] if len(raw) else [plan.reuse]), lake.timezone
        )
    obs = screen_observations(raw, options=lake.target)
    reference = lake.reference_sensor
    seen = set(obs.loc[obs["sensor"].fillna("") != "", "sensor"])
    unknown = sorted(seen - set(lake.sensors))
    if unknown and lake.sensors:
        result.warnings.append(
            f"sensor(s) {unknown} not in the lake's 'sensors' config: any non-zero quality flag counts as bad, "
            f"the shore buffer is one pixel and the uncertainty {SensorConfig.model_fields['uncertainty'].default}; "
            f"configured: {sorted(lake.sensors)}"
        )
    if reference is None and len(seen) > 1:
        result.warnings.append("no reference sensor configured: sensors are fused without harmonisation")
    accepted = obs["accepted"].astype(bool)
    if reference is not None and not (accepted & (obs["sensor"] == reference)).any():
        result.warnings.append(
            f"reference sensor {reference!r} has no accepted observation: other sensors are left unadjusted"
        )
    if not accepted.any():
        result.warnings.append("no accepted observation: target_daily is empty (see 'reason' in target_obs)")
    daily, fits = daily_target(
        obs, sensors=lake.sensors, reference=reference, options=lake.target, thresholds=lake.thresholds
    )
    total = screen_total(obs, fits, options=lake.target)  # harmonised sensors and climatology as references
    if not total.equals(obs[["outlier", "screened", "screening"]]):  # fuse again (the bias fit is screened itself)
        obs[["outlier", "screened", "screening"]] = total
        daily, fits = daily_target(
            obs, sensors=lake.sensors, reference=reference, options=lake.target, thresholds=lake.thresholds
        )
    unscreened = obs[obs["accepted"].astype(bool) & ~obs["screened"].astype(bool) & ~obs["outlier"].astype(bool)]
    if len(unscreened):
        result.warnings.append(
            f"{len(unscreened)} accepted value(s) could not be screened for outliers (kept, screened = false; "
            f"their days carry the '{UNSCREENED}' flag in target_daily), e.g. {unscreened['scene_id'].iloc[0]} "
            f"{unscreened['aoi'].iloc[0]}: {unscreened['screening'].iloc[0]}"
        )
    for _, f in fits[fits["note"].str.startswith("too few") | fits["note"].str.startswith("fitted")].iterrows():
        result.warnings.append(f"sensor {f['sensor']}: {f['note']}")
    bad = obs.loc[obs["reason"] != "", ["scene_id", "reason"]].drop_duplicates("scene_id")
    unreadable = bad[bad["reason"].str.startswith("scene ") | bad["reason"].str.startswith("STAC")]
    if len(unreadable):
        result.warnings.append(
            f"{len(unreadable)} scene(s) rejected as unreadable, e.g. {unreadable['reason'].iloc[0]}"
        )
    dups = bad[bad["reason"].str.startswith("duplicate scene id")]
    if len(dups):
        result.warnings.append(f"{len(dups)} item(s) with a duplicate scene id ignored, e.g. {dups['reason'].iloc[0]}")
    meta = {"caution": CAUTION}
    descriptions = _DESCRIPTIONS | {
        c: f"chla >= threshold '{c.removeprefix('exceeds_')}'. {CAUTION}" for c in daily if c.startswith("exceeds_")
    }
    fit_meta = {"sensor_bias": fits.to_json(orient="records")}
    prov = {"inputs": _target_refresh.input_files(scenes, lake, known=plan.known), "config_hash": config_hash(project)}
    guard = {"allow_shrink": allow_shrink, "time_column": "date", "why": result.reason}
    result.warnings += refuse_shrink(store, "target_obs", lake.id, obs, keys=["aoi", "scene_id"], **guard)
    result.warnings += refuse_shrink(store, "target_daily", lake.id, daily, keys=KEYS, groups=["aoi"], **guard)
    store.write_table("target_obs", lake.id, obs, units=OBS_UNITS, descriptions=_DESCRIPTIONS, metadata=meta, **prov)
    store.write_table(
        "target_daily", lake.id, daily, units=DAILY_UNITS, descriptions=descriptions, metadata=meta | fit_meta, **prov
    )
    bias_units = {"ratio": "1", "ln_ratio": "1", "ln_ratio_se": "1", "slope": "1", "intercept": "mg m-3", "r2": "1"}
    store.write_table("sensor_bias", lake.id, fits.assign(lake=lake.id), units=bias_units, **prov)
    result.tables = {"target_obs": len(obs), "target_daily": len(daily), "sensor_bias": len(fits)}
    return result
