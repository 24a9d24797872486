"""Scene catalogue (STAC, GeoTIFF folder) and the windowed reader, including bad inputs."""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
import shapely
from pydantic import ValidationError
from scene_factory import ORIGIN, write_catalog, write_item, write_tif

from lakefeed.config.sources import SceneSource
from lakefeed.exceptions import SourceError
from lakefeed.sources.scenes import SceneReader, list_scenes, read_scenes

X0, Y0 = ORIGIN


def _aois(*boxes: tuple[float, float, float, float], crs: int = 32632) -> gpd.GeoDataFrame:
    ids = [f"a{i}" for i in range(len(boxes))]
    return gpd.GeoDataFrame({"aoi_id": ids}, geometry=[shapely.box(*b) for b in boxes], crs=crs)


def _scene(tmp: Path, name: str = "s", n: int = 100, res: float = 20.0, **kw) -> Path:
    data = np.arange(n * n, dtype="float32").reshape(n, n) + 1
    return write_tif(tmp / f"{name}.tif", data, res=res, **kw)


# ------------------------------------------------------------------------------------------ catalogue
def test_catalog_and_item_folder_list_the_same_scenes(tmp_path: Path) -> None:
    v = _scene(tmp_path)
    items = [
        write_item(
            tmp_path / "items",
            "k1",
            datetime="2024-06-02T10:00:00Z",
            sensor="kite",
            assets={"chla": str(v), "quality": str(v)},
        ),
        write_item(
            tmp_path / "items", "d1", datetime="2024-06-01T09:00:00+02:00", sensor="dune", assets={"chla": str(v)}
        ),
    ]
    cat = list_scenes(write_catalog(tmp_path, items))
    folder = list_scenes(tmp_path / "items")
    assert list(cat["scene_id"]) == ["d1", "k1"] == list(folder["scene_id"])  # sorted by time
    assert str(cat["time"].dt.tz) == "UTC"
    assert cat["time"].iloc[0].hour == 7  # +02:00 converted to UTC
    assert cat.loc[1, "quality_href"] == str(v) and cat.loc[0, "quality_href"] is None
    assert (cat["reason"] == "").all()


def test_item_without_datetime_is_recorded_not_fatal(tmp_path: Path) -> None:
    v = _scene(tmp_path)
    write_item(tmp_path / "items", "good", datetime="2024-06-01T10:00:00Z", sensor="kite", assets={"chla": str(v)})
    write_item(tmp_path / "items", "nodate", datetime=None, sensor="kite", assets={"chla": str(v)})
    t = list_scenes(tmp_path / "items").set_index("scene_id")
    assert t.loc["good", "reason"] == ""
    assert "no 'datetime'" in t.loc["nodate", "reason"] and "nodate.json" in t.loc["nodate", "reason"]


def test_interval_item_uses_midpoint(tmp_path: Path) -> None:
    v = _scene(tmp_path)
    extra = {"start_datetime": "2024-06-01T00:00:00Z", "end_datetime": "2024-06-01T12:00:00Z"}
    write_item(tmp_path / "items", "iv", datetime=None, sensor="kite", assets={"chla": str(v)}, extra=extra)
    assert list_scenes(tmp_path / "items")["time"].iloc[0].hour == 6


def test_sensor_label_asset_choice_and_sensor_map(tmp_path: Path) -> None:
    v = _scene(tmp_path)
    write_item(tmp_path / "items", "nos", datetime="2024-06-01T10:00:00Z", sensor=None, assets={"chla": str(v)})
    write_item(
        tmp_path / "items",
        "plat",
        datetime="2024-06-01T10:00:00Z",
        sensor=None,
        assets={"other": str(v), "chla": str(v)},
        extra={"platform": "kite-2b"},
    )
    src = SceneSource(catalog=str(tmp_path / "items"), sensor_property="platform", sensor_map={"kite-2b": "kite"})
    t = list_scenes(src).set_index("scene_id")
    assert "no sensor label" in t.loc["nos", "reason"]
    assert t.loc["plat", "sensor"] == "kite"
    assert t.loc["plat", "value_href"] == str(v)  # first asset whose roles include data
    t2 = list_scenes(tmp_path / "items", asset="missing").set_index("scene_id")
    assert "has no asset 'missing'" in t2.loc["plat", "reason"]


def test_unreadable_json_and_missing_catalog(tmp_path: Path) -> None:
    (tmp_path / "items").mkdir()
    (tmp_path / "items" / "broken.json").write_text("{not json")
    assert "unreadable" in list_scenes(tmp_path / "items")["reason"].iloc[0]
    with pytest.raises(SourceError, match="not found"):
        list_scenes(tmp_path / "nowhere.json")


