"""`lakefeed scenes`: AOI statistics of a folder or catalogue of chlorophyll-a scenes, with acceptance.

Parses arguments and calls :func:`lakefeed.stages.scenes.scenes_to_parquet` (the `target` stage's own
code), which writes one Parquet file with the ``target_obs`` columns and their units. Holds no science.
"""

from __future__ import annotations

from pathlib import Path

import typer
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

from lakefeed.cli._app import app, console
from lakefeed.exceptions import ConfigError

__all__ = ["scenes"]


@app.command("scenes")
def scenes(
    catalog: Path = typer.Argument(
        ...,
        help="Folder of STAC Item JSON files, a STAC catalog/collection file, or (with --filename-pattern) a "
        "folder of GeoTIFFs.",
    ),
    aois: Path = typer.Option(..., "--aois", help="Areas of interest (any vector format geopandas reads)."),
    id_field: str = typer.Option(..., "--id-field", help="Field of the AOI layer holding the AOI ids."),
    out: Path = typer.Option(..., "--out", help="Output Parquet file (target_obs columns)."),
    asset: str | None = typer.Option(None, "--asset", help="Chlorophyll-a asset key [default: first with role data]."),
    quality_asset: str = typer.Option("quality", "--quality-asset", help="Quality-flag asset key (optional asset)."),
    uncertainty_asset: str = typer.Option(
        "uncertainty", "--uncertainty-asset", help="Relative 1-sigma uncertainty asset key (optional asset)."
    ),
    shore_buffer: float | None = typer.Option(
        None, "--shore-buffer", min=0, help="Inward shore buffer in metres [default: one pixel of each scene]."
    ),
    min_valid_fraction: float = typer.Option(0.5, "--min-valid-fraction", min=0, max=1, help="Acceptance minimum."),
    lake: Path | None = typer.Option(
        None, "--lake", help="Lake polygon for the shore buffer; without it the buffer applies inside each AOI."
    ),
    lake_id: str | None = typer.Option(None, "--lake-id", help="Value of the 'lake' column [default: AOI file name]."),
    timezone: str = typer.Option("UTC", "--timezone", help="IANA time zone of the 'date' column (local date)."),
    filename_pattern: str | None = typer.Option(
        None,
        "--filename-pattern",
        help="CATALOG is a folder of GeoTIFFs named by this regular expression with groups 'date' and 'sensor' "
        "(optional 'time', 'asset'), e.g. '(?P<sensor>[a-z]+)_(?P<date>\\d{8})_(?P<asset>[a-z]+)\\.tif'.",
    ),
    bad_quality_bits: str | None = typer.Option(
        None,
        "--bad-quality-bits",
        help="Comma-separated quality bits (0 = least significant) that make a pixel bad, e.g. '0,1,2,3' "
        "[default: any non-zero flag is bad].",
    ),
) -> None:
    """Windowed AOI statistics of chlorophyll-a scenes, acceptance and outlier flags, to one Parquet file.

    Quality flags: with --bad-quality-bits only those bits are bad, else any non-zero flag counts as bad
    (0 = clear). Pixels count for an AOI when their centre lies inside it.
    """
    from lakefeed.stages.scenes import scenes_to_parquet

    try:
        bits = [int(b) for b in bad_quality_bits.split(",") if b.strip()] if bad_quality_bits else []
    except ValueError as err:
        raise ConfigError(f"invalid option: {err}") from err
    with Progress(
        TextColumn("[bold]{task.description}"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeRemainingColumn(),
        console=console,
        transient=False,
    ) as bar:
        task = bar.add_task("reading scenes", total=None)

        def progress(description: str, done: int, total: int) -> None:
            bar.update(task, completed=done, total=total, description=description)

        obs = scenes_to_parquet(
            catalog,
            aois,
            out,
            id_field=id_field,
            lake=lake,
            lake_id=lake_id,
            timezone=timezone,
            asset=asset,
            quality_asset=quality_asset,
            uncertainty_asset=uncertainty_asset,
            filename_pattern=filename_pattern,
            shore_buffer_m=shore_buffer,
            min_valid_fraction=min_valid_fraction,
            bad_quality_bits=bits,
            progress=progress,
        )
    n_scenes = obs["scene_id"].nunique()
    console.print(
        f"{len(obs)} AOI-scene rows from {n_scenes} scenes: {int(obs['accepted'].sum())} accepted, "
        f"{int((~obs['accepted']).sum())} rejected (see 'reason'), {int(obs['outlier'].sum())} outliers -> {out}"
    )
