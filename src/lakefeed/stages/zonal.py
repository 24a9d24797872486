"""Zonal series of gridded files for any polygon layer, written to one Parquet file (``lakefeed zonal``).

Takes grid paths (files, globs or a Zarr store), a polygon layer and its id field; reads them, weights
every cell exactly (cached when a folder is given) and returns, written to a Parquet file with each
column's unit in the field metadata (``unit``) and the grid signature in the schema metadata, either a
long table at the grid's own steps (zone, time, variable, value, unit, valid_fraction;
:func:`lakefeed.stages.weather.zonal_long`) or the ``drivers_daily`` columns on local days
(:func:`lakefeed.stages.weather.hourly_drivers`, :func:`lakefeed.extract.daily.to_daily`). The same
code as the weather stage. Must not: print or draw anything (the CLI does).
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

from lakefeed.progress import Progress
from lakefeed.stages._files import write_parquet

__all__ = ["ZonalFile", "zonal_to_parquet"]

_LONG_UNITS = {"value": "see unit column", "valid_fraction": "1"}


@dataclass(frozen=True)
class ZonalFile:
    """What :func:`zonal_to_parquet` wrote.

    Attributes
    ----------
    path
        The Parquet file.
    rows, zones, files
        Rows written, zones of the layer, grid files read.
    weights_cached
        True when the cell weights came from the cache folder.
    skipped
        One message per grid file left out (``skip_bad_files``).
    """

    path: Path
    rows: int
    zones: int
    files: int
    weights_cached: bool
    skipped: tuple[str, ...]


def zonal_to_parquet(
    grid: Sequence[str | Path],
    zones: Path,
    out: Path,
    *,
    id_field: str,
    daily: bool = False,
    tz: str = "UTC",
    accumulation: str = "since_reset",
    reset_hour: int = 0,
    allow_partial: bool = False,
    weights_cache: Path | None = None,
    skip_bad_files: bool = False,
    processes: bool | None = None,
    variables: Mapping[str, str] | None = None,
    grid_format: str = "auto",
    progress: Progress | None = None,
) -> ZonalFile:
    """Area-weighted means of every grid variable over every polygon, written to ``out``.

    Parameters
    ----------
    grid
        NetCDF file(s), glob(s) or a Zarr store of a lat/lon grid.
    zones, id_field
        Polygon layer (any format geopandas reads, any CRS) and the field naming each zone.
    out
        Parquet file, replaced atomically.
    daily, tz
        Daily drivers on local days of ``tz`` (``drivers_daily`` columns and units) instead of the long table.
    accumulation, reset_hour
        How accumulated amounts are stored (``none``, ``since_reset``, ``per_step``) and the reset hour (UTC).
    allow_partial
        Accept zones partly outside the grid.
    weights_cache
        Folder to cache exact weights in.
    skip_bad_files
        Leave out unreadable grid files (listed in ``ZonalFile.skipped``) instead of failing.
    processes
        Read time chunks in forked worker processes (None: when safe).
    variables
        Role to the grid's variable name, for variables without a CF ``standard_name`` (with ``daily``).
    grid_format
        ``auto`` (from the content), ``netcdf``, ``zarr`` or ``grib``.
    progress
        Progress callback.
    """
    import geopandas as gpd

    from lakefeed.config.sources import Accumulation, WeatherSource
    from lakefeed.exceptions import ConfigError
    from lakefeed.geometry.zones import to_crs, zone_latitudes
    from lakefeed.sources.grids import open_grid
    from lakefeed.sources.vectors import read_layer
    from lakefeed.stages.weather import get_weights, hourly_drivers, zonal_long

    if accumulation not in ("none", "since_reset", "per_step"):
        raise ConfigError(f"--accumulation {accumulation!r}: use none, since_reset or per_step")
    acc = Accumulation(kind=accumulation, reset_hour=reset_hour)  # type: ignore[arg-type]
    g = open_grid(list(map(str, grid)), on_error="skip" if skip_bad_files else "raise", format=grid_format)
    layer = to_crs(read_layer(zones, what="zones", id_field=id_field), g.crs, what="zones")
    zgdf = gpd.GeoDataFrame({"zone": layer[id_field].astype(str).to_numpy()}, geometry=layer.geometry.values, crs=g.crs)
    weights, cached = get_weights(zgdf, g, cache_dir=weights_cache, allow_partial_coverage=allow_partial)
    if daily:  # imported only here: the daily aggregation's modules are not needed for the long table
        from lakefeed.extract.daily import DAILY_UNITS, to_daily

        source = WeatherSource(
            paths=[], variables=dict(variables or {}), accumulation={"precipitation": acc, "shortwave_radiation": acc}
        )
        hourly, _clipped = hourly_drivers(g, weights, source=source, progress=progress)
        flags = {z: weights.flags(z) for z in weights.zones}
        frame = to_daily(hourly, tz=tz, latitude=zone_latitudes(zgdf), zone_flags=flags)
        frame["date"] = frame["date"].dt.date
        units: Mapping[str, str] = DAILY_UNITS
    else:
        frame = zonal_long(g, weights, accumulation=acc, progress=progress, processes=processes)
        units = _LONG_UNITS
    meta = {"lakefeed.units": json.dumps(dict(units), sort_keys=True), "lakefeed.grid_signature": weights.signature}
    write_parquet(frame, out, units, metadata=meta)
    return ZonalFile(out, len(frame), len(zgdf), len(g.files), cached, tuple(g.skipped))
