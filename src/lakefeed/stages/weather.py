"""Stage ``weather``: daily weather drivers per zone from gridded reanalysis -> ``drivers_daily``.

Takes a :class:`~lakefeed.config.Project` and a :class:`~lakefeed.store.Store`. Reads the
weather grid (:mod:`lakefeed.sources.grids`) and the lake's layers, builds the zones, gets
exact cell weights (cached under ``<store>/_cache/weights/``, keyed by grid signature and
zone geometry hashes, so later runs and other files on the same grid reuse them), reads the
grid once for every zone and variable at once, de-accumulates and converts units, and
aggregates to the lake's local days. Writes ``drivers_daily`` (columns and units of DESIGN.md).

The helpers :func:`get_weights`, :func:`hourly_drivers`, :func:`zonal_long` and
:func:`compute_by_time` (time chunks read in forked worker processes where that is safe) are
shared with the ``lakefeed zonal`` command and the benchmark. Must not: hold science.
"""

from __future__ import annotations

import hashlib
import multiprocessing
import os
import sys
import threading
from collections.abc import Mapping
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import TYPE_CHECKING

import dask
import numpy as np
import pandas as pd
import xarray as xr
from dask.callbacks import Callback
from dask.local import get_sync

from lakefeed.exceptions import SourceError
from lakefeed.extract.accumulation import Deaccumulated, deaccumulate, step_of
from lakefeed.extract.meteo import wind_speed
from lakefeed.extract.zonal import zonal_mean
from lakefeed.geometry.weights import ZoneWeights, zone_hash, zone_weights
from lakefeed.sources.grids import Grid, decode, open_grid, select_roles
from lakefeed.stages._result import Progress, StageResult, no_progress

if TYPE_CHECKING:  # heavy imports (geopandas, pint, pydantic, pyarrow) are deferred to keep start-up short
    import geopandas as gpd

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
WATER_DENSITY_KG_M3 = 1000.0


class _DaskProgress(Callback):
    def __init__(self, progress: Progress, description: str) -> None:
        super().__init__()
        self._p, self._d, self._n, self._done = progress, description, 0, 0

    def _start_state(self, dsk, state) -> None:
        self._n = len(state["ready"]) + len(state["waiting"]) + len(state["running"])

    def _posttask(self, key, result, dsk, state, worker_id) -> None:
        self._done += 1
        self._p(self._d, self._done, max(self._n, self._done))


def _cores() -> int:
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1


def use_processes() -> bool:
    """Whether :func:`compute_by_time` may fork worker processes here (the ``processes=None`` default).

    Only in a plain single-threaded process on Linux with more than one core: not inside a
    Dask worker, not when a Dask scheduler or client is configured, not when other threads run (a
    Prefect task, a server): forking a multi-threaded process can deadlock.
    """
    if not sys.platform.startswith("linux") or _cores() < 2:
        return False
    if threading.active_count() > 1 or dask.config.get("scheduler", None) is not None:
        return False
    distributed = sys.modules.get("distributed")  # a Dask worker has it imported; importing it costs ~0.3 s
    if distributed is None:
        return True
    try:
        distributed.get_worker()
    except ValueError:
        return True
    return False


_FORKED: tuple[list[xr.Dataset], list[slice]] | None = None  # set in the parent just before forking


def _compute_slice(i: int) -> list[xr.Dataset]:
    objs, slices = _FORKED  # type: ignore[misc]
    # a callable scheduler: dask does not look for (and import) dask.distributed in every worker
    return list(dask.compute(*(o.isel(time=slices[i]) for o in objs), scheduler=get_sync))


def compute_by_time(
    objs: list[xr.Dataset], *, processes: bool | None = None, progress: Progress | None = None, what: str = ""
) -> list[xr.Dataset]:
    """Compute lazy (time, ...) Datasets together, one time chunk per task, in forked processes.

    xarray reads HDF5 under one lock, so dask threads hardly overlap the reads; forked workers (each
    reading its own time chunks, returning only the small zonal result) do. ``processes``: None
    decides by :func:`use_processes`; False uses the current Dask scheduler. Identical results.
    """
    chunks = next((v.chunks[0] for o in objs for v in o.data_vars.values() if v.chunks), None)
    if processes is None:
        processes = use_processes()
    if not processes or chunks is None or len(chunks) < 2:
        cb = _DaskProgress(progress, what) if progress else None
        with cb if cb else _Null():
            return list(dask.compute(*objs))
    global _FORKED
    ends = np.cumsum(chunks)
    slices = [slice(int(e - c), int(e)) for c, e in zip(chunks, ends, strict=True)]
    _FORKED = (objs, slices)
    parts: list[list[xr.Dataset]] = []
    try:
        n = max(1, min(_cores(), len(slices)))
        with ProcessPoolExecutor(n, mp_context=multiprocessing.get_context("fork")) as pool:
            for k, part in enumerate(pool.map(_compute_slice, range(len(slices)))):
                parts.append(part)
                if progress:
                    progress(what, k + 1, len(slices))
    finally:
        _FORKED = None
    return [xr.concat([p[j] for p in parts], dim="time") for j in range(len(objs))]


