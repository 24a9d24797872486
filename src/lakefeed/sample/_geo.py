"""Geometry of the invented Tallow Reservoir: lake polygon, areas of interest, sub-basin network.

Takes nothing but constants (the geometry is fixed: it does not depend on the seed, so the committed
GeoPackages in ``sample_geo/`` match every generated scenario) and returns GeoDataFrames in
EPSG:32632. :func:`write_geometry` writes them as GeoPackages with reproducible bytes.
Must not read files.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import shapely
from pyproj import Transformer
from shapely import affinity

from lakefeed.sample._io import fixed_gpkg_date

__all__ = ["CRS", "LAKE_LATLON", "NETWORK", "Geometry", "build_geometry", "write_geometry"]

#: Projected CRS of all sample geometry and scenes (UTM zone 32 north).
CRS = "EPSG:32632"
#: Approximate centre of the invented reservoir (latitude, longitude in degrees).
LAKE_LATLON = (48.1, 9.7)

#: Sub-basin id -> (downstream id, seed point east/north of the lake centre in metres).
#: SB01-SB03 drain directly into the lake; SB07 -> SB06 -> SB05 -> SB04 -> SB02 is the nested chain;
#: SB13 lies below the dam and drains elsewhere.
NETWORK: dict[str, tuple[str, tuple[float, float]]] = {
    "SB01": ("LAKE", (500.0, 3600.0)),
    "SB02": ("LAKE", (-5000.0, -200.0)),
    "SB03": ("LAKE", (800.0, -3900.0)),
    "SB04": ("SB02", (-8200.0, 600.0)),
    "SB05": ("SB04", (-11200.0, 1300.0)),
    "SB06": ("SB05", (-14200.0, 1800.0)),
    "SB07": ("SB06", (-17200.0, 2600.0)),
    "SB08": ("SB04", (-8300.0, -4200.0)),
    "SB09": ("SB05", (-10800.0, 5600.0)),
    "SB10": ("SB01", (-3200.0, 6200.0)),
    "SB11": ("SB03", (-3200.0, -5600.0)),
    "SB12": ("SB06", (-15000.0, -2600.0)),
    "SB13": ("OUTSIDE", (7000.0, -300.0)),
}
_ROTATION_DEG = 12.0


@dataclass(frozen=True)
class Geometry:
    """The scenario's vector layers (EPSG:32632) and the lake centre (easting, northing in m)."""

    lake: gpd.GeoDataFrame
    aois: gpd.GeoDataFrame
    subbasins: gpd.GeoDataFrame
    centre: tuple[float, float]


def _wobbly_ellipse(a: float, b: float, amps: list[float], phases: list[float], n: int = 240) -> shapely.Polygon:
    """Ellipse (semi-axes a, b in m) whose radius is modulated by harmonics 3, 4, ... (irregular outline)."""
    theta = np.linspace(0.0, 2.0 * np.pi, n, endpoint=False)
    r = a * b / np.hypot(b * np.cos(theta), a * np.sin(theta))
    k = np.arange(3, 3 + len(amps))[:, None]
    r = r * (1.0 + np.sum(np.asarray(amps)[:, None] * np.sin(k * theta + np.asarray(phases)[:, None]), axis=0))
    return shapely.Polygon(np.column_stack([r * np.cos(theta), r * np.sin(theta)]))


def _lake_local() -> tuple[shapely.Polygon, dict[str, shapely.Polygon]]:
    """Lake and AOIs in a local frame (metres, origin at the lake centre, x along the valley)."""
    body = _wobbly_ellipse(3000.0, 1250.0, [0.05, 0.035, 0.03, 0.02, 0.015], [0.3, 1.9, 4.0, 2.2, 5.1])
    arm = shapely.LineString([(-700.0, -900.0), (-1300.0, -1800.0), (-1900.0, -2500.0)]).buffer(420.0)
    lake = shapely.union(body, arm).intersection(shapely.box(-4000.0, -4000.0, 2700.0, 4000.0))
    lake = shapely.Polygon(lake.exterior).simplify(5.0)
    inner = lake.buffer(-40.0)
    aois = {
        "intake": shapely.Point(2350.0, 50.0).buffer(220.0).intersection(inner),
        "bathing_bay": shapely.Point(-1750.0, -2300.0).buffer(450.0).intersection(inner),
        "open_water": shapely.Point(-200.0, 150.0).buffer(550.0).intersection(inner),
    }
    return lake, aois


