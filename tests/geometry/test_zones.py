"""Zones of a lake: names, semantic CRS comparison, reprojection, catchment from the sub-basin network."""

from __future__ import annotations

import geopandas as gpd
import pytest
import shapely
from pyproj import CRS

from lakefeed.config.lake import SubbasinLayer, ZoneOptions
from lakefeed.exceptions import GeometryError
from lakefeed.geometry.zones import build_zones, same_crs, to_crs, zone_latitudes

UTM = "EPSG:32632"
X0, Y0 = 500_000.0, 5_600_000.0


def _layers():
    lake = gpd.GeoDataFrame({"name": ["L"]}, geometry=[shapely.box(X0, Y0, X0 + 2000, Y0 + 1000)], crs=UTM)
    aois = gpd.GeoDataFrame(
        {"aoi_id": ["intake", "bay"]},
        geometry=[
            shapely.box(X0 + 100, Y0 + 100, X0 + 400, Y0 + 400),
            shapely.box(X0 + 1500, Y0 + 500, X0 + 1900, Y0 + 900),
        ],
        crs=UTM,
    )
    subs = gpd.GeoDataFrame(
        {"subbasin_id": ["S1", "S2", "S3", "S4"], "downstream_id": ["LAKE", "S1", "LAKE", "OUTSIDE"]},
        geometry=[
            shapely.box(X0 - 5000, Y0 - 2000, X0 + 1000, Y0),
            shapely.box(X0 - 5000, Y0 - 6000, X0 + 1000, Y0 - 2000),
            shapely.box(X0 + 1000, Y0 - 2000, X0 + 6000, Y0),
            shapely.box(X0 + 6000, Y0 - 2000, X0 + 9000, Y0),
        ],
        crs=UTM,
    )
    return lake, aois, subs


def test_crs_compared_semantically_not_by_wkt_text():
    """WKT1 vs WKT2 of the same CRS raised false mismatches elsewhere (exactextract#159)."""
    wkt1 = CRS(UTM).to_wkt(version="WKT1_GDAL")
    wkt2 = CRS(UTM).to_wkt(version="WKT2_2019")
    assert wkt1 != wkt2
    assert same_crs(wkt1, wkt2)
    assert same_crs("EPSG:4326", "OGC:CRS84")  # axis order aside, the same datum and units
    assert not same_crs("EPSG:4326", UTM)


def test_build_zones_names_and_reprojection():
    lake, aois, subs = _layers()
    zones = build_zones(
        lake,
        aois=aois,
        subbasins=subs,
        subbasin_layer=SubbasinLayer(path="x", lake_id="LAKE"),
        options=ZoneOptions(subbasins=True),
        crs="EPSG:4326",
    )
    assert list(zones["zone"]) == [
        "lake",
        "aoi:intake",
        "aoi:bay",
        "catchment",
        "subbasin:S1",
        "subbasin:S2",
        "subbasin:S3",
    ]
    assert same_crs(zones.crs, "EPSG:4326")
    catchment = zones.set_index("zone").geometry["catchment"]
    s4 = to_crs(subs[subs.subbasin_id == "S4"], "EPSG:4326").geometry.values[0]
    assert catchment.intersection(s4).area < 1e-12  # S4 drains elsewhere
    lats = zone_latitudes(zones)
    assert 50 < lats["lake"] < 51


def test_same_crs_is_not_reprojected():
    lake, _, _ = _layers()
    wkt1 = CRS(UTM).to_wkt(version="WKT1_GDAL")
    out = to_crs(lake.set_crs(wkt1, allow_override=True), UTM)
    assert out.geometry.values[0].equals(lake.geometry.values[0])


def test_no_zones_or_missing_crs_are_errors():
    lake, _, _ = _layers()
    with pytest.raises(GeometryError, match="no zones"):
        build_zones(lake, options=ZoneOptions(lake_surface=False, aois=False, catchment=False))
    with pytest.raises(GeometryError, match="no CRS"):
        to_crs(gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 1, 1)]), "EPSG:4326")
