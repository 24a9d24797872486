"""Scene value encoding and catalogue keys: scale/offset, declared no-data and units, duplicate ids.

Regression tests for gaps found in review: integer-coded scenes (GeoTIFF scale/offset tags or STAC
``raster:bands`` scale/offset) were read raw, and two items with one id gave two rows with the same key.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import rasterio
import shapely

from lakefeed.exceptions import SourceError
from lakefeed.extract.scene_stats import aoi_statistics
from lakefeed.sources.scenes import SceneReader, list_scenes

sys.path.insert(0, str(Path(__file__).parent))
from scene_factory import ORIGIN, write_item, write_tif

X0, Y0 = ORIGIN


def _aoi() -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(
        {"aoi_id": ["a"]}, geometry=[shapely.box(X0 + 200, Y0 - 600, X0 + 600, Y0 - 200)], crs=32632
    )


def _coded(tmp: Path, name: str, *, tags: bool) -> tuple[Path, np.ndarray]:
    """An int16 scene with value = raw x 0.01 + 0.5 (no-data raw -1); returns the path and decoded truth."""
    rng = np.random.default_rng(5)
    chla = np.round(rng.uniform(1, 40, (40, 40)), 2)
    raw = np.round((chla - 0.5) / 0.01).astype("int16")
    raw[12:14, 12:20] = -1
    path = write_tif(tmp / name, raw, nodata=-1)
    if tags:
        with rasterio.open(path, "r+") as dst:
            dst.scales, dst.offsets = (0.01,), (0.5,)
    return path, np.where(raw == -1, np.nan, raw * 0.01 + 0.5)


def _expected(decoded: np.ndarray) -> np.ndarray:
    """Decoded pixels whose centre lies in the AOI, by hand (20 m pixels: rows/cols 10..29)."""
    return decoded[10:30, 10:30].ravel()


def test_geotiff_scale_offset_tags_applied(tmp_path: Path) -> None:
    path, decoded = _coded(tmp_path, "tags.tif", tags=True)
    win = SceneReader(_aoi(), id_field="aoi_id").read("s", str(path), shore_buffer_m=0)
    got = win.pixels["a"].values
    assert got == pytest.approx(_expected(decoded), nan_ok=True)
    assert win.nodata is None  # decoded: no-data is NaN


def test_stac_raster_bands_scale_offset_applied_once(tmp_path: Path) -> None:
    """Declared in STAC only, or in both places (equal): applied once, not twice."""
    band = {"raster:bands": [{"scale": 0.01, "offset": 0.5, "nodata": -1}]}
    for tags in (False, True):
        path, decoded = _coded(tmp_path, f"stac{tags}.tif", tags=tags)
        item = write_item(
            tmp_path / f"items{tags}",
            f"s{tags}",
            datetime="2024-06-01T10:00:00Z",
            sensor="kite",
            assets={"chla": str(path)},
        )
        data = json.loads(item.read_text())
        data["assets"]["chla"].update(band)
        item.write_text(json.dumps(data))
        table = list_scenes(item.parent)
        row = table.iloc[0]
        assert (row["scale"], row["offset"], row["nodata"]) == (0.01, 0.5, -1.0)
        win = SceneReader(_aoi(), id_field="aoi_id").read(
            "s", row["value_href"], shore_buffer_m=0, scale=row["scale"], offset=row["offset"], nodata=row["nodata"]
        )
        assert win.pixels["a"].values == pytest.approx(_expected(decoded), nan_ok=True)


def test_contradicting_scale_is_an_error(tmp_path: Path) -> None:
    path, _ = _coded(tmp_path, "tags.tif", tags=True)
    with pytest.raises(SourceError, match=r"declares scale 0\.1 but .* carries scale 0\.01"):
        SceneReader(_aoi(), id_field="aoi_id").read("s", str(path), shore_buffer_m=0, scale=0.1)


def test_declared_nodata_used_when_file_has_none(tmp_path: Path) -> None:
    data = np.full((40, 40), 5.0, dtype="float32")
    data[10:12, 10:30] = -9999.0
    path = write_tif(tmp_path / "n.tif", data, nodata=None)
    win = SceneReader(_aoi(), id_field="aoi_id").read("s", str(path), shore_buffer_m=0, nodata=-9999.0, scale=1.0)
    assert win.nodata == -9999.0
    stats = aoi_statistics(win.pixels["a"].values, nodata=win.nodata)
    assert stats["n_valid"] == 400 - 40 and stats["median"] == 5.0


def test_value_unit_converted_to_mg_m3(tmp_path: Path) -> None:
    """ug L-1 equals mg m-3; g m-3 is 1000 mg m-3 (unit conversion through lakefeed.units)."""
    path = write_tif(tmp_path / "u.tif", np.full((40, 40), 0.004, dtype="float32"))
    reader = SceneReader(_aoi(), id_field="aoi_id")
    assert reader.read("s", str(path), shore_buffer_m=0, unit="g m-3").pixels["a"].values == pytest.approx(4.0)
    assert reader.read("s", str(path), shore_buffer_m=0, unit="ug L-1").pixels["a"].values == pytest.approx(0.004)
    with pytest.raises(SourceError, match="value unit"):
        reader.read("s", str(path), shore_buffer_m=0, unit="m s-1")


def test_uncertainty_band_scale_applied(tmp_path: Path) -> None:
    value = write_tif(tmp_path / "v.tif", np.full((40, 40), 5.0, dtype="float32"))
    unc = write_tif(tmp_path / "u.tif", np.full((40, 40), 150, dtype="uint16"), nodata=None)
    with rasterio.open(unc, "r+") as dst:
        dst.scales = (0.001,)
    win = SceneReader(_aoi(), id_field="aoi_id").read("s", str(value), None, str(unc), shore_buffer_m=0)
    assert win.pixels["a"].uncertainty == pytest.approx(0.15)


def test_duplicate_scene_ids_keep_first_and_reject_others(tmp_path: Path) -> None:
    v1 = write_tif(tmp_path / "a.tif", np.ones((4, 4), "float32"))
    v2 = write_tif(tmp_path / "b.tif", np.ones((4, 4), "float32"))
    items = tmp_path / "items"
    write_item(items, "s1", datetime="2024-06-01T10:00:00Z", sensor="kite", assets={"chla": str(v1)})
    copy = write_item(items, "s1", datetime="2024-06-01T10:00:00Z", sensor="kite", assets={"chla": str(v2)})
    copy.rename(items / "s1_again.json")
    same = write_item(items, "s1", datetime="2024-06-01T10:00:00Z", sensor="kite", assets={"chla": str(v1)})
    same.rename(items / "s1_same.json")  # the very same scene listed twice: dropped silently
    table = list_scenes(items)
    assert table["scene_id"].tolist() == ["s1", "s1~dup1"]
    assert table.loc[0, "reason"] == ""
    assert "duplicate scene id 's1'" in table.loc[1, "reason"] and str(v2) in table.loc[1, "reason"]
