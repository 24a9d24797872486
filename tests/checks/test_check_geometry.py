"""Vector layers (read_layer) and the geometry checks: CRS, empty layers, repairs, AOIs in the lake."""

from __future__ import annotations

import warnings
from pathlib import Path

import _mini
import geopandas as gpd
import pytest
import shapely
import yaml
from shapely.geometry import Polygon, box

from lakefeed.checks.geometry import AOI_OUTSIDE_TOLERANCE, check_aois_inside, check_geometry
from lakefeed.config import load_lake
from lakefeed.config._base import LayerRef
from lakefeed.exceptions import GeometryError, LakefeedWarning, SourceError
from lakefeed.sources.vectors import read_layer

BOWTIE = Polygon([(0, 0), (10, 10), (10, 0), (0, 10), (0, 0)])


def _gpkg(tmp_path: Path, gdf: gpd.GeoDataFrame, name: str = "layer.gpkg") -> Path:
    path = tmp_path / name
    _mini.write_layer(gdf, path)
    return path


def test_read_layer_missing_file_names_the_key(tmp_path: Path) -> None:
    with pytest.raises(SourceError, match=r"lake polygon \(config key 'lake.path'\): file not found"):
        read_layer(tmp_path / "nope.gpkg", what="lake polygon", key="lake.path")


@pytest.mark.filterwarnings("ignore:'crs' was not provided")
def test_layer_without_crs(tmp_path: Path) -> None:
    path = _gpkg(tmp_path, gpd.GeoDataFrame({"aoi_id": ["x"]}, geometry=[box(0, 0, 1, 1)]))
    with pytest.raises(SourceError, match="has no CRS; set it"):
        read_layer(path, what="areas of interest", id_field="aoi_id")


def test_empty_layer(tmp_path: Path) -> None:
    empty = gpd.GeoDataFrame({"aoi_id": []}, geometry=gpd.GeoSeries([], crs=_mini.CRS), crs=_mini.CRS)
    path = _gpkg(tmp_path, empty)
    with pytest.raises(SourceError, match=r"no features \(empty layer\)"):
        read_layer(path, what="areas of interest", id_field="aoi_id")


def test_self_intersecting_polygon_is_repaired_with_a_warning_naming_it(tmp_path: Path) -> None:
    gdf = gpd.GeoDataFrame({"aoi_id": ["ok", "bowtie"]}, geometry=[box(20, 20, 30, 30), BOWTIE], crs=_mini.CRS)
    path = _gpkg(tmp_path, gdf)
    with pytest.warns(LakefeedWarning, match=r"repaired invalid polygon\(s\) bowtie \(Self-intersection"):
        out = read_layer(path, what="areas of interest", id_field="aoi_id")
    assert shapely.is_valid(out.geometry.values).all()
    # the bow-tie becomes its two triangles: area 2 * 25 (hand computed)
    assert out.geometry.iloc[1].area == pytest.approx(50.0)


def test_ids_must_exist_and_be_unique(tmp_path: Path) -> None:
    gdf = gpd.GeoDataFrame({"aoi_id": ["a", "a"]}, geometry=[box(0, 0, 1, 1), box(2, 2, 3, 3)], crs=_mini.CRS)
    path = _gpkg(tmp_path, gdf)
    with pytest.raises(GeometryError, match=r"duplicate ids in 'aoi_id': \['a'\]"):
        read_layer(path, what="areas of interest", id_field="aoi_id")
    with pytest.raises(SourceError, match="has no field 'zone'"):
        read_layer(path, what="areas of interest", id_field="zone")


def test_points_are_not_polygons(tmp_path: Path) -> None:
    gdf = gpd.GeoDataFrame({"aoi_id": ["p"]}, geometry=[shapely.Point(0, 0)], crs=_mini.CRS)
    with pytest.raises(GeometryError, match=r"must hold polygons; features \['p'\] are \['Point'\]"):
        read_layer(_gpkg(tmp_path, gdf), what="areas of interest", id_field="aoi_id")


def test_several_layers_need_a_layer_name(tmp_path: Path) -> None:
    path = tmp_path / "two.gpkg"
    _mini.lake_layer().to_file(path, layer="lake", driver="GPKG")
    _mini.aoi_layer().to_file(path, layer="aois", driver="GPKG")
    with pytest.raises(SourceError, match=r"several layers \['lake', 'aois'\]|several layers \['aois', 'lake'\]"):
        read_layer(path, what="lake polygon")
    with pytest.raises(SourceError, match="has no layer 'shore'"):
        read_layer(LayerRef(path=path, layer="shore"), what="lake polygon")
    assert len(read_layer(LayerRef(path=path, layer="aois"), what="areas of interest", id_field="aoi_id")) == 3