def _to_world(geom: shapely.Geometry, centre: tuple[float, float]) -> shapely.Geometry:
    geom = affinity.rotate(geom, _ROTATION_DEG, origin=(0.0, 0.0))
    return affinity.translate(geom, centre[0], centre[1])


def _round(geom: shapely.Geometry) -> shapely.Geometry:
    """Round vertices to the centimetre so files do not depend on floating-point noise."""
    return shapely.make_valid(shapely.set_precision(geom, 0.01))


def build_geometry() -> Geometry:
    """Build the lake, the three AOIs and the 13 sub-basins (EPSG:32632).

    Returns
    -------
    Geometry
        ``lake`` (field ``name``), ``aois`` (field ``aoi_id``), ``subbasins`` (fields ``subbasin_id``,
        ``downstream_id``), and the lake centre in metres.
    """
    to_utm = Transformer.from_crs("EPSG:4326", CRS, always_xy=True)
    e, n = to_utm.transform(LAKE_LATLON[1], LAKE_LATLON[0])
    centre = (round(e, -1), round(n, -1))
    lake_l, aois_l = _lake_local()
    lake = _round(_to_world(lake_l, centre))
    aois = {k: _round(_to_world(v, centre)) for k, v in aois_l.items()}

    catchment = _wobbly_ellipse(10500.0, 7200.0, [0.04, 0.05, 0.03, 0.02], [1.0, 2.5, 0.4, 3.3])
    catchment = affinity.translate(catchment, -7300.0, 300.0)
    catchment = shapely.union(catchment, lake_l.buffer(1400.0)).intersection(shapely.box(-30000, -30000, 3600, 30000))
    outside = _wobbly_ellipse(3800.0, 3000.0, [0.05, 0.03], [0.7, 2.0])
    outside = affinity.translate(outside, 6600.0, -200.0).difference(catchment)
    ids = sorted(NETWORK)
    seeds = shapely.MultiPoint([NETWORK[i][1] for i in ids if NETWORK[i][0] != "OUTSIDE"])
    cells = shapely.voronoi_polygons(seeds, extend_to=catchment.buffer(5000.0))
    region = catchment.difference(lake_l)
    geoms: dict[str, shapely.Geometry] = {}
    for cell in shapely.get_parts(cells):
        owner = next(i for i in ids if NETWORK[i][0] != "OUTSIDE" and cell.contains(shapely.Point(NETWORK[i][1])))
        part = cell.intersection(region)
        if isinstance(part, shapely.MultiPolygon):  # keep the piece holding the seed, give slivers to no one
            part = max(part.geoms, key=lambda p: p.area)
        geoms[owner] = part
    geoms["SB13"] = outside
    sub = gpd.GeoDataFrame(
        {"subbasin_id": ids, "downstream_id": [NETWORK[i][0] for i in ids]},
        geometry=[_round(_to_world(geoms[i], centre)) for i in ids],
        crs=CRS,
    )
    lake_gdf = gpd.GeoDataFrame({"name": ["Tallow Reservoir"]}, geometry=[lake], crs=CRS)
    aoi_ids = ["intake", "bathing_bay", "open_water"]
    aoi_gdf = gpd.GeoDataFrame({"aoi_id": aoi_ids}, geometry=[aois[k] for k in aoi_ids], crs=CRS)
    return Geometry(lake=lake_gdf, aois=aoi_gdf, subbasins=sub, centre=centre)


def write_geometry(geo: Geometry, folder: Path) -> dict[str, Path]:
    """Write ``lake.gpkg``, ``aois.gpkg`` and ``subbasins.gpkg`` into ``folder`` (reproducible bytes)."""
    folder.mkdir(parents=True, exist_ok=True)
    out = {}
    with fixed_gpkg_date():
        for name, gdf in (("lake", geo.lake), ("aois", geo.aois), ("subbasins", geo.subbasins)):
            path = folder / f"{name}.gpkg"
            if path.exists():
                path.unlink()
            gdf.to_file(path, driver="GPKG", layer=name, engine="pyogrio")
            out[name] = path
    return out