def get_weights(
    zones: gpd.GeoDataFrame, grid: Grid, *, cache_dir: str | Path | None = None, allow_partial_coverage: bool = False
) -> tuple[ZoneWeights, bool]:
    """Exact zone weights for ``grid``, from ``cache_dir`` when cached (returns (weights, was_cached)).

    ``zones``: GeoDataFrame with ``zone`` and geometry in the grid's CRS.
    """
    geoms = {str(z): g for z, g in zip(zones["zone"], zones.geometry.values, strict=True)}
    key = hashlib.sha256(
        "|".join(
            [grid.signature, str(allow_partial_coverage), *(f"{z}={zone_hash(g)}" for z, g in geoms.items())]
        ).encode()
    ).hexdigest()[:24]
    path = Path(cache_dir) / f"{grid.signature}-{key}.npz" if cache_dir else None
    if path is not None and path.exists():
        with np.load(path, allow_pickle=False) as npz:
            return ZoneWeights.from_arrays(dict(npz)), True
    w = zone_weights(geoms, grid.lat, grid.lon, allow_partial_coverage=allow_partial_coverage, crs=grid.crs)
    if path is not None:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_suffix(f".tmp{os.getpid()}.npz")
        np.savez(tmp, **w.to_arrays())
        tmp.replace(path)
    return w, False


def _to_mm_per_step(values: xr.DataArray, unit: str, step_s: float) -> xr.DataArray:
    from lakefeed.units import parse_unit, ureg

    q = ureg.Quantity(1.0, parse_unit(unit))
    if q.check("[mass] / [length] ** 2") or q.check("[mass] / [length] ** 2 / [time]"):
        q = q / ureg.Quantity(WATER_DENSITY_KG_M3, "kg m-3")
    if q.check("[length] / [time]"):
        q = q * ureg.Quantity(step_s, "s")
    if not q.check("[length]"):
        raise SourceError(f"precipitation unit {unit!r} is not an amount, depth or flux; declare weather.units")
    return values * float(q.to("mm").magnitude)


def _to_watts(values: xr.DataArray, unit: str, step_s: float) -> xr.DataArray:
    from lakefeed.units import parse_unit, ureg

    q = ureg.Quantity(1.0, parse_unit(unit))
    if q.check("[mass] / [time] ** 2"):  # J m-2 per step
        q = q / ureg.Quantity(step_s, "s")
    if not q.check("[mass] / [time] ** 3"):
        raise SourceError(f"shortwave unit {unit!r} is neither J m-2 nor W m-2; declare weather.units")
    return values * float(q.to("W m-2").magnitude)


def hourly_drivers(
    grid: Grid,
    weights: ZoneWeights,
    *,
    source: WeatherSource | None = None,
    accumulation: Mapping[str, Accumulation] | None = None,
    progress: Progress | None = None,
) -> tuple[xr.Dataset, dict[str, int]]:
    """Per-step zonal drivers in canonical units, computed in one pass (returns (dataset, clipped counts)).

    Dataset dims (time, zone): ``air_temperature``, ``dewpoint`` (degC), ``wind_speed`` (m s-1, mean
    of cell speeds), ``precipitation`` (mm per step), ``shortwave_radiation`` (W m-2, step mean),
    ``valid_fraction`` (lowest of the variables; fraction of the whole zone).
    """
    from lakefeed.config.sources import Accumulation, WeatherSource
    from lakefeed.units import convert

    src = source or WeatherSource(paths=[])
    acc = dict(src.accumulation) | dict(accumulation or {})
    var = select_roles(grid, ROLES, mapping=src.variables, units=src.units, packed=True)
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
    zonal = {k: zonal_mean(v, weights) for k, v in fields.items()}
    checks = {k: (d.bad_steps, d.n_clipped) for k, d in deacc.items()}
    cb = _DaskProgress(progress, "weather: reading grid") if progress else None
    with cb if cb else _Null():
        zonal, checks = dask.compute(zonal, checks)
    clipped = {k: deacc[k].check(bad_steps=b, n_clipped=n) for k, (b, n) in checks.items()}
    out = xr.Dataset(
        {
            "air_temperature": convert(zonal["air_temperature"]["mean"], var["air_temperature"].attrs["units"], "degC"),
            "dewpoint": convert(zonal["dewpoint"]["mean"], var["dewpoint_temperature"].attrs["units"], "degC"),
            "wind_speed": zonal["wind_speed"]["mean"],
            "precipitation": _to_mm_per_step(
                zonal["precipitation"]["mean"], var["precipitation"].attrs["units"], step_s
            ),
            "shortwave_radiation": _to_watts(
                zonal["shortwave_radiation"]["mean"], var["shortwave_radiation"].attrs["units"], step_s
            ),
        }
    )
    vf = xr.concat([z["valid_fraction"] for z in zonal.values()], dim="v").min("v")
    cov = xr.DataArray(weights.grid_coverage, dims="zone", coords={"zone": list(weights.zones)})
    out["valid_fraction"] = vf * cov
    for k in out.data_vars:
        out[k].attrs = {}
    return out, clipped


