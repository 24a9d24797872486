"""Stage ``weather``: daily weather drivers per zone from gridded reanalysis -> ``drivers_daily``.

Takes a :class:`~lakefeed.config.Project` and a :class:`~lakefeed.store.Store`. Reads the
weather grid (:mod:`lakefeed.sources.grids`) and the lake's layers, builds the zones, gets
exact cell weights (cached under ``<store>/_cache/weights/``, keyed by grid signature and
zone geometry hashes, so later runs and other files on the same grid reuse them), reads the
grid once for every zone and variable at once, de-accumulates and converts units, and
aggregates to the lake's local days. Writes ``drivers_daily`` (columns and units: docs/architecture.md, "Store tables").

Monthly refresh (``since``, from the flow: the first day of the earliest changed weather month):
only the grid hours from the day before that month's first local day are read and only the local
days from there on are recomputed and appended; older part files are left as they are (see
:mod:`lakefeed.stages._weather_refresh` for when it falls back to a full build, and why).

The helpers :func:`get_weights`, :func:`hourly_drivers`, :func:`zonal_long` and
:func:`compute_by_time` (time chunks read in forked worker processes where that is safe; defined in
:mod:`lakefeed.stages._pool`) are shared with the ``lakefeed zonal`` command and the benchmark.
Must not: hold science.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import date
from typing import TYPE_CHECKING, Any

import dask
import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.exceptions import SourceError
from lakefeed.extract.accumulation import Deaccumulated, deaccumulate, step_of
from lakefeed.extract.meteo import wind_speed
from lakefeed.extract.step_units import to_mm_per_step, to_watts
from lakefeed.extract.zonal import zonal_mean
from lakefeed.geometry.weights import ZoneWeights
from lakefeed.progress import Progress
from lakefeed.sources.grid_rules import time_gaps
from lakefeed.sources.grids import Grid, decode, open_grid, select_roles
from lakefeed.stages._pool import (
    compute_by_time,
    local_compute,
    local_scheduler,
    use_processes,
)
from lakefeed.stages._result import StageResult
from lakefeed.stages._values import check_values
from lakefeed.stages.weights_cache import get_weights

if TYPE_CHECKING:  # heavy imports (geopandas, pint, pydantic, pyarrow) are deferred to keep start-up short
    from lakefeed.config import Project
    from lakefeed.config.sources import Accumulation, WeatherSource
    from lakefeed.store import Store

__all__ = ["build_weather", "compute_by_time", "get_weights", "hourly_drivers", "use_processes", "zonal_long"]

ROLES = (
    "air_temperature",
    "dewpoint_temperature",
    "eastward_wind",
    "northward_wind",
    "shortwave_radiation",
    "precipitation",
)
_AMOUNT_NAMES = {
    "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air",
    "lwe_thickness_of_precipitation_amount",
    "precipitation_amount",
}
#: Density of liquid water for precipitation mass -> depth, kg m-3 (common practice).


@dataclass(frozen=True)
class DriverFields:
    """The lazy per-cell fields of :func:`hourly_drivers` before zonal averaging (from :func:`driver_fields`).

    ``var``: the grid variable of each role (packed values left packed); ``fields``: output name -> lazy
    (time, lat, lon) field in the file's units; ``deacc``: the de-accumulated amounts; ``to_canonical``:
    output name -> conversion of zonal values to canonical units; ``step_s``: time step in s.
    """

    var: dict[str, xr.DataArray]
    fields: dict[str, xr.DataArray]
    deacc: dict[str, Deaccumulated]
    to_canonical: dict[str, Callable[[Any], Any]]
    step_s: float

    def checks(self) -> dict[str, tuple[xr.DataArray, xr.DataArray]]:
        """Lazy (bad steps, clipped count) of each de-accumulated amount, to compute with the zonal means."""
        return {k: (d.bad_steps, d.n_clipped) for k, d in self.deacc.items()}

    def clipped(self, checks: Mapping[str, tuple[Any, Any]]) -> dict[str, int]:
        """Raise on a contradicted accumulation kind; else the clipped count per amount (computed ``checks``)."""
        return {k: self.deacc[k].check(bad_steps=b, n_clipped=n) for k, (b, n) in checks.items()}


def driver_fields(
    grid: Grid,
    *,
    source: WeatherSource | None = None,
    accumulation: Mapping[str, Accumulation] | None = None,
    section: str = "weather",
) -> DriverFields:
    """The lazy fields :func:`hourly_drivers` averages over zones (nothing is read)."""
    from lakefeed.config.sources import Accumulation, WeatherSource
    from lakefeed.units import convert

    src = source or WeatherSource(paths=[])
    acc = dict(src.accumulation) | dict(accumulation or {})
    rule_acc = src.accumulation if accumulation is None else None  # an override: the caller de-accumulated
    var = select_roles(
        grid, ROLES, mapping=src.variables, units=src.units, accumulation=rule_acc, packed=True, section=section
    )
    step_s = float(step_of(grid.dataset["time"].values) / np.timedelta64(1, "s"))
    u, v = decode(var["eastward_wind"]), decode(var["northward_wind"])
    speed = wind_speed(convert(u, u.attrs["units"], "m s-1"), convert(v, v.attrs["units"], "m s-1"))
    deacc: dict[str, Deaccumulated] = {}
    for role in ("precipitation", "shortwave_radiation"):
        a = acc.get(role) or acc.get(var[role].attrs["source_name"]) or Accumulation()
        deacc[role] = deaccumulate(
            decode(var[role]), kind=a.kind, reset_hour=a.reset_hour, name=var[role].attrs["source_name"]
        )
    fields = {
        "air_temperature": var["air_temperature"],
        "dewpoint": var["dewpoint_temperature"],
        "wind_speed": speed,
        "precipitation": deacc["precipitation"].increments,
        "shortwave_radiation": deacc["shortwave_radiation"].increments,
    }
    to_canonical = {
        "air_temperature": lambda x: convert(x, var["air_temperature"].attrs["units"], "degC"),
        "dewpoint": lambda x: convert(x, var["dewpoint_temperature"].attrs["units"], "degC"),
        "wind_speed": lambda x: x,
        "precipitation": lambda x: to_mm_per_step(x, var["precipitation"].attrs["units"], step_s),
        "shortwave_radiation": lambda x: to_watts(x, var["shortwave_radiation"].attrs["units"], step_s),
    }
    return DriverFields(var, fields, deacc, to_canonical, step_s)


def lake_drivers(
    grid: Grid,
    weights: ZoneWeights,
    fields: DriverFields,
    zonal: Mapping[str, xr.Dataset],
    *,
    section: str = "weather",
    value_rules: bool = True,
) -> xr.Dataset:
    """The drivers of :func:`hourly_drivers` from the computed zonal means (``zonal``: field -> Dataset)."""
    names = {"dewpoint": "dewpoint_temperature", "wind_speed": "eastward_wind"}
    conv, var = fields.to_canonical, fields.var
    if value_rules:
        check_values(
            grid,
            weights,
            {k: (f, zonal[k], conv[k], var[names.get(k, k)].attrs["source_name"]) for k, f in fields.fields.items()},
            step_hours=fields.step_s / 3600.0,
            section=section,
        )
    out = xr.Dataset({k: conv[k](zonal[k]["mean"]) for k in fields.fields})
    vf = xr.concat([z["valid_fraction"] for z in zonal.values()], dim="v").min("v")
    cov = xr.DataArray(weights.grid_coverage, dims="zone", coords={"zone": list(weights.zones)})
    out["valid_fraction"] = vf * cov
    for k in out.data_vars:
        out[k].attrs = {}
    return out


def compute_zonal(objs: Any, *, progress: Progress | None = None, what: str = "weather: reading grid") -> Any:
    """``dask.compute`` of lazy zonal results with the local scheduler, one BLAS thread, progress reported."""
    with local_compute(progress, what):
        return dask.compute(*objs, scheduler=local_scheduler())


def hourly_drivers(
    grid: Grid,
    weights: ZoneWeights,
    *,
    source: WeatherSource | None = None,
    accumulation: Mapping[str, Accumulation] | None = None,
    progress: Progress | None = None,
    section: str = "weather",
    value_rules: bool = True,
) -> tuple[xr.Dataset, dict[str, int]]:
    """Per-step zonal drivers in canonical units, computed in one pass (returns (dataset, clipped counts)).

    Dataset dims (time, zone): ``air_temperature``, ``dewpoint`` (degC), ``wind_speed`` (m s-1, mean
    of cell speeds), ``precipitation`` (mm per step), ``shortwave_radiation`` (W m-2, step mean),
    ``valid_fraction`` (lowest of the variables; fraction of the whole zone).

    Every file's units are checked and its values converted from its own unit
    (:func:`~lakefeed.sources.grids.select_roles`; ``section`` names the config section in messages).
    With ``value_rules`` the converted values of the weighed cells must lie within physical bounds and
    every variable must hold values in every file (:mod:`lakefeed.sources.grid_rules`): read in the
    same pass, a :class:`~lakefeed.exceptions.SourceError` naming file, time and cell otherwise.
    """
    f = driver_fields(grid, source=source, accumulation=accumulation, section=section)
    zonal = {k: zonal_mean(v, weights, extremes=True) for k, v in f.fields.items()}
    zonal, checks = compute_zonal((zonal, f.checks()), progress=progress)
    clipped = f.clipped(checks)
    return lake_drivers(grid, weights, f, zonal, section=section, value_rules=value_rules), clipped


def zonal_long(
    grid: Grid,
    weights: ZoneWeights,
    *,
    accumulation: Accumulation | None = None,
    progress: Progress | None = None,
    processes: bool | None = None,
) -> pd.DataFrame:
    """Long table (zone, time, variable, value, unit, valid_fraction) of every (time, lat, lon) variable.

    ``variable`` is the CF standard_name where the file has one, else the variable name. Known roles
    are converted to canonical units (temperatures degC, wind m s-1, precipitation mm per step,
    shortwave W m-2); accumulated amounts (by standard_name) are de-accumulated per ``accumulation``.
    Without accumulated amounts the time chunks are read in forked worker processes where safe
    (``processes``: see :func:`compute_by_time`); de-accumulation needs one pass with the Dask scheduler.
    """
    from lakefeed.config.sources import WEATHER_ROLES
    from lakefeed.units import convert, parse_unit

    by_sn = {sn: role for role, sns in WEATHER_ROLES.items() for sn in sns}
    ds = grid.dataset
    step_s = float(step_of(ds["time"].values) / np.timedelta64(1, "s"))
    lazy, meta = {}, {}
    for name, da in ds.data_vars.items():
        sn = da.attrs.get("standard_name")
        unit = da.attrs.get("units")
        if not unit:
            raise SourceError(f"weather grid {grid.label}: variable {name!r} has no 'units' attribute")
        parse_unit(unit)
        if sn in _AMOUNT_NAMES and accumulation is not None:
            da = deaccumulate(decode(da), kind=accumulation.kind, reset_hour=accumulation.reset_hour, name=str(name))
        lazy[str(name)] = (zonal_mean(da.increments if hasattr(da, "increments") else da, weights), da)
        meta[str(name)] = (sn or str(name), by_sn.get(sn or ""), unit)
    if not any(isinstance(v[1], Deaccumulated) for v in lazy.values()):
        # every result runs along time: one task per time chunk, in worker processes where safe
        names = list(lazy)
        done = compute_by_time(
            [lazy[k][0] for k in names], processes=processes, progress=progress, what="zonal: reading grid"
        )
        res = {k: (d, None, None) for k, d in zip(names, done, strict=True)}
    else:
        with local_compute(progress, "zonal: reading grid"):
            (res,) = dask.compute(
                {
                    k: (v[0], getattr(v[1], "bad_steps", None), getattr(v[1], "n_clipped", None))
                    for k, v in lazy.items()
                },
                scheduler=local_scheduler(),
            )
    frames = []
    for name, (z, bad, ncl) in res.items():
        src = lazy[name][1]
        if isinstance(src, Deaccumulated):
            src.check(bad_steps=bad, n_clipped=ncl)
        label, role, unit = meta[name]
        mean = z["mean"]
        if role in ("air_temperature", "dewpoint_temperature"):
            mean, unit = convert(mean, unit, "degC"), "degC"
        elif role in ("eastward_wind", "northward_wind"):
            mean, unit = convert(mean, unit, "m s-1"), "m s-1"
        elif role == "precipitation":
            mean, unit = to_mm_per_step(mean, unit, step_s), "mm"
        elif role == "shortwave_radiation":
            mean, unit = to_watts(mean, unit, step_s), "W m-2"
        f = xr.Dataset({"value": mean, "valid_fraction": z["valid_fraction"]}).to_dataframe().reset_index()
        f["variable"], f["unit"] = label, unit
        frames.append(f)
    out = pd.concat(frames, ignore_index=True)
    return out[["zone", "time", "variable", "value", "unit", "valid_fraction"]]


def build_weather(
    project: Project,
    store: Store,
    *,
    progress: Progress | None = None,
    since: str | date | None = None,
    allow_shrink: bool = False,
) -> StageResult:
    """Build ``drivers_daily`` for one lake: in full, or only the days a changed source month touches.

    Parameters
    ----------
    project, store
        The lake's configuration and the store to write to.
    progress
        Progress callback.
    since
        First day of the earliest new or changed weather month (the files' calendar; None: full build).
        The grid is read only from shortly before the first local day that month touches, rows from that
        day on are recomputed and replace the stored ones; older part files are not rewritten. A full
        build runs instead when there is no stored table, the configuration, columns, grid or geometry
        differ from the stored ones, a recorded file is gone or a changed file starts earlier than the
        stored record (see :mod:`lakefeed.stages._weather_refresh`). Either way the table read back equals
        a full build's. ``StageResult.reason`` says which (e.g. ``"incremental from 2022-12-01"``).
    allow_shrink
        Write even when the new rows would shorten the stored record or turn stored values into missing ones
        (a weather file removed on purpose); otherwise that is a :class:`~lakefeed.exceptions.ShrinkError`
        and nothing is written (:mod:`lakefeed.stages._guard`). An unreadable weather file always fails the
        stage (a :class:`~lakefeed.exceptions.SourceError` naming it), before anything is written.

    Examples
    --------
    >>> from lakefeed.config import load_project  # doctest: +SKIP
    >>> build_weather(load_project("config/lake-tallow.yaml"), Store("store"))  # doctest: +SKIP
    StageResult(stage='weather', lake='tallow', tables={'drivers_daily': 1098}, ...)
    """
    from lakefeed.stages.weather_lake import finish_weather, prepare_weather

    lake = project.lake
    src = project.sources.weather
    if src is None:
        return StageResult("weather", lake.id, skipped=True, reason="no weather source in sources.yaml")
    # an unreadable file fails the stage naming it (as `lakefeed check` reports it): a month left out would
    # replace its stored rows with missing ones
    grid = open_grid(src.paths, time_zone=src.time_zone, on_error="raise", format=src.format)
    warn = time_gaps(grid.dataset["time"].values, grid.parts)
    job = prepare_weather(project, store, grid, since=since, progress=progress, warnings=warn)
    hourly, clipped = hourly_drivers(job.window, job.weights, source=src, progress=progress)
    return finish_weather(job, hourly, clipped, store, allow_shrink=allow_shrink, progress=progress)
