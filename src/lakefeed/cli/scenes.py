"""`lakefeed scenes`: AOI statistics of a folder or catalogue of chlorophyll-a scenes, with acceptance.

Parses arguments, reads the AOIs and the catalogue, and calls the same library functions as the
`target` stage (:func:`lakefeed.stages.target.extract_observations`); writes one Parquet file with the
``target_obs`` columns and their units. Holds no science.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import TYPE_CHECKING

import typer
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn

from lakefeed.cli._app import app, console
from lakefeed.exceptions import ConfigError

if TYPE_CHECKING:  # heavy libraries are imported inside the functions (short CLI start-up)
    import pandas as pd

__all__ = ["scenes", "write_parquet"]


def write_parquet(frame: pd.DataFrame, path: Path, units: dict[str, str]) -> None:
    """Write ``frame`` to ``path`` with each column's unit in its Arrow field metadata (``unit``)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.Table.from_pandas(frame, preserve_index=False)
    fields = [f.with_metadata({b"unit": units[f.name].encode()}) if f.name in units else f for f in table.schema]
    table = table.cast(pa.schema(fields, metadata=table.schema.metadata))
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp")
    pq.write_table(table, tmp)
    tmp.replace(path)


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
    from pydantic import ValidationError

    from lakefeed.config.lake import TargetOptions
    from lakefeed.config.sources import SceneSource
    from lakefeed.sources.scenes import SceneReader, list_scenes
    from lakefeed.sources.vectors import read_layer
    from lakefeed.stages.target import OBS_UNITS, extract_observations

    if out.suffix.lower() != ".parquet":
        raise ConfigError(f"--out {out}: give a file name ending in .parquet")
    try:
        options = TargetOptions(min_valid_fraction=min_valid_fraction)
        bits = [int(b) for b in bad_quality_bits.split(",") if b.strip()] if bad_quality_bits else []
        if any(not 0 <= b < 64 for b in bits):
            raise ValueError(f"quality bits must lie in 0..63; got {bits}")
    except ValueError as err:
        raise ConfigError(f"invalid option: {err}") from err
    where = (
        {"folder": str(catalog), "filename_pattern": filename_pattern}
        if filename_pattern
        else {"catalog": str(catalog)}
    )
    try:  # the pattern's rules are the config's (scenes.filename_pattern), so both say the same
        source = SceneSource(**where, asset=asset, quality_asset=quality_asset, uncertainty_asset=uncertainty_asset)
    except ValidationError as err:
        reason = "; ".join(str(e["msg"]).removeprefix("Value error, ") for e in err.errors())
        raise ConfigError(f"--filename-pattern: {reason}") from None
    layer = read_layer(aois, what="areas of interest", id_field=id_field)
    lake_layer = read_layer(lake, what="lake polygon") if lake is not None else None
    reader = SceneReader(layer, id_field=id_field, lake=lake_layer)
    table = list_scenes(source)
    label = lake_id or re.sub(r"[^a-z0-9_-]+", "-", aois.stem.lower()).strip("-") or "lake"
    with Progress(
        TextColumn("[bold]{task.description}"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeRemainingColumn(),
        console=console,
        transient=False,
    ) as bar:
        task = bar.add_task("reading scenes", total=len(table))

        def progress(description: str, done: int, total: int) -> None:
            bar.update(task, completed=done, total=total, description=description)

        obs = extract_observations(
            table,
            reader,
            lake=label,
            timezone=timezone,
            options=options,
            shore_buffer_m=shore_buffer,
            bad_quality_bits=bits or None,
            progress=progress,
        )
    write_parquet(obs, out, OBS_UNITS)
    n_scenes = obs["scene_id"].nunique()
    console.print(
        f"{len(obs)} AOI-scene rows from {n_scenes} scenes: {int(obs['accepted'].sum())} accepted, "
        f"{int((~obs['accepted']).sum())} rejected (see 'reason'), {int(obs['outlier'].sum())} outliers -> {out}"
    )
