"""AOI statistics and masking rules; reference check against rasterstats (centre rule)."""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from scene_factory import ORIGIN, write_tif

from lakefeed.extract.scene_stats import aoi_statistics, valid_mask
from lakefeed.geometry.zones import shore_buffered
from lakefeed.sources.scenes import SceneReader

X0, Y0 = ORIGIN


def test_statistics_equal_rasterstats_with_centre_rule(tmp_path: Path) -> None:
    """Reference: rasterstats.zonal_stats with all_touched=False (pixel-centre rule, as lakefeed)
    on the same GeoTIFF and polygon: count, mean, median, std (ddof 0), 10th/90th percentiles."""
    from rasterstats import zonal_stats

    rng = np.random.default_rng(3)
    data = rng.lognormal(1.0, 0.6, (120, 150)).astype("float32")
    data[rng.random(data.shape) < 0.1] = -9999.0
    path = write_tif(tmp_path / "s.tif", data, res=20.0)
    poly = shapely.Polygon([(X0 + 333, Y0 - 107), (X0 + 1917, Y0 - 555), (X0 + 1402, Y0 - 2011), (X0 + 515, Y0 - 1490)])
    aois = gpd.GeoDataFrame({"aoi_id": ["p"]}, geometry=[poly], crs=32632)
    win = SceneReader(aois, id_field="aoi_id").read("s", str(path), shore_buffer_m=0)
    px = win.pixels["p"]
    ours = aoi_statistics(px.values, nodata=win.nodata)
    ref = zonal_stats(
        [poly], str(path), all_touched=False, nodata=-9999.0, stats="count mean median std percentile_10 percentile_90"
    )[0]
    assert ours["n_valid"] == ref["count"] > 1000
    assert ours["mean"] == pytest.approx(ref["mean"], rel=1e-6)
    assert ours["median"] == pytest.approx(ref["median"], rel=1e-6)
    assert ours["std"] == pytest.approx(ref["std"], rel=1e-5)
    assert ours["p10"] == pytest.approx(ref["percentile_10"], rel=1e-6)
    assert ours["p90"] == pytest.approx(ref["percentile_90"], rel=1e-6)
    # valid fraction: the same polygon rasterised by rasterstats without nodata counts all centres
    n_all = zonal_stats([poly], str(path), all_touched=False, nodata=-12345.0, stats="count")[0]["count"]
    assert ours["valid_fraction"] == pytest.approx(ref["count"] / n_all)


def test_valid_mask_rules() -> None:
    v = np.array([1.0, 2.0, -9999.0, np.nan, 0.001, 5.0, 6.0, 7.0])
    q = np.array([0, 1, 0, 0, 0, 4, 8, 12], dtype=np.uint8)
    # bits 0 and 2 bad; value 8 bad; range 0.01..1000
    m = valid_mask(v, q, nodata=-9999.0, bad_bits=[0, 2], bad_values=[8], valid_range=(0.01, 1000))
    assert m.tolist() == [True, False, False, False, False, False, False, False]
    # no bits/values configured: any non-zero flag is bad
    assert valid_mask(v, q, nodata=-9999.0).tolist() == [True, False, False, False, True, False, False, False]
    # float quality with NaN (unknown) counts as bad
    assert valid_mask(np.ones(2), np.array([0.0, np.nan])).tolist() == [True, False]


def test_statistics_exact_small_case() -> None:
    v = np.array([1.0, 2.0, 3.0, 4.0, -9999.0, 100.0])
    q = np.array([0, 0, 0, 0, 0, 1])
    u = np.array([0.1, 0.2, 0.3, 0.4, 0.5, 0.9])
    s = aoi_statistics(v, q, u, n_outside=2, nodata=-9999.0)
    assert s["n_valid"] == 4 and s["valid_fraction"] == pytest.approx(4 / 8)
    assert s["median"] == 2.5 and s["mean"] == 2.5
    assert s["p10"] == pytest.approx(1.3) and s["p90"] == pytest.approx(3.7)  # linear interpolation
    assert s["std"] == pytest.approx(np.sqrt(1.25)) and s["cv"] == pytest.approx(np.sqrt(1.25) / 2.5)
    assert s["uncertainty"] == pytest.approx(0.25)


def test_all_nodata_gives_nan_and_zero_count() -> None:
    s = aoi_statistics(np.full(9, -9999.0, dtype="float32"), nodata=-9999.0)
    assert s["n_valid"] == 0 and s["valid_fraction"] == 0 and np.isnan(s["median"]) and np.isnan(s["uncertainty"])


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(0.02, 500.0), min_size=1, max_size=60), st.integers(0, 20))
def test_statistics_properties(values: list[float], outside: int) -> None:
    s = aoi_statistics(np.array(values), n_outside=outside, valid_range=(0.01, 1000))
    assert s["p10"] <= s["median"] <= s["p90"]
    assert 0 < s["valid_fraction"] <= 1
    assert s["n_valid"] == len(values)


def test_shore_buffer_geometry() -> None:
    lake = shapely.box(0, 0, 1000, 1000)
    aois = gpd.GeoSeries([shapely.box(0, 0, 200, 200), shapely.box(400, 400, 600, 600)], crs=32632)
    b = shore_buffered(aois, lake, 50)
    assert b.area.tolist() == pytest.approx([150 * 150, 200 * 200])
    own = shore_buffered(aois, None, 50)
    assert own.area.tolist() == pytest.approx([100 * 100, 100 * 100])
    assert shore_buffered(aois, lake, 0).area.tolist() == pytest.approx([200 * 200, 200 * 200])
    with pytest.raises(ValueError, match=">= 0"):
        shore_buffered(aois, lake, -1)
