"""Exact zone weights of a grid, cached on disk so later runs and other files on the same grid reuse them.

Takes: zones (GeoDataFrame with ``zone`` and geometry in the grid's CRS) and a :class:`Grid`. Gives:
:class:`~lakefeed.geometry.weights.ZoneWeights` and whether they came from the cache. The cache file name is
the grid signature plus a hash of the zone geometries and the partial-coverage setting; a file is written
aside and moved into place. Must not: compute weights any other way than :func:`zone_weights`.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from lakefeed.geometry.weights import ZoneWeights, zone_hash, zone_weights
from lakefeed.sources.grid_model import Grid

if TYPE_CHECKING:
    import geopandas as gpd

    from lakefeed.config import LakeConfig, LayerRef

__all__ = ["get_weights", "lake_zones"]


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


def lake_zones(lake: LakeConfig, crs: str) -> tuple[gpd.GeoDataFrame, list[LayerRef | None]]:
    """The lake's zones in ``crs`` as its ``zones`` options ask (lake surface, AOIs, catchment, sub-basins), read
    from its layers, and the layers read (None for one the options leave out) for the stage's provenance."""
    from lakefeed.geometry.zones import build_zones
    from lakefeed.sources.vectors import read_layer

    lake_g = read_layer(lake.lake, what="lake polygon")
    aois = read_layer(lake.aois, what="areas of interest", id_field=lake.aois.id_field) if lake.zones.aois else None
    subs = None
    if lake.zones.catchment or lake.zones.subbasins:
        subs = read_layer(lake.subbasins, what="sub-basins", id_field=lake.subbasins.id_field)
    zones = build_zones(
        lake_g,
        aois=aois,
        aoi_id_field=lake.aois.id_field,
        subbasins=subs,
        subbasin_layer=lake.subbasins,
        options=lake.zones,
        crs=crs,
    )
    layers = [lake.lake, lake.aois if aois is not None else None, lake.subbasins if subs is not None else None]
    return zones, layers
