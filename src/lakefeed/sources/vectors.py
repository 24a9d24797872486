"""Read vector layers (lake, AOIs, sub-basins) with the checks every stage relies on."""

from __future__ import annotations

import warnings
from pathlib import Path

import geopandas as gpd
import shapely

from lakefeed.config._base import LayerRef
from lakefeed.exceptions import GeometryError, LakefeedWarning, SourceError

__all__ = ["read_layer"]


def read_layer(ref: LayerRef | str | Path, *, what: str, id_field: str | None = None) -> gpd.GeoDataFrame:
    """Read a polygon layer, checking it is usable.

    Parameters
    ----------
    ref
        Layer reference (path and optional layer name) or a path.
    what
        What the layer is, for messages ("lake polygon", "areas of interest", ...).
    id_field
        If given, the field must exist, be non-null and unique; it is returned as ``str``.

    Returns
    -------
    GeoDataFrame in the layer's own CRS. Invalid polygons (e.g. self-intersecting) are
    repaired with ``shapely.make_valid`` and a :class:`LakefeedWarning` naming the feature.

    Raises
    ------
    SourceError
        Missing or unreadable file; layer without CRS; empty layer; missing id field.
    GeometryError
        Non-polygon geometries; duplicate or null ids.
    """
    path = Path(ref.path if isinstance(ref, LayerRef) else ref)
    layer = ref.layer if isinstance(ref, LayerRef) else None
    if not path.exists():
        raise SourceError(f"{what}: file not found: {path}; check the path in the lake config")
    try:
        if path.suffix.lower() in {".parquet", ".geoparquet"}:
            gdf = gpd.read_parquet(path)
        else:
            gdf = gpd.read_file(path, layer=layer) if layer else gpd.read_file(path)
    except Exception as err:  # pyogrio/fiona raise many types
        raise SourceError(f"{what}: cannot read {path}: {err}") from err
    if gdf.crs is None:
        raise SourceError(
            f"{what}: {path} has no CRS; set it (e.g. with geopandas "
            "GeoDataFrame.set_crs('EPSG:4326') then to_file) and try again"
        )
    if len(gdf) == 0:
        raise SourceError(f"{what}: {path} has no features (empty layer)")
    gdf = gdf[~gdf.geometry.isna()].copy()
    kinds = set(gdf.geometry.geom_type)
    if not kinds <= {"Polygon", "MultiPolygon"}:
        raise GeometryError(f"{what}: {path} must hold polygons; found {sorted(kinds)}")
    if id_field is not None:
        if id_field not in gdf.columns:
            raise SourceError(
                f"{what}: {path} has no field {id_field!r}; fields are {list(gdf.columns.drop('geometry'))}; "
                "set the id field name in the config"
            )
        if gdf[id_field].isna().any():
            raise GeometryError(f"{what}: {path}: field {id_field!r} has empty values")
        gdf[id_field] = gdf[id_field].astype(str)
        dup = gdf[id_field][gdf[id_field].duplicated()].unique().tolist()
        if dup:
            raise GeometryError(f"{what}: {path}: duplicate ids in {id_field!r}: {dup}")
    invalid = ~shapely.is_valid(gdf.geometry.values)
    if invalid.any():
        labels = gdf.loc[invalid, id_field].tolist() if id_field else gdf.index[invalid].tolist()
        reasons = [shapely.is_valid_reason(g) for g in gdf.geometry.values[invalid]]
        warnings.warn(
            f"{what}: {path}: repaired invalid polygon(s) {labels} ({'; '.join(reasons)}) with make_valid",
            LakefeedWarning,
            stacklevel=2,
        )
        fixed = shapely.make_valid(gdf.geometry.values[invalid])
        # keep only the polygonal part of the repair
        fixed = [
            shapely.union_all([p for p in shapely.get_parts(g) if p.geom_type in ("Polygon", "MultiPolygon")])
            for g in fixed
        ]
        gdf.loc[invalid, gdf.geometry.name] = fixed
    return gdf
