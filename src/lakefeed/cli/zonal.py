"""`lakefeed zonal`: exact area-weighted zonal series of gridded files for any polygon layer.

Parses arguments and calls the same library code as the weather stage
(:func:`lakefeed.stages.weather.zonal_long`, :func:`~lakefeed.stages.weather.hourly_drivers`,
:func:`lakefeed.extract.daily.to_daily`). Without ``--daily``: a long table (zone, time,
variable, value, unit, valid_fraction) at the grid's own time steps. With ``--daily``: the
``drivers_daily`` columns on local calendar days of ``--tz``.
"""

from __future__ import annotations

from pathlib import Path

import typer
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

from lakefeed.cli._app import app, console

__all__ = ["zonal"]


@app.command("zonal")
def zonal(
    grid: list[str] = typer.Argument(
        ..., help="NetCDF or GRIB file(s), glob(s) or a Zarr store of a lat/lon grid; local or URLs (s3://...)."
    ),
    zones: Path = typer.Option(..., "--zones", help="Polygon layer (any format geopandas reads, any CRS)."),
    id_field: str = typer.Option(..., "--id-field", help="Field holding each polygon's zone name."),
    out: Path = typer.Option(..., "--out", help="Output Parquet file."),
    daily: bool = typer.Option(False, "--daily", help="Daily drivers (drivers_daily columns) instead of steps."),
    tz: str = typer.Option("UTC", "--tz", help="IANA time zone of the local calendar day (with --daily)."),
    accumulation: str = typer.Option(
        "since_reset",
        "--accumulation",
        help="How accumulated amounts (precipitation, radiation energy) are stored: none, since_reset, per_step.",
    ),
    reset_hour: int = typer.Option(0, "--reset-hour", help="UTC hour of the reset (since_reset)."),
    variable: list[str] = typer.Option(
        [],
        "--variable",
        help="ROLE=NAME: the grid's variable playing a role where it has no CF standard_name (with --daily), "
        "e.g. precipitation=tp; repeat for several.",
    ),
    grid_format: str = typer.Option("auto", "--format", help="auto (from the content), netcdf, zarr or grib."),
    allow_partial: bool = typer.Option(False, "--allow-partial", help="Accept zones partly outside the grid."),
    weights_cache: Path | None = typer.Option(None, "--weights-cache", help="Folder to cache exact weights in."),
    skip_bad_files: bool = typer.Option(False, "--skip-bad-files", help="Leave out unreadable files (warn)."),
    processes: bool | None = typer.Option(
        None,
        "--processes/--threads",
        help="Read time chunks in forked worker processes (default: when safe, i.e. not in a Dask worker).",
    ),
) -> None:
    """Area-weighted means of every grid variable over every polygon (exact coverage x cell area)."""
    import geopandas as gpd

    from lakefeed.config.sources import Accumulation
    from lakefeed.exceptions import ConfigError
    from lakefeed.geometry.zones import to_crs
    from lakefeed.sources.grids import open_grid
    from lakefeed.sources.vectors import read_layer
    from lakefeed.stages.weather import get_weights, hourly_drivers, use_processes, zonal_long
    from lakefeed.store._meta import schema_with_units

    if accumulation not in ("none", "since_reset", "per_step"):
        raise ConfigError(f"--accumulation {accumulation!r}: use none, since_reset or per_step")
    acc = Accumulation(kind=accumulation, reset_hour=reset_hour)  # type: ignore[arg-type]
    bad = [v for v in variable if "=" not in v]
    if bad:
        raise ConfigError(f"--variable {bad[0]!r}: write ROLE=NAME, e.g. precipitation=tp")
    mapping = dict(v.split("=", 1) for v in variable)
    g = open_grid(grid, on_error="skip" if skip_bad_files else "raise", format=grid_format)
    for msg in g.skipped:
        console.print(f"[yellow]left out:[/yellow] {msg}")
    layer = read_layer(zones, what="zones", id_field=id_field)
    layer = to_crs(layer, g.crs, what="zones")
    zgdf = gpd.GeoDataFrame({"zone": layer[id_field].astype(str).to_numpy()}, geometry=layer.geometry.values, crs=g.crs)
    weights, cached = get_weights(zgdf, g, cache_dir=weights_cache, allow_partial_coverage=allow_partial)
    console.print(f"{len(zgdf)} zones, {len(g.files)} file(s), weights {'from cache' if cached else 'computed'}")
    # decided before the progress bar starts its refresh thread (the workers never touch the console)
    processes = use_processes() if processes is None else processes
    with Progress(
        TextColumn("{task.description}"),
        BarColumn(),
        TextColumn("{task.completed}/{task.total}"),
        TimeElapsedColumn(),
        console=console,
        transient=True,
    ) as bar:
        task = bar.add_task("reading", total=None)

        def progress(description: str, done: int, total: int) -> None:
            bar.update(task, description=description, completed=done, total=total)

        if daily:  # imported only here: the daily aggregation's modules are not needed for the long table
            from lakefeed.config.sources import WeatherSource
            from lakefeed.extract.daily import DAILY_UNITS, to_daily
            from lakefeed.geometry.zones import zone_latitudes

            source = WeatherSource(
                paths=[], variables=mapping, accumulation={"precipitation": acc, "shortwave_radiation": acc}
            )
            hourly, _clipped = hourly_drivers(g, weights, source=source, progress=progress)
            flags = {z: weights.flags(z) for z in weights.zones}
            frame = to_daily(hourly, tz=tz, latitude=zone_latitudes(zgdf), zone_flags=flags)
            frame["date"] = frame["date"].dt.date
            units = DAILY_UNITS
        else:
            frame = zonal_long(g, weights, accumulation=acc, progress=progress, processes=processes)
            units = {"value": "see unit column", "valid_fraction": "1"}
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.Table.from_pandas(frame, preserve_index=False)
    table = table.cast(schema_with_units(table, units, {}, {"grid_signature": weights.signature}))
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(f".{out.name}.tmp")
    pq.write_table(table, tmp)
    tmp.replace(out)
    console.print(f"wrote {len(frame)} rows to {out}")
