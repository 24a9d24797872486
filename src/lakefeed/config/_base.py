"""Shared pieces of the configuration models: strict frozen base model and path handling."""

from __future__ import annotations

from pathlib import Path

from pydantic import BaseModel, ConfigDict


class StrictModel(BaseModel):
    """Frozen model that rejects unknown keys (the loader adds a did-you-mean)."""

    model_config = ConfigDict(extra="forbid", frozen=True)


class LayerRef(StrictModel):
    """A vector layer on disk: any format geopandas reads (GeoPackage, GeoParquet, shapefile...).

    ``path`` is resolved relative to the YAML file that names it; environment variables
    (``$VAR``, ``${VAR}``, ``${VAR:-default}``) are expanded by the loader.
    """

    path: Path
    layer: str | None = None
