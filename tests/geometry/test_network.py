"""Tests of lakefeed.geometry.network: direct inflows, upstream tracing, area, bad networks."""

from __future__ import annotations

import geopandas as gpd
import networkx as nx
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from shapely.geometry import Point, box

from lakefeed.exceptions import GeometryError, LakefeedWarning
from lakefeed.geometry.network import trace_catchment

X0, Y0, KM = 500_000.0, 5_500_000.0, 1000.0  # near the UTM 32N central meridian, about 49.6 N
CRS = "EPSG:32632"


def cell(i: float, j: float, w: float = 1.0) -> object:
    """A square of w x w cells of 10 km, lower-left corner at cell (i, j)."""
    return box(X0 + 10 * KM * i, Y0 + 10 * KM * j, X0 + 10 * KM * (i + w), Y0 + 10 * KM * (j + 1))


# Hand-built network. Lake = cell (1, 0). A and B touch it; C, D upstream of A; E upstream of B;
# F drains out of the network; G drains into F.
NETWORK = {
    "A": ((0, 0), "LAKE"),
    "B": ((2, 0), "LAKE"),
    "C": ((0, 1), "A"),
    "D": ((-1, 1), "C"),
    "E": ((2, 1), "B"),
    "F": ((4, 0), "OUTSIDE"),
    "G": ((5, 0), "F"),
}


def layer(network: dict = NETWORK, overrides: dict | None = None) -> gpd.GeoDataFrame:
    net = {**network, **(overrides or {})}
    return gpd.GeoDataFrame(
        {"subbasin_id": list(net), "downstream_id": [v[1] for v in net.values()]},
        geometry=[cell(*v[0]) for v in net.values()],
        crs=CRS,
    )


@pytest.fixture
def lake() -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame({"name": ["lake"]}, geometry=[cell(1, 0)], crs=CRS)


def trace(subbasins: gpd.GeoDataFrame, lake: gpd.GeoDataFrame, **kw: object):
    return trace_catchment(subbasins, lake, id_field="subbasin_id", downstream_field="downstream_id", **kw)


def test_upstream_matches_networkx_ancestors(lake: gpd.GeoDataFrame) -> None:
    # Reference: networkx.ancestors on the same network built by hand, independently of the module.
    ref = nx.DiGraph([(k, v[1]) for k, v in NETWORK.items()])
    expected = tuple(sorted(nx.ancestors(ref, "LAKE")))
    got = trace(layer(), lake, lake_id="LAKE")
    assert got.subbasin_ids == expected == ("A", "B", "C", "D", "E")
    assert got.direct_inflows == ("A", "B")
    assert got.rule == "lake_id"
    assert got.n_subbasins == 5
    assert got.upstream_of("A") == tuple(sorted(nx.ancestors(ref, "A"))) == ("C", "D")
    assert got.polygon.equals(cell(0, 0).union(cell(2, 0)).union(cell(0, 1)).union(cell(-1, 1)).union(cell(2, 1)))


def test_area_is_geodesic(lake: gpd.GeoDataFrame) -> None:
    got = trace(layer(), lake, lake_id="LAKE")
    # Reference: the same polygon's area in an equal-area projection (LAEA centred on it); 5 x 100 km2 on the grid,
    # the UTM scale factor (0.9996 at the central meridian) makes the true area about 0.08 % larger.
    laea = "+proj=laea +lat_0=49.6 +lon_0=9 +ellps=WGS84"
    ref = gpd.GeoSeries([got.polygon], crs=CRS).to_crs(laea).area.iloc[0] / 1e6
    assert got.area_km2 == pytest.approx(ref, rel=1e-4)
    assert got.area_km2 == pytest.approx(500.0, rel=2e-3)


def test_outlet_rule_recognises_the_lake_id(lake: gpd.GeoDataFrame) -> None:
    got = trace(layer(), lake)  # no lake_id: polygons touching the lake find A and B; their downstream is LAKE
    assert got.rule == "outlet_in_lake"
    assert got.lake_node == "LAKE"
    assert got.direct_inflows == ("A", "B")
    assert got.subbasin_ids == ("A", "B", "C", "D", "E")


