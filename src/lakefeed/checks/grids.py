"""Cheap checks of the gridded weather reanalysis and the forecast archive.

Takes the sources config sections and the lake/catchment layers; opens the files lazily
with xarray (coordinates and attributes only) and returns :class:`CheckResult` lines: files
present, variables found (by CF standard_name via :data:`WEATHER_ROLES`, else the config's
``variables`` mapping) with units convertible to the expected ones (through
:mod:`lakefeed.units`), lake and catchment inside the grid extent (compared in lon/lat;
0..360 longitudes handled), forecast reference time and lead dimension. Also returns each
source's period for the coverage check. Must not read data variables or write anything.
"""

from __future__ import annotations

import difflib
from collections.abc import Mapping
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
import shapely.affinity
import xarray as xr

from lakefeed.checks._open import Period, expand, find_coord, lonlat_bounds, open_lazy, scan_files
from lakefeed.checks._result import CheckResult, failed, passed, skipped, warned
from lakefeed.config import WEATHER_ROLES, Accumulation, ForecastSource, WeatherSource
from lakefeed.units import is_convertible

__all__ = [
    "EXPECTED_UNITS",
    "check_forecast",
    "check_weather",
    "grid_data_results",
    "grid_extent_results",
    "weather_variables",
]

#: Unit each CF standard name must be convertible to (amounts stay amounts, fluxes stay fluxes).
EXPECTED_UNITS: dict[str, str] = {
    "air_temperature": "degC",
    "dew_point_temperature": "degC",
    "eastward_wind": "m s-1",
    "northward_wind": "m s-1",
    "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air": "J m-2",
    "surface_downwelling_shortwave_flux_in_air": "W m-2",
    "lwe_thickness_of_precipitation_amount": "mm",
    "precipitation_amount": "kg m-2",
    "precipitation_flux": "kg m-2 s-1",
}
_AMOUNTS = {"J m-2", "mm", "kg m-2"}


def weather_variables(
    ds: xr.Dataset,
    *,
    variables: Mapping[str, str],
    units: Mapping[str, str],
    accumulation: Mapping[str, Accumulation],
    section: str,
    file: Path,
    required: bool = True,
) -> list[CheckResult]:
    """One line per weather role: found (how), units convertible, accumulation declared for amounts."""
    name = f"{section} variables"
    out: list[CheckResult] = []
    found: list[str] = []
    for key, mapping in (("variables", variables), ("units", units), ("accumulation", accumulation)):
        for role in mapping:
            if role not in WEATHER_ROLES and (key == "variables" or role not in ds.data_vars):
                guess = difflib.get_close_matches(role, list(WEATHER_ROLES), n=1)
                out.append(
                    failed(
                        name,
                        f"{section}.{key}.{role}: unknown role" + (f"; did you mean {guess[0]!r}?" if guess else ""),
                        f"keys are roles ({', '.join(WEATHER_ROLES)})"
                        + ("" if key == "variables" else " or variable names of the file"),
                    )
                )
    for role, std_names in WEATHER_ROLES.items():
        var = next((v for v in ds.data_vars.values() if v.attrs.get("standard_name") in std_names), None)
        how = "standard_name"
        if var is None and role in variables:
            how = f"{section}.variables.{role}"
            if variables[role] not in ds.data_vars:
                out.append(
                    failed(
                        name,
                        f"{file.name}: variable {variables[role]!r} named by {how} is not in the file; "
                        f"it has {sorted(map(str, ds.data_vars))}",
                        f"fix {how}",
                    )
                )
                continue
            var = ds[variables[role]]
        if var is None:
            make = failed if required else warned
            out.append(
                make(
                    name,
                    f"{file.name}: no variable for {role!r}: none has standard_name {' or '.join(std_names)} "
                    f"and {section}.variables.{role} is not set; variables are {sorted(map(str, ds.data_vars))}",
                    f"add the file's variable name under {section}.variables.{role}",
                )
            )
            continue
        std = var.attrs.get("standard_name")
        expected = [EXPECTED_UNITS[std]] if std in EXPECTED_UNITS else [EXPECTED_UNITS[s] for s in std_names]
        ukey = role if role in units else str(var.name)
        unit = units.get(ukey, var.attrs.get("units"))
        unit_src = f"{section}.units.{ukey}" if ukey in units else f"attribute units of {var.name!r}"
        if unit is None:
            out.append(
                failed(
                    name,
                    f"{file.name}: {role} ({var.name!r}) has no units",
                    f"declare them under {section}.units.{role}",
                )
            )
            continue
        target = next((e for e in expected if is_convertible(unit, e)), None)
        if target is None:
            out.append(
                failed(
                    name,
                    f"{file.name}: {role} ({var.name!r}) has units {unit!r} ({unit_src}), not convertible to "
                    f"{' or '.join(map(repr, expected))}",
                    f"fix the units attribute or declare the right unit under {section}.units.{role}",
                )
            )
            continue
        acc = accumulation.get(role, accumulation.get(str(var.name)))
        if target in _AMOUNTS and (acc is None or acc.kind == "none"):
            out.append(
                failed(
                    name,
                    f"{file.name}: {role} ({var.name!r}) is an amount ({unit}) but "
                    f"{section}.accumulation.{role}.kind is {'not set' if acc is None else 'none'}",
                    f"set {section}.accumulation.{role}.kind to since_reset or per_step",
                )
            )
            continue
        found.append(f"{role} {var.name!r} ({unit}{'' if how == 'standard_name' else ', by ' + how})")
    if found:
        out.append(passed(name, f"{file.name}: {len(found)} of {len(WEATHER_ROLES)} roles: {'; '.join(found)}"))
    return out


