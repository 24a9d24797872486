"""AOI statistics of a folder or catalogue of chlorophyll-a scenes, with acceptance, to one Parquet file.

Takes an AOI layer, optionally the lake polygon (for the inward shore buffer) and a STAC catalogue, a
folder of item JSON files or a folder of GeoTIFFs named by a pattern; reads each scene's AOI windows and
screens them with the target stage's own code (:func:`lakefeed.stages.target.extract_observations`).
Writes the ``target_obs`` columns with their units (``lakefeed scenes``). Must not print anything.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from lakefeed.exceptions import ConfigError
from lakefeed.progress import Progress
from lakefeed.stages._files import write_parquet

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["scenes_to_parquet"]


def scenes_to_parquet(
    catalog: Path,
    aois: Path,
    out: Path,
    *,
    id_field: str,
    lake: Path | None = None,
    lake_id: str | None = None,
    timezone: str = "UTC",
    asset: str | None = None,
    quality_asset: str = "quality",
    uncertainty_asset: str = "uncertainty",
    filename_pattern: str | None = None,
    shore_buffer_m: float | None = None,
    min_valid_fraction: float = 0.5,
    bad_quality_bits: Sequence[int] = (),
    progress: Progress | None = None,
) -> pd.DataFrame:
    """Read, screen and write the AOI statistics of every scene; returns the rows written.

    Parameters
    ----------
    catalog
        Folder of STAC item JSON files, a STAC catalogue or collection file, or (with ``filename_pattern``)
        a folder of GeoTIFFs.
    aois, id_field
        Areas of interest (any vector format geopandas reads) and the field holding their ids.
    out
        Output Parquet file (``target_obs`` columns; statistics in mg m-3).
    lake
        Lake polygon for the shore buffer; None: the buffer applies inside each AOI.
    lake_id
        Value of the ``lake`` column; default: the AOI file's name.
    timezone
        IANA time zone of the ``date`` column (local date).
    asset, quality_asset, uncertainty_asset
        Asset keys of the chlorophyll-a values, the quality flags and the relative 1-sigma uncertainty.
    filename_pattern
        Regular expression with groups ``date`` and ``sensor`` naming the GeoTIFFs of a folder.
    shore_buffer_m
        Inward shore buffer in metres; None: one pixel of each scene.
    min_valid_fraction
        Acceptance minimum of the valid-pixel fraction (0..1).
    bad_quality_bits
        Quality bits (0 = least significant) that make a pixel bad; empty: any non-zero flag is bad.
    progress
        Progress callback.
    """
    from pydantic import ValidationError

    from lakefeed.config.lake import TargetOptions
    from lakefeed.config.sources import SceneSource
    from lakefeed.sources.scenes import SceneReader, list_scenes
    from lakefeed.sources.vectors import read_layer
    from lakefeed.stages.target import OBS_UNITS, extract_observations

    if out.suffix.lower() != ".parquet":
        raise ConfigError(f"--out {out}: give a file name ending in .parquet")
    bits = list(bad_quality_bits)
    try:
        options = TargetOptions(min_valid_fraction=min_valid_fraction)
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
    if progress is not None:
        progress("reading scenes", 0, len(table))
    obs = extract_observations(
        table,
        reader,
        lake=label,
        timezone=timezone,
        options=options,
        shore_buffer_m=shore_buffer_m,
        bad_quality_bits=bits or None,
        progress=progress,
    )
    write_parquet(obs, out, OBS_UNITS)
    return obs
