"""Exact zone weights: reference checks against exactextract and pyproj.Geod, and bad zones."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pyproj
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st

from lakefeed.exceptions import GeometryError
from lakefeed.geometry.weights import ZoneWeights, cell_areas, cell_edges, normalise_polygon, zone_weights

# exactextract's spherical cell areas use a sphere; ours then use the same radius (documented in
# exactextract's operation list: coverage_weight=area_spherical_m2).
SPHERE = 6371008.8
LAT = np.round(np.arange(50.05, 51.0, 0.1), 6)[::-1]  # descending, 10 rows, edges 50.0..51.0
LON = np.round(np.arange(10.05, 11.0, 0.1), 6)  # 10 columns, edges 10.0..11.0


def _values(seed: int = 0, nan: tuple[tuple[int, int], ...] = ()) -> np.ndarray:
    v = np.random.default_rng(seed).normal(280, 5, size=(LAT.size, LON.size))
    for i, j in nan:
        v[i, j] = np.nan
    return v


def _ours(zones: dict, values: np.ndarray, **kw) -> dict[str, float]:
    w = zone_weights(zones, LAT, LON, sphere_radius=SPHERE, **kw)
    m = w.matrix.toarray()
    x = values.ravel()
    ok = ~np.isnan(x)
    out = {}
    for k, z in enumerate(w.zones):
        den = (m[k, ok]).sum()
        out[z] = float((m[k, ok] * x[ok]).sum() / den) if den > 0 else float("nan")
    return out


def _exactextract(zones: dict, values: np.ndarray) -> dict[str, float]:
    from exactextract import exact_extract
    from exactextract.raster import NumPyRasterSource

    src = NumPyRasterSource(values, 10.0, 50.0, 11.0, 51.0, srs_wkt=pyproj.CRS("EPSG:4326").to_wkt())
    gdf = gpd.GeoDataFrame({"name": list(zones)}, geometry=list(zones.values()), crs=4326)
    res = exact_extract(src, gdf, "mean(coverage_weight=area_spherical_m2)", output="pandas")
    return dict(zip(zones, res["mean"], strict=True))


CASES = {
    "tiny_lake_in_one_cell": shapely.Point(10.333, 50.777).buffer(0.004),
    "polygon_with_hole": shapely.Polygon(
        [(10.12, 50.12), (10.88, 50.15), (10.8, 50.9), (10.1, 50.8)],
        holes=[[(10.3, 50.3), (10.6, 50.3), (10.6, 50.6), (10.3, 50.6)]],
    ),
    "multipolygon": shapely.MultiPolygon(
        [shapely.box(10.05, 50.05, 10.27, 50.33), shapely.Polygon([(10.6, 50.6), (10.95, 50.7), (10.7, 50.95)])]
    ),
    "on_cell_edge": shapely.Polygon([(10.3, 50.2), (10.5, 50.2), (10.5, 50.55), (10.3, 50.45)]),
    "irregular": shapely.Polygon([(10.13, 50.22), (10.77, 50.31), (10.55, 50.87), (10.2, 50.6)]),
}


@pytest.mark.parametrize("nan", [(), ((3, 3), (5, 4), (2, 6))], ids=["no_nan", "nan_cells"])
def test_matches_exactextract_spherical_area_mean(nan):
    """Reference: exactextract (test-only dependency), coverage-weighted mean with spherical cell area."""
    values = _values(1, nan)
    ours = _ours(CASES, values)
    ref = _exactextract(CASES, values)
    for name in CASES:
        assert ours[name] == pytest.approx(ref[name], rel=1e-6), name


def test_cell_aligned_rectangle_gives_analytic_area_weighted_mean():
    """A rectangle on cell edges: the mean is the cell-area-weighted mean of the covered cells (no half-pixel shift).

    Cell areas analytic on the sphere: R^2 dlon (sin phi2 - sin phi1) (common geodesy).
    """
    values = _values(2)
    rect = shapely.box(10.2, 50.3, 10.5, 50.7)  # rows 50.3..50.7 (4 rows), cols 10.2..10.5 (3 cols)
    rows = [i for i, la in enumerate(LAT) if 50.3 < la < 50.7]
    cols = [j for j, lo in enumerate(LON) if 10.2 < lo < 10.5]
    assert len(rows) == 4 and len(cols) == 3
    area = np.array(
        [
            SPHERE**2 * np.deg2rad(0.1) * (np.sin(np.deg2rad(LAT[i] + 0.05)) - np.sin(np.deg2rad(LAT[i] - 0.05)))
            for i in rows
        ]
    )
    expected = sum(area[k] * values[i, cols].sum() for k, i in enumerate(rows)) / (area.sum() * len(cols))
    assert _ours({"r": rect}, values)["r"] == pytest.approx(expected, rel=1e-12)
    w = zone_weights({"r": rect}, LAT, LON)
    assert w.matrix.nnz == 12  # exactly the 12 covered cells, no slivers of neighbours


def test_cell_areas_agree_with_pyproj_geod():
    """Reference: pyproj.Geod (WGS84) polygon area of cells at several latitudes, 1e-6 relative."""
    geod = pyproj.Geod(ellps="WGS84")
    for lat0 in (0.0, 35.0, 60.0, 78.0):
        lat = np.array([lat0 + 0.05, lat0 + 0.15])
        lon = np.array([10.05, 10.15])
        ours = cell_areas(lat, lon)[0, 0]
        ref, _ = geod.polygon_area_perimeter([10.0, 10.1, 10.1, 10.0], [lat0, lat0, lat0 + 0.1, lat0 + 0.1])
        assert ours == pytest.approx(abs(ref), rel=1e-6)


def test_descending_and_ascending_latitude_give_same_weights():
    zone = CASES["irregular"]
    down = zone_weights({"z": zone}, LAT, LON)
    up = zone_weights({"z": zone}, LAT[::-1], LON)
    m_down = down.matrix.toarray().reshape(LAT.size, LON.size)
    m_up = up.matrix.toarray().reshape(LAT.size, LON.size)[::-1]
    np.testing.assert_allclose(m_down, m_up, rtol=1e-12)


def test_sub_cell_zone_keeps_touched_cells_and_is_flagged():
    """A centre-point mask would lose a zone smaller than a cell (regionmask#304); coverage keeps it."""
    straddle = shapely.box(10.29, 50.49, 10.31, 50.51)  # across a cell corner: 4 cells, no centre inside
    w = zone_weights({"tiny": straddle, "big": shapely.box(10.0, 50.0, 10.6, 50.6)}, LAT, LON)
    assert w.matrix[0].nnz == 4
    assert w.flags("tiny") == ["sub_cell_zone"]
    assert w.flags("big") == []


def test_zone_wholly_in_nan_cell_is_nan_not_a_neighbours_value():
    """Slivers of exact intersection must not leak a neighbour's value (docs/architecture.md, "Pitfalls")."""
    values = _values(3, nan=((4, 4),))
    cell = shapely.box(LON[4] - 0.05, LAT[4] - 0.05, LON[4] + 0.05, LAT[4] + 0.05)  # exactly that cell
    inner = shapely.affinity.rotate(cell, 0.0).buffer(-1e-9)
    w = zone_weights({"cell": cell, "inner": inner}, LAT, LON)
    assert w.matrix[0].nnz == 1 and w.matrix[1].nnz == 1
    assert np.isnan(_ours({"cell": cell}, values)["cell"])


def test_zone_outside_grid_is_an_error_naming_zone_and_extents():
    far = shapely.box(20.0, 40.0, 20.5, 40.5)
    with pytest.raises(GeometryError, match=r"zone 'far'.*entirely outside.*20\.0000.*10\.0000"):
        zone_weights({"far": far}, LAT, LON)


def test_partial_coverage_error_unless_allowed():
    half = shapely.box(10.8, 50.5, 11.2, 50.7)  # half east of the grid's edge at 11.0
    with pytest.raises(GeometryError, match=r"only 50\.0% inside"):
        zone_weights({"half": half}, LAT, LON)
    w = zone_weights({"half": half}, LAT, LON, allow_partial_coverage=True)
    assert w.grid_coverage[0] == pytest.approx(0.5)
    assert "partial_grid_coverage" in w.flags("half")


def test_polygon_beyond_180_folds_onto_a_minus180_180_grid():
    """0..360 vs -180..180 mismatches silently select wrong cells (rioxarray#58): polygons are folded."""
    lon = np.round(np.arange(-179.95, -179.0, 0.1), 6)
    lat = np.round(np.arange(0.05, 1.0, 0.1), 6)
    east = shapely.box(180.1, 0.2, 180.4, 0.5)  # given in 0..360 terms
    same = shapely.box(-179.9, 0.2, -179.6, 0.5)
    a = zone_weights({"z": east}, lat, lon).matrix.toarray()
    b = zone_weights({"z": same}, lat, lon).matrix.toarray()
    np.testing.assert_allclose(a, b, rtol=1e-12)
    assert normalise_polygon(same).equals(same)


def test_antimeridian_grid_with_gap_keeps_cells_small():
    """A grid across the antimeridian (normalised to ..179.95, -179.95..) must not make globe-wide cells (xagg#51)."""
    lon = np.sort(np.r_[np.round(np.arange(179.55, 180.0, 0.1), 6), np.round(np.arange(-179.95, -179.5, 0.1), 6)])
    lo, hi = cell_edges(lon)
    np.testing.assert_allclose(hi - lo, 0.1, atol=1e-9)


def test_weights_round_trip_through_arrays():
    w = zone_weights(CASES, LAT, LON)
    back = ZoneWeights.from_arrays(w.to_arrays())
    assert back.zones == w.zones and back.signature == w.signature
    assert (back.matrix != w.matrix).nnz == 0
    np.testing.assert_array_equal(back.sub_cell, w.sub_cell)


@settings(max_examples=30, deadline=None)
@given(
    x0=st.integers(0, 8),
    y0=st.integers(0, 8),
    nx=st.integers(1, 2),
    ny=st.integers(1, 2),
    fx=st.floats(0.0, 0.9),
)
def test_weights_sum_to_the_zone_area(x0, y0, nx, ny, fx):
    """Property: weights of a lon/lat rectangle sum to its exact ellipsoidal area (Geod, 1e-6).

    Rows are whole (coverage x cell area is exact along a parallel; across latitude within a cell the
    area density varies by ~1e-3, the inherent approximation shared with exactextract).
    """
    xmin, ymin = 10.0 + 0.1 * (x0 + fx), 50.0 + 0.1 * y0
    xmax, ymax = min(11.0, xmin + 0.1 * nx), min(51.0, ymin + 0.1 * ny)
    w = zone_weights({"r": shapely.box(xmin, ymin, xmax, ymax)}, LAT, LON)
    ref, _ = pyproj.Geod(ellps="WGS84").polygon_area_perimeter([xmin, xmax, xmax, xmin], [ymin, ymin, ymax, ymax])
    assert w.zone_area_m2[0] == pytest.approx(abs(ref), rel=1e-6)
