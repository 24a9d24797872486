"""`lakefeed zonal`: exact area-weighted zonal series of gridded files for any polygon layer.

Parses arguments and calls :func:`lakefeed.stages.zonal.zonal_to_parquet` (the weather stage's code).
Without ``--daily``: a long table (zone, time, variable, value, unit, valid_fraction) at the grid's own
time steps. With ``--daily``: the ``drivers_daily`` columns on local calendar days of ``--tz``.
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
    from lakefeed.stages.weather import use_processes
    from lakefeed.stages.zonal import zonal_to_parquet

    _check_arguments(grid, zones, tz, reset_hour)
    bad = [v for v in variable if "=" not in v]
    if bad:
        raise typer.BadParameter(f"{bad[0]!r}: write ROLE=NAME, e.g. precipitation=tp", param_hint="--variable")
    mapping = dict(v.split("=", 1) for v in variable)
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

        written = zonal_to_parquet(
            grid,
            zones,
            out,
            id_field=id_field,
            daily=daily,
            tz=tz,
            accumulation=accumulation,
            reset_hour=reset_hour,
            allow_partial=allow_partial,
            weights_cache=weights_cache,
            skip_bad_files=skip_bad_files,
            processes=processes,
            variables=mapping,
            grid_format=grid_format,
            progress=progress,
        )
    for msg in written.skipped:
        console.print(f"[yellow]left out:[/yellow] {msg}")
    cached = "from cache" if written.weights_cached else "computed"
    console.print(f"{written.zones} zones, {written.files} file(s), weights {cached}")
    console.print(f"wrote {written.rows} rows to {written.path}")


def _check_arguments(grid: list[str], zones: Path, tz: str, reset_hour: int) -> None:
    """Refuse arguments that cannot work before any file is opened (usage errors: exit code 2)."""
    import glob
    import zoneinfo

    for pattern in grid:
        if "://" in pattern:  # a URL is listed by its file system when opened
            continue
        if not glob.has_magic(pattern) and not Path(pattern).exists():
            hint = "give NetCDF or GRIB files, globs or a Zarr store"
            raise typer.BadParameter(f"{pattern}: no such file or folder; {hint}", param_hint="GRID...")
        if glob.has_magic(pattern) and not glob.glob(pattern):
            raise typer.BadParameter(f"{pattern}: the pattern matches no file", param_hint="GRID...")
    if "://" not in str(zones) and not zones.exists():
        hint = "give a polygon layer (GeoPackage, shapefile, ...)"
        raise typer.BadParameter(f"{zones}: no such file; {hint}", param_hint="--zones")
    try:
        zoneinfo.ZoneInfo(tz)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        hint = "use e.g. UTC, Europe/Berlin or Etc/GMT-3"
        raise typer.BadParameter(f"{tz!r} is not an IANA time zone; {hint}", param_hint="--tz") from None
    if not 0 <= reset_hour <= 23:
        raise typer.BadParameter(f"{reset_hour}: an hour of the day in UTC, 0..23", param_hint="--reset-hour")