def _inside(inner: tuple[float, float, float, float], outer: tuple[float, float, float, float]) -> bool:
    return inner[0] >= outer[0] and inner[1] >= outer[1] and inner[2] <= outer[2] and inner[3] <= outer[3]


def grid_extent_results(
    ds: xr.Dataset,
    zones: Mapping[str, gpd.GeoDataFrame | None],
    *,
    section: str,
    file: Path,
) -> list[CheckResult]:
    """Each zone (lake, catchment) must lie inside the grid's extent (cell edges), compared in lon/lat."""
    name = f"{section} grid extent"
    grid = lonlat_bounds(ds)
    if grid is None:
        return [
            failed(
                name,
                f"{file.name}: no latitude/longitude coordinates found (standard_name latitude/longitude)",
                "give the grid CF latitude and longitude coordinates",
            )
        ]
    out = []
    for zone, gdf in zones.items():
        if gdf is None or len(gdf) == 0:
            out.append(skipped(name, f"{zone}: not available"))
            continue
        w, s, e, n = (float(v) for v in gdf.to_crs("EPSG:4326").total_bounds)
        if grid[2] > 180.0:  # grid in 0..360 longitudes
            w, e = w % 360.0, e % 360.0
        box = (w, s, e, n)
        shown = f"grid {grid[0]:.2f}..{grid[2]:.2f} E, {grid[1]:.2f}..{grid[3]:.2f} N"
        if _inside(box, grid):
            out.append(passed(name, f"{zone} inside the {section} grid ({shown})"))
        else:
            out.append(
                failed(
                    name,
                    f"{zone} ({w:.3f}..{e:.3f} E, {s:.3f}..{n:.3f} N) is not inside the {section} grid of "
                    f"{file.name} ({shown})",
                    f"use a {section} grid covering the {zone}, or check the CRS of the geometry files",
                )
            )
    return out


def _first_step_over(da: xr.DataArray, lat: xr.DataArray, lon: xr.DataArray, geom: shapely.Geometry) -> np.ndarray:
    """Values of the first step of ``da`` at the cells whose centres lie in ``geom`` (or the centroid's cell)."""
    la, lo = np.asarray(lat.values, dtype=float), np.asarray(lon.values, dtype=float)
    w, s, e, n = geom.bounds
    dla = float(np.abs(np.diff(la)).max()) if la.size > 1 else 0.0
    dlo = float(np.abs(np.diff(lo)).max()) if lo.size > 1 else 0.0
    ila = np.flatnonzero((la >= s - dla) & (la <= n + dla))
    ilo = np.flatnonzero((lo >= w - dlo) & (lo <= e + dlo))
    if ila.size == 0 or ilo.size == 0:
        return np.array([])
    first = {d: 0 for d in da.dims if d not in (lat.dims[0], lon.dims[0])}
    window = da.isel(first).isel({lat.dims[0]: ila, lon.dims[0]: ilo}).transpose(lat.dims[0], lon.dims[0])
    values = np.asarray(window.values, dtype=float)  # a few cells of one time step
    glo, gla = np.meshgrid(lo[ilo], la[ila])
    inside = shapely.contains_xy(geom, glo, gla)
    if not inside.any():
        c = geom.centroid
        inside = np.zeros_like(inside)
        inside[np.abs(la[ila] - c.y).argmin(), np.abs(lo[ilo] - c.x).argmin()] = True
    return values[inside]