def test_z_coordinates_are_dropped(tmp_path: Path) -> None:
    poly = Polygon([(0, 0, 5), (1, 0, 5), (1, 1, 5), (0, 0, 5)])
    path = _gpkg(tmp_path, gpd.GeoDataFrame({"n": [1]}, geometry=[poly], crs=_mini.CRS))
    assert not shapely.has_z(read_layer(path, what="lake polygon").geometry.values).any()


def test_aoi_outside_lake_names_aoi_and_share() -> None:
    lake = gpd.GeoDataFrame(geometry=[box(0, 0, 100, 100)], crs=_mini.CRS)
    aois = gpd.GeoDataFrame(
        {"aoi_id": ["inside", "half", "sliver"]},
        geometry=[box(10, 10, 20, 20), box(90, 0, 110, 10), box(0, 0, 10, 100.05)],
        crs=_mini.CRS,
    )
    res = check_aois_inside(aois, lake, id_field="aoi_id")
    assert len(res) == 1 and not res[0].ok
    # 'half': 10 x 10 m of its 20 x 10 m lie east of the lake -> 50.0 %, 0.01 ha (hand computed);
    # 'sliver' sticks out by 0.05 % of its area, below the tolerance
    assert res[0].message.startswith("AOI 'half': 50.0% of its area (0.01 ha) lies outside the lake polygon")
    assert 0.0005 < AOI_OUTSIDE_TOLERANCE


def test_aois_in_a_geographic_crs_are_compared_in_metres() -> None:
    lake = gpd.GeoDataFrame(geometry=[box(_mini.X0, _mini.Y0, _mini.X0 + 3000, _mini.Y0 + 2000)], crs=_mini.CRS)
    aois = _mini.aoi_layer().to_crs("EPSG:4326")
    (res,) = check_aois_inside(aois, lake.to_crs("EPSG:4326"), id_field="aoi_id")
    assert res.ok and "all 3 AOIs inside the lake" in res.message


def test_check_geometry_on_the_mini_scenario(mini: Path) -> None:
    results, layers = check_geometry(load_lake(mini))
    assert all(r.ok for r in results), [r.message for r in results if not r.ok]
    assert layers.network is not None and layers.network.catchment == ["a", "b", "c"]
    assert sorted(layers.catchment("subbasin_id")["subbasin_id"]) == ["a", "b", "c"]


def test_check_geometry_reports_a_repair_as_a_warning(mini: Path) -> None:
    root = mini.parent.parent
    aois = _mini.aoi_layer()
    aois.loc[0, "geometry"] = shapely.affinity.translate(
        shapely.affinity.scale(BOWTIE, 20, 20, origin=(0, 0)), _mini.X0 + 100, _mini.Y0 + 100
    )
    _mini.write_layer(aois, root / "geometry" / "aois.gpkg")
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # nothing must leak out of the check
        results, _ = check_geometry(load_lake(mini))
    warned = [r for r in results if r.status == "warning"]
    assert len(warned) == 1 and "intake (Self-intersection" in warned[0].message
    assert all(r.ok for r in results)


def test_lake_id_found_from_the_shore_when_not_configured(mini: Path) -> None:
    data = yaml.safe_load(mini.read_text())
    del data["subbasins"]["lake_id"]
    mini.write_text(yaml.safe_dump(data))
    results, layers = check_geometry(load_lake(mini))
    net = [r for r in results if r.name == "sub-basin network"]
    assert all(r.ok for r in results), [r.message for r in results]
    assert "direct inflows a, c by rule outlet_in_lake (lake id 'LAKE' found from the shore)" in net[0].message
    assert layers.catchment_ids("subbasin_id") == ["a", "b", "c"]


def test_numeric_ids_with_blank_downstream(mini: Path) -> None:
    """Integer ids and a float downstream column (NaN for 'drains elsewhere') must match as '1', '2'..."""
    root = mini.parent.parent
    sb = _mini.subbasin_layer()
    sb["subbasin_id"] = [1, 2, 3, 4]
    sb["downstream_id"] = [0.0, 1.0, 0.0, float("nan")]
    _mini.write_layer(sb, root / "geometry" / "subbasins.gpkg")
    data = yaml.safe_load(mini.read_text())
    data["subbasins"].update(lake_id="0", outside_ids=[])
    mini.write_text(yaml.safe_dump(data))
    results, layers = check_geometry(load_lake(mini))
    assert all(r.ok for r in results), [r.message for r in results if not r.ok]
    assert layers.catchment_ids("subbasin_id") == ["1", "2", "3"]


def test_whole_float_ids_become_integer_strings(tmp_path: Path) -> None:
    gdf = gpd.GeoDataFrame({"sid": [1.0, 2.0]}, geometry=[box(0, 0, 1, 1), box(2, 2, 3, 3)], crs=_mini.CRS)
    assert read_layer(_gpkg(tmp_path, gdf), what="sub-basins", id_field="sid")["sid"].tolist() == ["1", "2"]
