"""Read vector layers (lake, AOIs, sub-basins) with the checks every stage relies on.

Takes a :class:`~lakefeed.config.LayerRef` (or a path); returns a GeoDataFrame in the
layer's own CRS, 2-D polygons only, with a clean string id field when one is asked for.
Only this module knows vector file formats. It must not reproject, dissolve or compute.

Invalid polygons (self-intersecting "bow-ties", rings touching themselves...) are
**repaired, not rejected**: ``shapely.make_valid`` rebuilds them and a
:class:`~lakefeed.exceptions.LakefeedWarning` names each repaired feature and the reason
shapely gives. We repair because a drawing slip at one vertex is common and the repaired
shape is almost always what was meant; the warning (and ``lakefeed check``) makes sure the
user sees it. A repair that leaves no polygonal area is an error.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import shapely

from lakefeed.config import LayerRef
from lakefeed.exceptions import GeometryError, LakefeedWarning, SourceError
from lakefeed.sources.locations import readable_path

__all__ = ["read_layer"]

_POLYGONAL = ("Polygon", "MultiPolygon")


def _where(what: str, key: str | None) -> str:
    return f"{what} (config key {key!r})" if key else what


def _spatial_layers(path: Path) -> list[str]:
    """Names of the layers of ``path`` that hold geometries (empty list if it cannot be listed)."""
    try:
        import pyogrio

        layers = pyogrio.list_layers(path)
    except Exception:  # not an OGR data source with layers (e.g. GeoParquet)
        return []
    return [str(name) for name, kind in layers if kind is not None]


def _open(path: Path, layer: str | None, where: str) -> gpd.GeoDataFrame:
    if path.suffix.lower() in {".parquet", ".geoparquet"}:
        try:
            return gpd.read_parquet(path)
        except Exception as err:
            raise SourceError(f"{where}: cannot read {path} as GeoParquet: {err}") from err
    names = _spatial_layers(path)
    if layer is not None and names and layer not in names:
        raise SourceError(f"{where}: {path} has no layer {layer!r}; its layers are {names}; fix 'layer' in the config")
    if layer is None and len(names) > 1:
        raise SourceError(
            f"{where}: {path} holds several layers {names}; say which one with 'layer' next to 'path' in the config"
        )
    try:
        return gpd.read_file(path, layer=layer) if layer else gpd.read_file(path)
    except Exception as err:  # pyogrio/fiona raise many types
        raise SourceError(f"{where}: cannot read {path}: {err}; is it a vector file geopandas can read?") from err


def _labels(gdf: gpd.GeoDataFrame, mask: np.ndarray, id_field: str | None) -> list[str]:
    if id_field is not None and id_field in gdf.columns:
        return [str(v) for v in gdf.loc[mask, id_field]]
    return [f"feature #{i}" for i in np.flatnonzero(mask)]


def _repair(gdf: gpd.GeoDataFrame, where: str, path: Path, id_field: str | None) -> gpd.GeoDataFrame:
    geoms = gdf.geometry.values
    invalid = ~shapely.is_valid(geoms)
    if not invalid.any():
        return gdf
    labels = _labels(gdf, invalid, id_field)
    reasons = [shapely.is_valid_reason(g) for g in geoms[invalid]]
    fixed = []
    for label, g in zip(labels, shapely.make_valid(geoms[invalid]), strict=True):
        parts = [p for p in shapely.get_parts(g) if p.geom_type in _POLYGONAL and not p.is_empty]
        if not parts:
            raise GeometryError(f"{where}: {path}: feature {label} is invalid and has no area once repaired; redraw it")
        fixed.append(shapely.union_all(parts))
    warnings.warn(
        f"{where}: {path}: repaired invalid polygon(s) "
        + "; ".join(f"{lab} ({why})" for lab, why in zip(labels, reasons, strict=True))
        + " with shapely make_valid; check the result and fix the source file to silence this",
        LakefeedWarning,
        stacklevel=3,
    )
    gdf = gdf.copy()
    gdf.loc[invalid, gdf.geometry.name] = fixed
    return gdf


def read_layer(
    ref: LayerRef | str | Path, *, what: str, id_field: str | None = None, key: str | None = None
) -> gpd.GeoDataFrame:
    """Read a polygon layer, checking it is usable.

    Parameters
    ----------
    ref
        Layer reference (path and optional layer name) or a path.
    what
        What the layer is, for messages ("lake polygon", "areas of interest", ...).
    id_field
        If given, the field must exist, be non-null and unique; it is returned as ``str``
        (whole floats such as ``3.0`` become ``'3'``; surrounding blanks are dropped).
    key
        The config key that points to the layer (e.g. ``"aois.path"``), named in messages.

    Returns
    -------
    GeoDataFrame in the layer's own CRS, 2-D (Z dropped). Features without geometry are
    dropped with a :class:`LakefeedWarning`. Invalid polygons (e.g. self-intersecting) are
    repaired with ``shapely.make_valid`` and a :class:`LakefeedWarning` naming the feature.

    Raises
    ------
    SourceError
        Missing or unreadable file; unknown or ambiguous layer; layer without CRS; empty
        layer; missing id field.
    GeometryError
        Non-polygon geometries; duplicate or null ids; a polygon with no area after repair.
    """
    layer = ref.layer if isinstance(ref, LayerRef) else None
    where = _where(what, key)
    path = readable_path(ref.path if isinstance(ref, LayerRef) else ref, what=where)
    if not path.exists():
        raise SourceError(f"{where}: file not found: {path}; check the path in the lake config")
    gdf = _open(path, layer, where)
    if gdf.crs is None:
        raise SourceError(
            f"{where}: {path} has no CRS; set it (e.g. with geopandas "
            "GeoDataFrame.set_crs('EPSG:32632') then to_file) and try again"
        )
    if len(gdf) == 0:
        raise SourceError(f"{where}: {path} has no features (empty layer); draw at least one polygon")
    if id_field is not None:
        if id_field not in gdf.columns:
            raise SourceError(
                f"{where}: {path} has no field {id_field!r}; fields are {list(gdf.columns.drop(gdf.geometry.name))}; "
                "set the id field name in the config"
            )
        if gdf[id_field].isna().any():
            raise GeometryError(
                f"{where}: {path}: field {id_field!r} is empty for features "
                f"{np.flatnonzero(gdf[id_field].isna().to_numpy()).tolist()}; give every feature an id"
            )
        ids = gdf[id_field]
        if ids.dtype.kind == "f" and bool((ids == ids.round()).all()):
            ids = ids.astype("int64")  # 3.0 (a REAL column) is the id '3', as in the downstream fields
        gdf[id_field] = ids.astype(str).str.strip()
        dup = gdf[id_field][gdf[id_field].duplicated()].unique().tolist()
        if dup:
            raise GeometryError(f"{where}: {path}: duplicate ids in {id_field!r}: {dup}; ids must be unique")
    missing = (gdf.geometry.isna() | gdf.geometry.is_empty).to_numpy()
    if missing.all():
        raise SourceError(f"{where}: {path}: no feature has a geometry (empty layer)")
    if missing.any():
        warnings.warn(
            f"{where}: {path}: dropped feature(s) without geometry: {_labels(gdf, missing, id_field)}",
            LakefeedWarning,
            stacklevel=2,
        )
        gdf = gdf[~missing].copy()
    kinds = gdf.geometry.geom_type.to_numpy()
    wrong = ~np.isin(kinds, _POLYGONAL)
    if wrong.any():
        raise GeometryError(
            f"{where}: {path} must hold polygons; features {_labels(gdf, wrong, id_field)} are "
            f"{sorted(set(kinds[wrong]))}"
        )
    if shapely.has_z(gdf.geometry.values).any():
        gdf = gdf.copy()
        gdf[gdf.geometry.name] = gpd.GeoSeries(shapely.force_2d(gdf.geometry.values), index=gdf.index, crs=gdf.crs)
    return _repair(gdf, where, path, id_field)