def test_geotiff_folder_with_pattern(tmp_path: Path) -> None:
    for name in ["kite_20240601_chla.tif", "kite_20240601_quality.tif", "dune_20240602_chla.tif", "notes.txt"]:
        (tmp_path / name).write_bytes(b"")
    src = SceneSource(
        folder=str(tmp_path), filename_pattern=r"(?P<sensor>[a-z]+)_(?P<date>\d{8})_(?P<asset>[a-z]+)\.tif"
    )
    t = list_scenes(src)
    assert list(t["scene_id"]) == ["kite_20240601", "dune_20240602"]
    assert t["quality_href"].iloc[0].endswith("kite_20240601_quality.tif")
    assert t["value_href"].iloc[0].endswith("kite_20240601_chla.tif")
    assert t["time"].iloc[1] == pd.Timestamp("2024-06-02", tz="UTC")
    with pytest.raises(ValidationError, match="sensor"):  # refused with the config (check and build alike)
        SceneSource(folder=str(tmp_path), filename_pattern=r"(?P<date>\d{8}).tif")


# --------------------------------------------------------------------------------------------- reader
def test_window_is_bounded_by_the_aoi_not_the_scene(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Windowed reading verified: every read returns at most the AOI's bounding window."""
    v = _scene(tmp_path, n=1000)  # 1000 x 1000 px scene
    reads: list[tuple[int, ...]] = []
    orig = rasterio.io.DatasetReader.read

    def spy(self, *args, **kwargs):  # type: ignore[no-untyped-def]
        out = orig(self, *args, **kwargs)
        reads.append(out.shape)
        return out

    monkeypatch.setattr(rasterio.io.DatasetReader, "read", spy)
    aoi = (X0 + 2000, Y0 - 3000, X0 + 2200, Y0 - 2800)  # 200 m = 10 x 10 pixels
    win = SceneReader(_aois(aoi), id_field="aoi_id").read("s", str(v), str(v), str(v), shore_buffer_m=0)
    assert reads == [(10, 10)] * 3  # value, quality, uncertainty: 100 pixels each of 1e6
    assert [(w.height, w.width) for w in win.windows] == [(10, 10)] and win.pixels_read == 100
    px = win.pixels["a0"]
    assert px.values.size == 100
    # pixel (row 140, col 100) is the top-left of the AOI; values are 1 + row * 1000 + col
    assert px.values.min() == 1 + 140 * 1000 + 100


def test_far_apart_aois_get_their_own_windows(tmp_path: Path) -> None:
    v = _scene(tmp_path, n=1000)
    a = (X0 + 2000, Y0 - 3000, X0 + 2200, Y0 - 2800)
    b = (X0 + 15000, Y0 - 16000, X0 + 15200, Y0 - 15800)
    c = (X0 + 2100, Y0 - 3100, X0 + 2300, Y0 - 2900)  # overlaps a
    win = SceneReader(_aois(a, b), id_field="aoi_id").read("s", str(v), shore_buffer_m=0)
    assert win.pixels_read == 200 and len(win.windows) == 2  # not the 660 x 660 px common window
    assert win.pixels["a1"].values.min() == 1 + 790 * 1000 + 750
    near = SceneReader(_aois(a, c), id_field="aoi_id").read("s", str(v), shore_buffer_m=0)
    assert len(near.windows) == 1 and near.pixels_read == 15 * 15


def test_pixel_centre_rule(tmp_path: Path) -> None:
    """An AOI covering half of a pixel column gets that column only if it covers the centre."""
    v = _scene(tmp_path, n=20)
    just_past_centre = (X0 + 40 - 11, Y0 - 100, X0 + 100, Y0 - 40)  # starts 1 m before the centre of col 1
    short_of_centre = (X0 + 40 - 9, Y0 - 100, X0 + 100, Y0 - 40)
    r = SceneReader(_aois(just_past_centre, short_of_centre), id_field="aoi_id")
    win = r.read("s", str(v), shore_buffer_m=0)
    assert win.pixels["a0"].values.size == 4 * 3  # cols 1..3 of rows 2..4
    assert win.pixels["a1"].values.size == 3 * 3  # cols 2..4


def test_aoi_outside_scene_skipped_and_partial_aoi_counts_outside_pixels(tmp_path: Path) -> None:
    v = _scene(tmp_path, n=50)  # 1000 m square
    far = (X0 + 5000, Y0 - 5000, X0 + 5200, Y0 - 4800)
    edge = (X0 - 100, Y0 - 200, X0 + 100, Y0 - 100)  # half left of the scene
    win = SceneReader(_aois(far, edge), id_field="aoi_id").read("s", str(v), shore_buffer_m=0)
    assert "does not intersect" in win.skipped["a0"]
    assert win.pixels["a1"].values.size == 25 and win.pixels["a1"].n_outside == 25


def test_shore_buffer_inward_from_lake(tmp_path: Path) -> None:
    v = _scene(tmp_path, n=50)
    lake = gpd.GeoDataFrame(geometry=[shapely.box(X0, Y0 - 1000, X0 + 1000, Y0)], crs=32632)
    aoi = (X0, Y0 - 200, X0 + 200, Y0)  # in the lake's top-left corner, 10 x 10 px
    r = SceneReader(_aois(aoi), id_field="aoi_id", lake=lake)
    assert r.read("s", str(v), shore_buffer_m=0).pixels["a0"].values.size == 100
    assert r.read("s", str(v), shore_buffer_m=40).pixels["a0"].values.size == 64  # two pixels off two shores
    assert r.read("s", str(v)).pixels["a0"].values.size == 81  # default: one pixel (20 m)
    far = SceneReader(_aois((X0 + 400, Y0 - 600, X0 + 600, Y0 - 400)), id_field="aoi_id", lake=lake)
    assert far.read("s", str(v), shore_buffer_m=40).pixels["a0"].values.size == 100  # away from the shore
    assert "empty after" in r.read("s", str(v), shore_buffer_m=300).skipped["a0"]


def test_geographic_scene_reprojects_aoi(tmp_path: Path) -> None:
    """AOIs in UTM read from a scene in EPSG:4326 (scene CRS differs from the AOI CRS)."""
    data = np.full((200, 200), 7.0, dtype="float32")
    lon0, lat0 = 9.0, 47.9
    v = write_tif(tmp_path / "g.tif", data, res=0.001, crs="EPSG:4326", origin=(lon0, lat0))
    aoi = gpd.GeoDataFrame({"aoi_id": ["x"]}, geometry=[shapely.box(9.05, 47.83, 9.06, 47.84)], crs=4326).to_crs(32632)
    win = SceneReader(aoi, id_field="aoi_id").read("g", str(v), shore_buffer_m=0)
    assert 80 <= win.pixels["x"].values.size <= 120  # about 10 x 10 cells of 0.001 degree
    assert win.pixel_size_m == pytest.approx(0.001 * 111_320 * np.cos(np.deg2rad(47.8)), rel=1e-3)


# ----------------------------------------------------------------------------------------- bad inputs
def _bad_inputs(tmp_path: Path) -> dict[str, tuple[str, str | None]]:
    good = _scene(tmp_path, "good")
    trunc = tmp_path / "trunc.tif"
    trunc.write_bytes(good.read_bytes()[: good.stat().st_size // 2])
    corrupt = tmp_path / "corrupt.tif"
    corrupt.write_bytes(b"II*\x00" + b"\x17" * 500)
    nocrs = _scene(tmp_path, "nocrs", crs=None)
    small_q = write_tif(tmp_path / "q.tif", np.zeros((50, 50), "uint8"), nodata=None)
    return {
        "good": (str(good), None),
        "missing": (str(tmp_path / "missing.tif"), None),
        "trunc": (str(trunc), None),
        "corrupt": (str(corrupt), None),
        "nocrs": (str(nocrs), None),
        "badshape": (str(good), str(small_q)),
    }


def test_bad_scene_files_are_recorded_and_others_go_on(tmp_path: Path) -> None:
    cases = _bad_inputs(tmp_path)
    scenes = pd.DataFrame(
        [
            dict(
                scene_id=k,
                sensor="kite",
                time=pd.Timestamp("2024-06-01", tz="UTC"),
                value_href=v,
                quality_href=q,
                uncertainty_href=None,
                reason="",
            )
            for k, (v, q) in cases.items()
        ]
    )
    reader = SceneReader(_aois((X0 + 200, Y0 - 1800, X0 + 1800, Y0 - 200)), id_field="aoi_id")
    out = {row["scene_id"]: (win, reason) for row, win, reason in read_scenes(scenes, reader)}
    assert out["good"][0] is not None and out["good"][1] == ""
    assert "is missing" in out["missing"][1]
    assert "truncated or corrupt" in out["trunc"][1] or "unreadable" in out["trunc"][1]
    assert "unreadable or corrupt" in out["corrupt"][1]
    assert "has no CRS" in out["nocrs"][1]
    assert "quality band" in out["badshape"][1] and "(50, 50)" in out["badshape"][1]
    for key in ("missing", "trunc", "corrupt", "nocrs", "badshape"):
        assert out[key][0] is None, key


def test_reader_needs_aoi_crs() -> None:
    gdf = gpd.GeoDataFrame({"aoi_id": ["a"]}, geometry=[shapely.box(0, 0, 1, 1)])
    with pytest.raises(SourceError, match="no CRS"):
        SceneReader(gdf, id_field="aoi_id")


def test_item_json_written_by_factory_is_valid_stac(tmp_path: Path) -> None:
    p = write_item(tmp_path, "x", datetime="2024-01-01T00:00:00Z", sensor="kite", assets={"chla": "a.tif"})
    assert json.loads(p.read_text())["assets"]["chla"]["roles"] == ["data"]
