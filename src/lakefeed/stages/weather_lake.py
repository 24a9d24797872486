"""The steps of the weather stage for one lake before and after the grid is read.

Takes a lake's :class:`~lakefeed.config.Project`, the :class:`~lakefeed.store.Store` and the opened weather
:class:`~lakefeed.sources.grids.Grid` (opened once for every lake naming the same files). Returns a
:class:`WeatherLake` (:func:`prepare_weather`: zones, cell weights, provenance, and for a monthly refresh
the first local day to recompute and the time window of the grid to read) and, once the hourly drivers are
computed (alone by :func:`lakefeed.stages.weather.build_weather` or with other lakes by
:func:`lakefeed.stages.weather_group.build_weather_many`), writes ``drivers_daily`` (:func:`finish_weather`).
The same two calls either way, so a lake computed in a group gets the table of its one-lake run.
Must not: hold science.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING, Any

from lakefeed.progress import Progress, no_progress
from lakefeed.stages._result import StageResult
from lakefeed.stages.refresh_plan import RefreshPlan

if TYPE_CHECKING:
    import geopandas as gpd
    import xarray as xr

    from lakefeed.config import Project
    from lakefeed.geometry.weights import ZoneWeights
    from lakefeed.sources.grids import Grid
    from lakefeed.store import Store

__all__ = ["WeatherLake", "finish_weather", "prepare_weather"]


@dataclass
class WeatherLake:
    """One lake's weather build up to the grid read (see :func:`prepare_weather`).

    ``grid``: every file; ``window``: the part of it to read (all of it for a full build); ``start``: first
    local day recomputed (None: full build); ``how``: ``StageResult.reason``; ``warnings`` so far.
    """

    project: Project
    grid: Grid
    window: Grid
    zones: gpd.GeoDataFrame
    weights: ZoneWeights
    inputs: dict[str, str]
    config_hash: str
    start: date | None
    how: str
    warnings: list[str] = field(default_factory=list)


def prepare_weather(
    project: Project,
    store: Store,
    grid: Grid,
    *,
    since: str | date | None = None,
    progress: Progress | None = None,
    warnings: list[str] | None = None,
) -> WeatherLake:
    """Zones, exact cell weights (cached in the store), provenance and the window of ``grid`` one lake needs.

    ``grid``: the lake's weather files opened (``on_error="raise"``); ``since``: as for
    :func:`lakefeed.stages.weather.build_weather`; ``warnings``: the grid's warnings so far (time gaps).
    """
    from lakefeed.extract.daily import DAILY_COLUMNS
    from lakefeed.stages._map import record_cells
    from lakefeed.stages._provenance import config_hash, input_hashes, layer_paths
    from lakefeed.stages._weather_refresh import read_window, refresh_plan
    from lakefeed.stages.weights_cache import get_weights, lake_zones

    p = progress or no_progress
    lake = project.lake
    src = project.sources.weather
    assert src is not None  # the caller skips a lake without a weather source
    p("weather: zones", 0, 3)
    zones, layers = lake_zones(lake, grid.crs)
    p("weather: weights", 1, 3)
    weights, _ = get_weights(
        zones,
        grid,
        cache_dir=Path(store.root) / "_cache" / "weights",
        allow_partial_coverage=lake.zones.allow_partial_coverage,
    )
    record_cells(store, lake.id, weights, grid.lat, grid.lon)
    p("weather: weights", 2, 3)
    inputs = input_hashes([*grid.files, *layer_paths(*layers)])
    cfg = config_hash(project)
    plan = RefreshPlan.full()
    if since is not None:
        plan = refresh_plan(
            store.entry("drivers_daily", lake.id),
            since=since,
            grid=grid,
            inputs=inputs,
            config_hash=cfg,
            columns=list(DAILY_COLUMNS),
            signature=weights.signature,
            tz=lake.timezone,
            source_tz=src.time_zone,
        )
    start, how = plan.day, plan.summary()
    window = read_window(grid, start, lake.timezone) if start is not None else grid
    return WeatherLake(project, grid, window, zones, weights, inputs, cfg, start, how, list(warnings or []))


def finish_weather(
    job: WeatherLake,
    hourly: xr.Dataset,
    clipped: dict[str, int],
    store: Store,
    *,
    allow_shrink: bool = False,
    progress: Progress | None = None,
) -> StageResult:
    """Aggregate one lake's hourly drivers to its local days and write ``drivers_daily`` (guarded against shrinking).

    ``hourly``/``clipped``: :func:`lakefeed.stages.weather.hourly_drivers` of ``job.window`` and ``job.weights``.
    """
    from lakefeed.extract.daily import DAILY_UNITS, to_daily
    from lakefeed.geometry.zones import zone_latitudes
    from lakefeed.stages._guard import refuse_shrink
    from lakefeed.stages._weather_refresh import KEYS, tail_day, write_drivers

    p = progress or no_progress
    lake, weights, start = job.project.lake, job.weights, job.start
    warn = job.warnings + [f"{k}: {n} value(s) of packing noise clipped to zero" for k, n in clipped.items() if n]
    flags = {z: weights.flags(z) for z in weights.zones}
    # the lake surface's elevation for every zone (FAO-56 Eq. 37); a catchment zone may lie higher
    elevation = 0.0 if lake.elevation_m is None else float(lake.elevation_m)
    daily = to_daily(
        hourly, tz=lake.timezone, latitude=zone_latitudes(job.zones), elevation_m=elevation, zone_flags=flags
    )
    daily["date"] = daily["date"].dt.date
    if start is not None:
        daily = daily[daily["date"] >= start].reset_index(drop=True)
    guard: dict[str, Any] = {"groups": ["zone"], "complete": True, "allow_shrink": allow_shrink, "why": job.how}
    warn += refuse_shrink(store, "drivers_daily", lake.id, daily, keys=KEYS, time_column="date", since=start, **guard)
    write_drivers(
        store,
        lake.id,
        daily,
        start=start,
        tail=tail_day(job.grid, lake.timezone),
        units=DAILY_UNITS,
        metadata={"grid_signature": weights.signature, "files": str(len(job.grid.files))},
        inputs=job.inputs,
        config_hash=job.config_hash,
    )
    p("weather: done", 3, 3)
    return StageResult("weather", lake.id, tables={"drivers_daily": len(daily)}, warnings=warn, reason=job.how)