def test_outlet_rule_with_null_downstream(lake: gpd.GeoDataFrame) -> None:
    net = {k: (v[0], None if v[1] == "LAKE" else v[1]) for k, v in NETWORK.items()}
    got = trace(layer(net), lake)
    assert got.direct_inflows == ("A", "B")
    assert got.subbasin_ids == ("A", "B", "C", "D", "E")


def test_outlet_points(lake: gpd.GeoDataFrame) -> None:
    # Only A's outlet point lies in the lake; B's lies on its far side.
    net = {k: (v[0], None if v[1] == "LAKE" else v[1]) for k, v in NETWORK.items()}
    outlets = gpd.GeoSeries(
        [Point(X0 + 10 * KM + 5, Y0 + 5 * KM), Point(X0 + 30 * KM, Y0 + 5 * KM)], index=["A", "B"], crs=CRS
    )
    got = trace(layer(net), lake, outlets=outlets)
    assert got.direct_inflows == ("A",)
    assert got.subbasin_ids == ("A", "C", "D")


def test_config_rule(lake: gpd.GeoDataFrame) -> None:
    with pytest.warns(LakefeedWarning, match=r"\['B'\] drain into the lake"):
        got = trace(layer(), lake, direct_inflows=["A"])
    assert got.rule == "config"
    assert got.direct_inflows == ("A",)
    assert got.subbasin_ids == ("A", "C", "D")


def test_overlapping_and_crs(lake: gpd.GeoDataFrame) -> None:
    net = dict(NETWORK, A=((0, 0), "LAKE"))
    sub = layer(net)
    sub.loc[0, "geometry"] = cell(0, 0, w=1.2)  # A reaches 2 km into the lake
    got = trace(sub, lake.to_crs("EPSG:4326"), lake_id="LAKE")  # lake in another CRS: reprojected
    assert got.overlapping == ("A",)
    assert got.crs.equals(CRS)


def test_geoparquet_layer(tmp_path, lake: gpd.GeoDataFrame) -> None:
    from lakefeed.sources.vectors import read_layer

    layer().to_parquet(tmp_path / "subbasins.parquet")
    sub = read_layer(tmp_path / "subbasins.parquet", what="sub-basins", id_field="subbasin_id")
    assert trace(sub, lake, lake_id="LAKE").subbasin_ids == ("A", "B", "C", "D", "E")


# ---------------------------------------------------------------- bad networks


def test_cycle_names_ids(lake: gpd.GeoDataFrame) -> None:
    with pytest.raises(GeometryError, match=r"cycle.*C -> D"):
        trace(layer(overrides={"C": ((0, 1), "D"), "D": ((-1, 1), "C")}), lake, lake_id="LAKE")


def test_dangling_names_ids(lake: gpd.GeoDataFrame) -> None:
    with pytest.raises(GeometryError, match=r"dangling.*E -> X9"):
        trace(layer(overrides={"E": ((2, 1), "X9")}), lake, lake_id="LAKE")
    with pytest.raises(GeometryError, match=r"dangling.*E -> X9"):
        trace(layer(overrides={"E": ((2, 1), "X9")}), lake)


def test_duplicate_ids(lake: gpd.GeoDataFrame) -> None:
    sub = layer()
    sub.loc[6, "subbasin_id"] = "F"
    with pytest.raises(GeometryError, match=r"duplicate.*\['F'\]"):
        trace(sub, lake, lake_id="LAKE")


def test_no_outlet_reaches_the_lake(lake: gpd.GeoDataFrame) -> None:
    with pytest.raises(GeometryError, match=r"LAKE2.*no outlet reaches the lake"):
        trace(layer(), lake, lake_id="LAKE2")
    far = gpd.GeoDataFrame(geometry=[cell(10, 10)], crs=CRS)
    with pytest.raises(GeometryError, match=r"no sub-basin outlet reaches the lake"):
        trace(layer(), far)


