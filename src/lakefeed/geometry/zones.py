"""Named zones whose weather drivers are extracted: lake surface, AOIs, catchment, sub-basins.

Takes the already read layers (GeoDataFrames with a CRS: lake polygon(s), AOIs, sub-basins)
and the lake's zone options. Returns a GeoDataFrame with columns ``zone`` (``lake``,
``aoi:<id>``, ``catchment``, ``subbasin:<id>``) and ``geometry`` in the requested CRS
(reprojected only when the CRS differs semantically, compared with pyproj's ``CRS.equals``,
not by WKT text). The catchment is traced with :func:`lakefeed.geometry.network.trace_catchment`.

Must not: read files (the stage reads the layers), touch the grid.
"""

from __future__ import annotations

from collections.abc import Sequence

import geopandas as gpd
import numpy as np
import shapely
from pyproj import CRS

from lakefeed.config.lake import SubbasinLayer, ZoneOptions
from lakefeed.exceptions import GeometryError

__all__ = ["build_zones", "same_crs", "shore_buffered", "to_crs", "zone_latitudes"]


def same_crs(a: object, b: object) -> bool:
    """True when two CRS definitions mean the same CRS (axis order ignored), whatever their text form."""
    if a is None or b is None:
        return False
    return CRS.from_user_input(a).equals(CRS.from_user_input(b), ignore_axis_order=True)


def to_crs(frame: gpd.GeoDataFrame, crs: object, *, what: str = "layer") -> gpd.GeoDataFrame:
    """Reproject ``frame`` to ``crs`` unless it already is in it (semantic comparison)."""
    if frame.crs is None:
        raise GeometryError(f"{what}: no CRS; set it on the layer")
    if same_crs(frame.crs, crs):
        return frame.set_crs(crs, allow_override=True)
    return frame.to_crs(crs)


def _dissolve(frame: gpd.GeoDataFrame) -> shapely.Geometry:
    return shapely.union_all(np.asarray(frame.geometry.values))


def build_zones(
    lake: gpd.GeoDataFrame,
    *,
    aois: gpd.GeoDataFrame | None = None,
    aoi_id_field: str = "aoi_id",
    subbasins: gpd.GeoDataFrame | None = None,
    subbasin_layer: SubbasinLayer | None = None,
    options: ZoneOptions | None = None,
    crs: object = "EPSG:4326",
    extra: Sequence[tuple[str, shapely.Geometry]] = (),
) -> gpd.GeoDataFrame:
    """Zones of one lake as a GeoDataFrame (``zone``, ``geometry``) in ``crs``.

    Parameters
    ----------
    lake
        Lake polygon(s) (dissolved into one zone ``lake``).
    aois, aoi_id_field
        Areas of interest, one zone ``aoi:<id>`` each.
    subbasins, subbasin_layer
        Sub-basin network and its field names; gives ``catchment`` (traced upstream of the lake)
        and, with ``options.subbasins``, one ``subbasin:<id>`` per catchment sub-basin.
    options
        Which zones to build (default: lake, AOIs, catchment).
    crs
        Output CRS (the grid's; default geographic WGS84).
    extra
        Additional (name, geometry) zones already in ``crs``.
    """
    opts = options or ZoneOptions()
    names: list[str] = []
    geoms: list[shapely.Geometry] = []
    lake_g = to_crs(lake, crs, what="lake polygon")
    if opts.lake_surface:
        names.append("lake")
        geoms.append(_dissolve(lake_g))
    if opts.aois and aois is not None and len(aois):
        if aoi_id_field not in aois.columns:
            raise GeometryError(f"areas of interest: no field {aoi_id_field!r}; set aois.id_field in the lake config")
        a = to_crs(aois, crs, what="areas of interest")
        names.extend(f"aoi:{i}" for i in a[aoi_id_field].astype(str))
        geoms.extend(a.geometry.values)
    if (opts.catchment or opts.subbasins) and subbasins is not None and len(subbasins):
        layer = subbasin_layer or SubbasinLayer(path="subbasins")  # type: ignore[arg-type]
        from lakefeed.geometry.network import trace_configured_catchment

        catch = trace_configured_catchment(subbasins, lake, layer)
        if opts.catchment:
            c = gpd.GeoDataFrame(geometry=[catch.polygon], crs=subbasins.crs)
            names.append("catchment")
            geoms.append(to_crs(c, crs, what="catchment").geometry.values[0])
        if opts.subbasins:
            ids = subbasins[layer.id_field].astype(str)
            sel = to_crs(subbasins[ids.isin(catch.subbasin_ids).to_numpy()], crs, what="sub-basins")
            names.extend(f"subbasin:{i}" for i in sel[layer.id_field].astype(str))
            geoms.extend(sel.geometry.values)
    for name, g in extra:
        names.append(name)
        geoms.append(g)
    if not names:
        raise GeometryError("no zones: enable at least one of zones.lake_surface/aois/catchment in the lake config")
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise GeometryError(f"duplicate zone names {dup}; zone ids must be unique")
    return gpd.GeoDataFrame({"zone": names}, geometry=list(geoms), crs=crs)


def zone_latitudes(zones: gpd.GeoDataFrame) -> dict[str, float]:
    """Latitude (degrees) of each zone's representative point (zones in a geographic CRS)."""
    pts = shapely.point_on_surface(np.asarray(zones.geometry.values))
    return dict(zip(zones["zone"].astype(str), shapely.get_y(pts).astype(float), strict=True))


def shore_buffered(aois: gpd.GeoSeries, lake: shapely.Geometry | None, buffer_m: float) -> gpd.GeoSeries:
    """AOIs shrunk by an inward shoreline buffer.

    Parameters
    ----------
    aois
        AOI polygons in a projected CRS whose unit is the metre.
    lake
        Lake polygon in the same CRS: the buffer moves the shoreline inward by ``buffer_m`` and
        each AOI is intersected with what is left. None: each AOI is buffered inward from its own
        boundary.
    buffer_m
        Buffer distance in metres (>= 0).

    Returns
    -------
    GeoSeries with the same index and CRS; an AOI wholly inside the buffer becomes empty.
    """
    if buffer_m < 0:
        raise ValueError(f"shore buffer must be >= 0 m; got {buffer_m}")
    if buffer_m == 0:
        return aois.copy()
    if lake is None:
        return aois.buffer(-buffer_m)
    inner = shapely.buffer(lake, -buffer_m)
    return aois.intersection(inner)
