"""Stage ``weather`` for many lakes at once: each weather grid read once for every lake that names it.

Takes lake :class:`~lakefeed.config.Project` objects and a :class:`~lakefeed.store.Store`; returns each
lake's :class:`~lakefeed.stages._result.StageResult` or the exception that stopped it. Lakes whose configs
name the same weather files (and time zone of the files) share one opened grid; those that also need the
same time window of it (every lake of a full build; in a refresh, the lakes whose first recomputed local day
starts the read at the same hour) and the same variable configuration are computed together: the zones of
every lake form one sparse weight matrix over the union of the cells they touch
(:func:`lakefeed.extract.zonal_many.zonal_mean_many`), each time chunk is read and decoded once, and each lake
is then aggregated to its own local days, checked and written by the same calls as a one-lake run
(:mod:`lakefeed.stages.weather_lake`), so its table equals the one-lake table exactly.

Isolation: a lake whose layers, zones or weights fail (bad geometry, a zone off the grid), whose cells break
a value rule, or whose write is refused fails alone; the other lakes are computed and written. A grid that
cannot be opened or read fails the lakes that name it, as it would fail each of them alone.
Memory: the hourly zonal drivers of at most ``lakes_per_pass`` lakes are held at once (a larger group is
computed in several passes over the grid); the grid itself is held one time chunk of the union window at
a time. Must not: hold science.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from datetime import date
from typing import TYPE_CHECKING, Any

from lakefeed.exceptions import ConfigError
from lakefeed.extract.zonal_many import union_weights, zonal_mean_many
from lakefeed.progress import Progress, no_progress
from lakefeed.stages._result import StageResult
from lakefeed.stages.weather import compute_zonal, driver_fields, lake_drivers

if TYPE_CHECKING:
    import xarray as xr

    from lakefeed.config import Project
    from lakefeed.config.sources import WeatherSource
    from lakefeed.geometry.weights import ZoneWeights
    from lakefeed.sources.grids import Grid
    from lakefeed.stages.weather_lake import WeatherLake
    from lakefeed.store import Store

__all__ = ["build_weather_many", "grid_key", "hourly_drivers_many"]

Since = str | date | None


def grid_key(source: WeatherSource) -> tuple[str, ...]:
    """Key of the grid a weather source names: its files (absolute, sorted) and the time zone of their stamps."""
    from lakefeed.sources.locations import expand_paths

    return (source.time_zone, *sorted(str(p.absolute()) for p in expand_paths(source.paths)))


def hourly_drivers_many(
    grid: Grid,
    weights: Sequence[ZoneWeights],
    *,
    source: WeatherSource | None = None,
    progress: Progress | None = None,
    section: str = "weather",
    value_rules: bool = True,
) -> tuple[list[xr.Dataset | Exception], dict[str, int]]:
    """:func:`lakefeed.stages.weather.hourly_drivers` of several lakes' weights, reading the grid once.

    Returns (per lake its hourly drivers, or the exception of its value rules; clipped counts of the grid's
    amounts). Each lake's drivers equal its one-lake :func:`~lakefeed.stages.weather.hourly_drivers` exactly.
    An error of the grid itself (units, a contradicted accumulation kind, an unreadable chunk) is raised.
    """
    fields = driver_fields(grid, source=source, section=section)
    union = union_weights(weights)
    zonal = {k: zonal_mean_many(v, union, extremes=True) for k, v in fields.fields.items()}
    zonal, checks = compute_zonal((zonal, fields.checks()), progress=progress)
    clipped = fields.clipped(checks)
    out: list[xr.Dataset | Exception] = []
    for i, w in enumerate(weights):
        try:
            mine = {k: z[i] for k, z in zonal.items()}
            out.append(lake_drivers(grid, w, fields, mine, section=section, value_rules=value_rules))
        except Exception as err:  # this lake's cells: reported for it alone
            out.append(err)
    return out, clipped


def build_weather_many(
    projects: Sequence[Project],
    store: Store,
    *,
    progress: Progress | None = None,
    since: Since | Mapping[str, Since] = None,
    isolate: bool = True,
    lakes_per_pass: int = 64,
    allow_shrink: bool = False,
) -> dict[str, StageResult | Exception]:
    """Build ``drivers_daily`` for many lakes, each shared weather grid read once per pass.

    Parameters
    ----------
    projects
        Lake configurations (distinct lake ids), all written to ``store``.
    progress
        Called once per finished lake (``weather: lakes``, done, total); with one lake, its steps.
    since
        First day of the earliest changed weather month, for every lake or per lake id (absent or None: full
        build), as for :func:`lakefeed.stages.weather.build_weather`.
    isolate
        True: a lake that fails gets its exception as its result, the other lakes go on. False: the first
        failure is raised (lakes written before it keep their tables).
    lakes_per_pass
        Lakes computed together at most (bounds the hourly series held in memory).
    allow_shrink
        As for :func:`lakefeed.stages.weather.build_weather`.

    Returns
    -------
    dict
        Lake id -> its :class:`StageResult` (the same as its one-lake run), or the exception that stopped it,
        in the order of ``projects``.
    """
    from lakefeed.sources.grid_rules import time_gaps
    from lakefeed.sources.grids import open_grid
    from lakefeed.stages.weather_lake import prepare_weather

    ids = [p.id for p in projects]
    dup = sorted({i for i in ids if ids.count(i) > 1})
    if dup:
        raise ConfigError(f"lake id(s) {dup} given more than once; give each lake's configuration once")
    if lakes_per_pass < 1:
        raise ConfigError(f"lakes_per_pass must be at least 1, got {lakes_per_pass}")
    report = progress or no_progress
    one = progress if len(projects) == 1 else None
    out: dict[str, StageResult | Exception] = {}

    def settle(lake: str, outcome: StageResult | Exception) -> None:
        if isinstance(outcome, Exception) and not isolate:
            raise outcome
        out[lake] = outcome
        if len(projects) > 1:
            report("weather: lakes", len(out), len(projects))

    by_grid: dict[tuple[str, ...], list[Project]] = {}
    for p in projects:
        src = p.sources.weather
        if src is None:
            settle(p.id, StageResult("weather", p.id, skipped=True, reason="no weather source in sources.yaml"))
            continue
        try:
            by_grid.setdefault(grid_key(src), []).append(p)
        except Exception as err:
            settle(p.id, err)
    for members in by_grid.values():
        src = members[0].sources.weather
        try:  # an unreadable file fails every lake naming it, as it fails each alone
            grid = open_grid(src.paths, time_zone=src.time_zone, on_error="raise", format=src.format)
            warn = time_gaps(grid.dataset["time"].values, grid.parts)
        except Exception as err:
            for p in members:
                settle(p.id, err)
            continue
        passes: dict[tuple[str, ...], list[WeatherLake]] = {}
        for p in members:
            day = since.get(p.id) if isinstance(since, Mapping) else since
            try:
                job = prepare_weather(p, store, grid, since=day, progress=one, warnings=warn)
            except Exception as err:  # this lake's layers, zones or weights
                settle(p.id, err)
                continue
            t = job.window.dataset["time"].values
            key = (p.sources.weather.model_dump_json(), str(t[0]) if t.size else "", str(t.size))
            passes.setdefault(key, []).append(job)
        for jobs in passes.values():
            for k in range(0, len(jobs), lakes_per_pass):
                _run_pass(jobs[k : k + lakes_per_pass], store, settle, one, allow_shrink)
    return {lake: out[lake] for lake in ids if lake in out}


def _run_pass(jobs: list[WeatherLake], store: Store, settle: Any, progress: Progress | None, allow: bool) -> None:
    from lakefeed.stages.weather_lake import finish_weather

    try:
        hourly, clipped = hourly_drivers_many(
            jobs[0].window, [j.weights for j in jobs], source=jobs[0].project.sources.weather, progress=progress
        )
    except Exception as err:  # the grid itself (units, accumulation, a chunk that cannot be read)
        for j in jobs:
            settle(j.project.id, err)
        return
    for job, h in zip(jobs, hourly, strict=True):
        if isinstance(h, Exception):
            settle(job.project.id, h)
            continue
        try:
            settle(job.project.id, finish_weather(job, h, clipped, store, allow_shrink=allow, progress=progress))
        except Exception as err:
            settle(job.project.id, err)