def test_listed_inflow_draining_elsewhere(lake: gpd.GeoDataFrame) -> None:
    with pytest.raises(GeometryError, match=r"C -> A"):
        trace(layer(), lake, direct_inflows=["A", "C"])
    with pytest.raises(GeometryError, match=r"not in the sub-basin layer: \['Z'\]"):
        trace(layer(), lake, direct_inflows=["Z"])


def test_missing_field(lake: gpd.GeoDataFrame) -> None:
    with pytest.raises(GeometryError, match="no field 'down'"):
        trace_catchment(layer(), lake, id_field="subbasin_id", downstream_field="down")


# ---------------------------------------------------------------- property


@settings(max_examples=40, deadline=None)
@given(st.lists(st.integers(min_value=-1, max_value=1_000), min_size=1, max_size=30))
def test_random_trees_match_ancestors(parents: list[int]) -> None:
    """Random drainage trees: sub-basin i drains into an earlier one or (-1) into the lake."""
    ids = [f"s{i}" for i in range(len(parents))]
    down = ["LAKE" if i == 0 or p < 0 else ids[p % i] for i, p in enumerate(parents)]
    sub = gpd.GeoDataFrame(
        {"subbasin_id": ids, "downstream_id": down},
        geometry=[cell(i, 5) for i in range(len(ids))],
        crs=CRS,
    )
    lake_gdf = gpd.GeoDataFrame(geometry=[cell(0, 0)], crs=CRS)
    got = trace(sub, lake_gdf, lake_id="LAKE")
    ref = nx.DiGraph(list(zip(ids, down, strict=True)))
    assert set(got.subbasin_ids) == nx.ancestors(ref, "LAKE") == set(ids)
    assert set(got.direct_inflows) == {s for s, d in zip(ids, down, strict=True) if d == "LAKE"}


def test_cycle_is_shown_in_drainage_order_with_field_and_layer(lake: gpd.GeoDataFrame) -> None:
    """Regression: the cycle was printed as sorted ids (A -> C -> D for A -> D -> C -> A), without field or file."""
    net = layer(overrides={"A": ((0, 0), "D"), "C": ((0, 1), "A"), "D": ((-1, 1), "C")})
    with pytest.raises(GeometryError) as err:
        trace(net, lake, lake_id="LAKE", where="sub-basin layer net.gpkg")
    msg = str(err.value)
    assert "A -> D -> C -> A" in msg and "'downstream_id'" in msg and msg.startswith("sub-basin layer net.gpkg")


# The lake lies in its own sub-basin L (cell (1, 0), the lake's cell): A and B drain into L, L drains out of the
# layer ("RIVER", not a sub-basin and not an outside marker: the lake's outflow is not followed).
OWN = {**{k: v for k, v in NETWORK.items() if k not in {"A", "B"}}, "L": ((1, 0), "RIVER")}
OWN.update(A=((0, 0), "L"), B=((2, 0), "L"))


@pytest.mark.parametrize(
    ("kw", "rule"),
    [
        ({"lake_id": "L"}, "lake_subbasin"),
        ({}, "lake_subbasin"),
        ({"lake_id": "L", "direct_inflows": ["A", "B"]}, "config"),
    ],
)
def test_lake_in_its_own_subbasin(lake: gpd.GeoDataFrame, kw: dict, rule: str) -> None:
    """Issue rule "their downstream sub-basin is the lake's own" (regression: lake_id naming a sub-basin was
    'no outlet reaches the lake', and a listed inflow draining into it was rejected)."""
    got = trace(layer(OWN), lake, **kw)
    graph = nx.DiGraph([(k, v[1]) for k, v in OWN.items()])
    assert (got.rule, got.direct_inflows, got.lake_node) == (rule, ("A", "B"), "L")
    assert got.subbasin_ids == tuple(sorted(nx.ancestors(graph, "L") | {"L"}))  # networkx, plus the lake's own
    assert got.overlapping == ("L",)


def test_own_subbasin_without_inflows_is_an_error(lake: gpd.GeoDataFrame) -> None:
    with pytest.raises(GeometryError, match=r"lake_id .G. is a sub-basin .* no sub-basin has 'downstream_id' equal"):
        trace(layer(OWN), lake, lake_id="G")  # G: nothing drains into it