def grid_data_results(
    ds: xr.Dataset,
    zones: Mapping[str, gpd.GeoDataFrame | None],
    *,
    variable: str,
    section: str,
    file: Path,
) -> list[CheckResult]:
    """Cells over each zone must hold data (not the grid's NaN no-data region), read at the first time step only.

    A zone wholly in no-data cells is a problem; partly, a warning (its ``valid_fraction`` drops).
    """
    name = f"{section} data over zones"
    lat, lon = find_coord(ds, "latitude"), find_coord(ds, "longitude")
    if lat is None or lon is None or lat.ndim != 1 or lon.ndim != 1 or variable not in ds.data_vars:
        return [skipped(name, "needs 1-D latitude/longitude coordinates and an air temperature variable")]
    out = []
    for zone, gdf in zones.items():
        if gdf is None or len(gdf) == 0:
            continue
        geom = shapely.union_all(gdf.to_crs("EPSG:4326").geometry.values)
        if float(np.nanmax(lon.values)) > 180.0 and geom.bounds[0] < 0:
            geom = shapely.affinity.translate(geom, xoff=360.0)
        vals = _first_step_over(ds[variable], lat, lon, geom)
        if vals.size == 0:
            continue  # outside the grid: reported by the extent check
        missing = int(np.isnan(vals).sum())
        what = (
            f"{zone}: {missing} of {vals.size} cells are no-data (NaN) in {variable!r} of {file.name} at the first step"
        )
        if missing == vals.size:
            out.append(failed(name, what, f"use a {section} grid with data over the {zone}"))
        elif missing:
            out.append(warned(name, what, f"the {zone}'s valid fraction will be below 1"))
        else:
            out.append(passed(name, f"{zone}: all {vals.size} cells hold data at the first step"))
    return out


def _role_variable(ds: xr.Dataset, role: str, variables: Mapping[str, str]) -> str | None:
    names = WEATHER_ROLES[role]
    found = next((str(k) for k, v in ds.data_vars.items() if v.attrs.get("standard_name") in names), None)
    if found is None and variables.get(role) in ds.data_vars:
        found = variables[role]
    return found


def _source_files(paths: list[str], section: str) -> tuple[list[CheckResult], list[Path]]:
    """Expand a grid source's paths: one problem per unmatched pattern, one ok line with the file range."""
    files, problems = expand(paths, key=f"{section}.paths")
    out = [failed(f"{section} files", p, f"fix {section}.paths in the sources config") for p in problems]
    if files:
        out.append(passed(f"{section} files", f"{len(files)} file(s), first {files[0].name}, last {files[-1].name}"))
    return out, files


def check_weather(
    src: WeatherSource | None, zones: Mapping[str, gpd.GeoDataFrame | None]
) -> tuple[list[CheckResult], Period | None]:
    """Weather grid: files, variables and units, extent, period (from the ``time`` coordinate)."""
    if src is None:
        return [skipped("weather", "no 'weather' section in the sources config")], None
    out, files = _source_files(src.paths, "weather")
    if not files:
        return out, None
    with open_lazy(files[0]) as ds:
        out += weather_variables(
            ds,
            variables=src.variables,
            units=src.units,
            accumulation=src.accumulation,
            section="weather",
            file=files[0],
        )
        out += grid_extent_results(ds, zones, section="weather", file=files[0])
        temp = _role_variable(ds, "air_temperature", src.variables)
        if temp is not None:
            out += grid_data_results(ds, zones, variable=temp, section="weather", file=files[0])
    res, period = scan_files(files, "time", section="weather")
    return out + res, period


def _lead(value: object) -> str:
    try:
        return str(pd.Timedelta(value))
    except (TypeError, ValueError):
        return str(value)


def check_forecast(
    src: ForecastSource | None, zones: Mapping[str, gpd.GeoDataFrame | None]
) -> tuple[list[CheckResult], Period | None]:
    """Forecast archive: files, forecast_reference_time, lead dimension, variables, extent, issue period."""
    if src is None:
        return [skipped("forecast", "no 'forecast' section in the sources config")], None
    out, files = _source_files(src.paths, "forecast")
    if not files:
        return out, None
    with open_lazy(files[0]) as ds:
        ref = find_coord(ds, "forecast_reference_time")
        lead = find_coord(ds, "forecast_period")
        if ref is None:
            out.append(
                failed(
                    "forecast axes",
                    f"{files[0].name}: no forecast_reference_time (by standard_name or name)",
                    "the archive needs the issue time as forecast_reference_time",
                )
            )
        if lead is None or not set(lead.dims) & set(ds.dims):
            out.append(
                failed(
                    "forecast axes",
                    f"{files[0].name}: no forecast_period/lead dimension; dims are {dict(ds.sizes)}",
                    "the archive needs a lead-time dimension with standard_name forecast_period",
                )
            )
        if ref is not None and lead is not None:
            out.append(
                passed(
                    "forecast axes",
                    f"issue time {ref.name!r}, lead {lead.name!r} with {lead.size} steps "
                    f"up to {_lead(lead.values.max())}",
                )
            )
        out += weather_variables(
            ds,
            variables=src.variables,
            units=src.units,
            accumulation=src.accumulation,
            section="forecast",
            file=files[0],
            required=False,
        )
        out += grid_extent_results(ds, zones, section="forecast", file=files[0])
    res, period = scan_files(files, "forecast_reference_time", section="forecast")
    return out + res, period
