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

from collections.abc import Mapping, Sequence
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.checks._open import Period, expand, find_coord, lonlat_bounds, open_lazy, scan_files
from lakefeed.checks._result import CheckResult, failed, passed, skipped, warned
from lakefeed.config import WEATHER_ROLES, Accumulation, ForecastSource, WeatherSource
from lakefeed.exceptions import SourceError
from lakefeed.sources.grid_roles import find_variable
from lakefeed.sources.grid_rules import GridPart, key_problems, role_problems, time_gaps
from lakefeed.sources.locations import RemotePath

__all__ = [
    "check_forecast",
    "check_weather",
    "grid_extent_results",
    "weather_variables",
]


def weather_variables(
    ds: xr.Dataset,
    *,
    variables: Mapping[str, str],
    units: Mapping[str, str],
    accumulation: Mapping[str, Accumulation],
    section: str,
    file: Path,
    required: bool = True,
    parts: Sequence[GridPart] | None = None,
    label: str | None = None,
) -> list[CheckResult]:
    """One line per weather role: found (how), units convertible, accumulation declared for amounts.

    Variables are found in ``ds`` (the first file); units and accumulation are checked in every file of
    ``parts`` (default: ``ds`` alone) by the build's own rules (:mod:`lakefeed.sources.grid_rules`);
    ``label`` names the grid in messages as the build does.
    """
    name = f"{section} variables"
    problems = key_problems(ds, variables=variables, units=units, accumulation=accumulation, section=section)
    out: list[CheckResult] = [failed(name, what, fix) for what, fix in problems]
    found: list[str] = []
    for role in WEATHER_ROLES:
        try:
            vname = find_variable(ds, role, mapping=variables, where=label or str(file), section=section)
        except SourceError as err:
            out.append((failed if required else warned)(name, str(err)))
            continue
        var = ds[vname]
        by_name = var.attrs.get("standard_name") in WEATHER_ROLES[role]
        how = "standard_name" if by_name else f"{section}.variables.{role}"
        probs, each = role_problems(
            role,
            str(var.name),
            parts or [GridPart(file, np.datetime64("NaT"), np.datetime64("NaT"), {str(var.name): dict(var.attrs)})],
            units=units,
            accumulation=accumulation,
            section=section,
        )
        if probs:
            out += [failed(name, what, fix) for what, fix in probs]
            continue
        unit = each[0]
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


def _source_files(paths: list[str], section: str) -> tuple[list[CheckResult], list[Path | RemotePath]]:
    """Expand a grid source's paths: one problem per unmatched pattern, one ok line with the file range."""
    files, problems = expand(paths, key=f"{section}.paths")
    out = [failed(f"{section} files", p, f"fix {section}.paths in the sources config") for p in problems]
    if files:
        out.append(passed(f"{section} files", f"{len(files)} file(s), first {files[0].name}, last {files[-1].name}"))
    return out, files


def check_weather(
    src: WeatherSource | None,
    zones: Mapping[str, gpd.GeoDataFrame | None],
    *,
    grid_zones: gpd.GeoDataFrame | None = None,
    allow_partial_coverage: bool = False,
) -> tuple[list[CheckResult], Period | None]:
    """Weather grid: files, every file's variables and units, time axis, extent, cells and sampled values.

    The files are opened as the build opens them (:func:`~lakefeed.sources.grids.open_grid`: metadata, time
    axes and one probe element per file); ``grid_zones`` are the weather stage's zones (:func:`build_zones`),
    whose cells are weighed and read as the build does (:mod:`lakefeed.checks._grid_values`).
    """
    from lakefeed.checks._grid_values import value_results
    from lakefeed.sources.grids import open_grid

    if src is None:
        return [skipped("weather", "no 'weather' section in the sources config")], None
    out, files = _source_files(src.paths, "weather")
    grid = None
    try:  # as the build opens them: every file's metadata, time axis and a probe element
        grid = open_grid(src.paths, time_zone=src.time_zone, format=src.format)
    except SourceError as err:
        out += [failed("weather files", line) for line in str(err).splitlines()]
    if not files or grid is None:  # the build stops here too, with the same words
        return out, None
    with open_lazy(files[0], fmt=src.format) as ds:
        found = weather_variables(
            ds,
            variables=src.variables,
            units=src.units,
            accumulation=src.accumulation,
            section="weather",
            file=files[0],
            parts=grid.parts,
            label=grid.label,
        )
        out += found + grid_extent_results(ds, zones, section="weather", file=files[0])
    res, period = scan_files(files, "time", section="weather", gaps=False, fmt=src.format)
    out += res + [warned("weather time axis", gap) for gap in time_gaps(grid.dataset["time"].values, grid.parts)]
    if grid_zones is not None and all(r.ok for r in out):
        out += value_results(grid, src, grid_zones, allow_partial_coverage=allow_partial_coverage)
    return out, period


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
    with open_lazy(files[0], fmt=src.format, kind="forecast") as ds:
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
    res, period = scan_files(files, "forecast_reference_time", section="forecast", fmt=src.format)
    return out + res, period