class _Null:
    def __enter__(self) -> None:
        return None

    def __exit__(self, *exc: object) -> None:
        return None


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
        cb = _DaskProgress(progress, "zonal: reading grid") if progress else None
        with cb if cb else _Null():
            (res,) = dask.compute(
                {k: (v[0], getattr(v[1], "bad_steps", None), getattr(v[1], "n_clipped", None)) for k, v in lazy.items()}
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
            mean, unit = _to_mm_per_step(mean, unit, step_s), "mm"
        elif role == "shortwave_radiation":
            mean, unit = _to_watts(mean, unit, step_s), "W m-2"
        f = xr.Dataset({"value": mean, "valid_fraction": z["valid_fraction"]}).to_dataframe().reset_index()
        f["variable"], f["unit"] = label, unit
        frames.append(f)
    out = pd.concat(frames, ignore_index=True)
    return out[["zone", "time", "variable", "value", "unit", "valid_fraction"]]


def build_weather(project: Project, store: Store, *, progress: Progress | None = None) -> StageResult:
    """Build ``drivers_daily`` for one lake.

    Examples
    --------
    >>> from lakefeed.config import load_project  # doctest: +SKIP
    >>> build_weather(load_project("config/lake-tallow.yaml"), Store("store"))  # doctest: +SKIP
    StageResult(stage='weather', lake='tallow', tables={'drivers_daily': 1098}, ...)
    """
    from lakefeed.extract.daily import DAILY_UNITS, to_daily
    from lakefeed.geometry.zones import build_zones, zone_latitudes
    from lakefeed.sources.vectors import read_layer
    from lakefeed.stages._provenance import config_hash, input_hashes, layer_paths

    p = progress or no_progress
    lake = project.lake
    src = project.sources.weather
    if src is None:
        return StageResult("weather", lake.id, skipped=True, reason="no weather source in sources.yaml")
    grid = open_grid(src.paths, time_zone=src.time_zone, on_error="skip")
    warn = [f"file left out: {m}" for m in grid.skipped]
    p("weather: zones", 0, 3)
    lake_g = read_layer(lake.lake, what="lake polygon")
    aois = read_layer(lake.aois, what="areas of interest", id_field=lake.aois.id_field) if lake.zones.aois else None
    subs = None
    if lake.zones.catchment or lake.zones.subbasins:
        subs = read_layer(lake.subbasins, what="sub-basins", id_field=lake.subbasins.id_field)
    layers = [lake.lake, lake.aois if aois is not None else None, lake.subbasins if subs is not None else None]
    zones = build_zones(
        lake_g,
        aois=aois,
        aoi_id_field=lake.aois.id_field,
        subbasins=subs,
        subbasin_layer=lake.subbasins,
        options=lake.zones,
        crs=grid.crs,
    )
    p("weather: weights", 1, 3)
    weights, _ = get_weights(
        zones,
        grid,
        cache_dir=Path(store.root) / "_cache" / "weights",
        allow_partial_coverage=lake.zones.allow_partial_coverage,
    )
    p("weather: weights", 2, 3)
    hourly, clipped = hourly_drivers(grid, weights, source=src, progress=progress)
    warn += [f"{k}: {n} value(s) of packing noise clipped to zero" for k, n in clipped.items() if n]
    flags = {z: weights.flags(z) for z in weights.zones}
    # the lake surface's elevation for every zone (FAO-56 Eq. 37); a catchment zone may lie higher
    elevation = 0.0 if lake.elevation_m is None else float(lake.elevation_m)
    daily = to_daily(hourly, tz=lake.timezone, latitude=zone_latitudes(zones), elevation_m=elevation, zone_flags=flags)
    daily.insert(0, "lake", lake.id)
    daily["date"] = daily["date"].dt.date
    store.write_table(
        "drivers_daily",
        lake.id,
        daily,
        units=DAILY_UNITS,
        metadata={"grid_signature": weights.signature, "files": str(len(grid.files))},
        inputs=input_hashes([*grid.files, *layer_paths(*layers)]),
        config_hash=config_hash(project),
    )
    p("weather: done", 3, 3)
    return StageResult("weather", lake.id, tables={"drivers_daily": len(daily)}, warnings=warn)
