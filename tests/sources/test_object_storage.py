"""Inputs on S3-compatible object storage: moto's server started on 127.0.0.1 by the ``s3_server`` fixture.

Reference: the same files read from local disk (the readers' local path, tested elsewhere against
exactextract and NetCDF); the bytes a read transferred are counted by the fixture's proxy.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from grib_factory import LAT0, LON0, hourly_values, messages, netcdf_twin, write_grib
from shapely.geometry import box
from typer.testing import CliRunner

from lakefeed.exceptions import SourceError
from lakefeed.sources.grids import open_grid


@pytest.fixture
def grid_files(tmp_path):
    grib = write_grib(tmp_path / "a.grib2", list(messages(hourly_values(days=2)))[:96])
    nc = netcdf_twin(grib, tmp_path / "a.nc")
    zarr = tmp_path / "a.zarr"
    xr.open_dataset(nc).to_zarr(zarr, zarr_format=2, consolidated=True)
    zones = tmp_path / "zones.gpkg"
    poly = box(LON0 + 0.05, LAT0 - 0.6, LON0 + 0.8, LAT0 - 0.1)
    gpd.GeoDataFrame({"zone_id": ["wide"]}, geometry=[poly], crs=4326).to_file(zones)
    return {"nc": nc, "zarr": zarr, "grib": grib, "zones": zones}


def _zonal(grid: str, zones, out) -> pd.DataFrame:
    from lakefeed.cli import app

    r = CliRunner().invoke(app, ["zonal", grid, "--zones", str(zones), "--id-field", "zone_id", "--out", str(out)])
    assert r.exit_code == 0, r.output
    return pd.read_parquet(out)


@pytest.mark.parametrize("kind", ["nc", "zarr", "grib"])
def test_zonal_on_an_s3_grid_equals_local(s3_bucket, s3_env, grid_files, tmp_path, kind):
    local = grid_files[kind]
    url = s3_env.upload(local, f"s3://{s3_bucket}/weather/{local.name}")
    remote = _zonal(url, grid_files["zones"], tmp_path / "remote.parquet")
    here = _zonal(str(local), grid_files["zones"], tmp_path / "local.parquet")
    assert len(remote) > 0
    pd.testing.assert_frame_equal(remote, here)


def test_s3_glob_orders_files(s3_bucket, s3_env, grid_files):
    ds = xr.open_dataset(grid_files["nc"])
    for i, part in enumerate((ds.isel(time=slice(8, None)), ds.isel(time=slice(0, 8)))):
        path = grid_files["nc"].with_name(f"part{i}.nc")
        part.drop_encoding().to_netcdf(path)
        s3_env.upload(path, f"s3://{s3_bucket}/w/2024-03-{'02' if i == 0 else '01'}.nc")
    grid = open_grid(f"s3://{s3_bucket}/w/*.nc")
    assert [f.name for f in grid.files] == ["2024-03-01.nc", "2024-03-02.nc"]
    np.testing.assert_array_equal(grid.dataset["time"].values, ds["time"].values)


def test_wrong_credentials_and_missing_bucket_are_clear_errors(s3_bucket, s3_env, grid_files, monkeypatch):
    url = s3_env.upload(grid_files["nc"], f"s3://{s3_bucket}/w/a.nc")
    with pytest.raises(SourceError, match="does not exist"):
        open_grid("s3://no-such-bucket-here/w/a.nc")
    with pytest.raises(SourceError, match="no file matches"):
        open_grid(f"s3://{s3_bucket}/w/*.grib")
    monkeypatch.setenv("AWS_SECRET_ACCESS_KEY", "wrong-secret-value")
    import fsspec

    fsspec.get_filesystem_class("s3").clear_instance_cache()
    with pytest.raises(SourceError, match="refused the credentials") as info:
        open_grid(url)
    assert "wrong-secret-value" not in str(info.value)  # never echoed


def test_grib_on_s3_is_cached_locally_by_content(s3_bucket, s3_env, grid_files):
    url = s3_env.upload(grid_files["grib"], f"s3://{s3_bucket}/w/a.grib2")
    first = open_grid(url)
    s3_env.counter.reset()
    second = open_grid(url)
    # the cached copy is used: only a listing and the 8 magic bytes travel, not the file
    assert s3_env.counter.served_for("a.grib2") < grid_files["grib"].stat().st_size / 20
    xr.testing.assert_equal(first.dataset.load(), second.dataset.load())
    assert str(first.files[0]) == url


def _tiled_scene(path, n: int = 1024, tile: int = 256):
    import rasterio
    from affine import Affine

    data = np.arange(n * n, dtype="float32").reshape(n, n)
    profile = dict(
        driver="GTiff", width=n, height=n, count=1, dtype="float32", crs="EPSG:32632", nodata=-9999.0,
        transform=Affine(20.0, 0.0, 500_000.0, 0.0, -20.0, 5_300_000.0), tiled=True, blockxsize=tile,
        blockysize=tile,
    )  # fmt: skip
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(data, 1)
    return path


def test_scene_on_s3_transfers_only_its_window(s3_bucket, s3_env, tmp_path):
    from lakefeed.sources.scenes import SceneReader

    tif = _tiled_scene(tmp_path / "scene.tif")
    url = s3_env.upload(tif, f"s3://{s3_bucket}/scenes/scene.tif")
    # an AOI of 30 x 30 pixels inside one 256 x 256 tile (uncompressed: 256 kB of a 4 MB file)
    x0, y0 = 500_000.0 + 20 * 300, 5_300_000.0 - 20 * 300
    aoi = gpd.GeoDataFrame({"aoi_id": ["a"]}, geometry=[box(x0, y0 - 600, x0 + 600, y0)], crs=32632)
    reader = SceneReader(aoi, id_field="aoi_id")
    s3_env.counter.reset()
    remote = reader.read("s", url, shore_buffer_m=0)
    served = s3_env.counter.served_for("scene.tif")
    local = reader.read("s", str(tif), shore_buffer_m=0)
    np.testing.assert_array_equal(remote.pixels["a"].values, local.pixels["a"].values)
    assert remote.pixels["a"].values.size == 900
    size = tif.stat().st_size
    # the header and the one tile the window touches travel, not the scene
    assert 256 * 256 * 4 <= served < size / 8, (served, size)


def test_scene_on_s3_missing_object_is_a_clear_error(s3_bucket, s3_env, tmp_path):
    from lakefeed.sources.scenes import SceneReader

    aoi = gpd.GeoDataFrame({"aoi_id": ["a"]}, geometry=[box(500_100, 5_299_000, 500_600, 5_299_500)], crs=32632)
    with pytest.raises(SourceError, match=r"scene s: chlorophyll-a file s3://.*/scenes/none\.tif is unreadable"):
        SceneReader(aoi, id_field="aoi_id").read("s", f"s3://{s3_bucket}/scenes/none.tif", shore_buffer_m=0)


def test_tables_and_layers_on_s3_read_like_local(s3_bucket, s3_env, tmp_path):
    from lakefeed.config.sources import HydrologySource, SampleSheet
    from lakefeed.sources.hydrology import read_hydrology
    from lakefeed.sources.lab_sheet import read_sheet
    from lakefeed.sources.vectors import read_layer

    layer = tmp_path / "lake.gpkg"
    gpd.GeoDataFrame({"id": ["L"]}, geometry=[box(8.1, 47.1, 8.3, 47.3)], crs=4326).to_file(layer)
    sheet = tmp_path / "samples.csv"
    sheet.write_text("date;tp;tn\n03.01.2024;0,05;1,2\n17.01.2024;<0,01;1,1\n", encoding="utf-8")
    long = tmp_path / "hydro.csv"
    days = pd.date_range("2024-01-01", periods=5, freq="D")
    pd.DataFrame(
        {"date": np.repeat(days, 2), "subbasin": ["S1", "S2"] * 5, "variable": "discharge", "value": np.arange(10.0)}
    ).to_csv(long, index=False)
    urls = {p.name: s3_env.upload(p, f"s3://{s3_bucket}/in/{p.name}") for p in (layer, sheet, long)}

    a, b = read_layer(urls["lake.gpkg"], what="lake polygon"), read_layer(layer, what="lake polygon")
    assert a.geom_equals(b).all() and a.crs == b.crs
    how = SampleSheet(date_format="%d.%m.%Y")
    pd.testing.assert_frame_equal(read_sheet(urls["samples.csv"], how), read_sheet(sheet, how))
    src = {"format": "long", "units": {"discharge": "m3 s-1"}, "nutrients": []}
    remote = read_hydrology(HydrologySource(path=urls["hydro.csv"], **src))
    local = read_hydrology(HydrologySource(path=str(long), **src))
    pd.testing.assert_frame_equal(remote["discharge"], local["discharge"])
    with pytest.raises(SourceError, match=r"file not found: s3://.*/in/absent\.csv"):
        read_sheet(f"s3://{s3_bucket}/in/absent.csv", how)


def test_check_opens_an_s3_grid_as_the_build_does(s3_bucket, s3_env, grid_files):
    from lakefeed.checks.grids import check_weather
    from lakefeed.config.sources import Accumulation, WeatherSource

    for kind in ("nc", "grib"):
        s3_env.upload(grid_files[kind], f"s3://{s3_bucket}/c/{grid_files[kind].name}")
    lake = gpd.GeoDataFrame(geometry=[box(LON0 + 0.1, LAT0 - 0.5, LON0 + 0.5, LAT0 - 0.2)], crs=4326)
    acc = {"precipitation": Accumulation(kind="since_reset"), "shortwave_radiation": Accumulation(kind="since_reset")}
    src = WeatherSource(paths=[f"s3://{s3_bucket}/c/a.nc"], accumulation=acc)
    res, period = check_weather(src, {"lake": lake})
    assert all(r.ok for r in res), [str(r) for r in res if not r.ok]
    assert period is not None
    grib = src.model_copy(
        update={
            "paths": [f"s3://{s3_bucket}/c/a.grib2"],
            "variables": {"dewpoint_temperature": "d2m", "precipitation": "tp"},
        }
    )
    res, period_grib = check_weather(grib, {"lake": lake})
    assert all(r.ok for r in res), [str(r) for r in res if not r.ok]
    assert period_grib == period
    res, _ = check_weather(src.model_copy(update={"paths": [f"s3://{s3_bucket}/c/none.nc"]}), {"lake": lake})
    assert any(not r.ok and "s3://" in r.message for r in res)


def test_stac_catalogue_on_s3_lists_scenes_read_from_the_bucket(s3_bucket, s3_env, tmp_path):
    from scene_factory import write_catalog, write_item

    from lakefeed.sources.scenes import SceneReader, list_scenes

    root = tmp_path / "stac"
    (root / "items").mkdir(parents=True)
    _tiled_scene(root / "items" / "s1.tif")
    items = [
        write_item(root / "items", "s1", datetime="2024-05-01T10:00:00Z", sensor="alpha", assets={"chla": "./s1.tif"})
    ]
    write_catalog(root, items)
    s3_env.upload(root, f"s3://{s3_bucket}/stac")
    remote = list_scenes(f"s3://{s3_bucket}/stac/catalog.json")
    local = list_scenes(str(root / "catalog.json"))
    assert list(remote["scene_id"]) == list(local["scene_id"]) == ["s1"]
    assert remote["value_href"].iloc[0] == f"s3://{s3_bucket}/stac/items/s1.tif"
    assert (remote["reason"].fillna("") == "").all()
    aoi = gpd.GeoDataFrame({"aoi_id": ["a"]}, geometry=[box(506_000, 5_293_400, 506_600, 5_294_000)], crs=32632)
    reader = SceneReader(aoi, id_field="aoi_id")
    a = reader.read("s1", remote["value_href"].iloc[0], shore_buffer_m=0)
    b = reader.read("s1", local["value_href"].iloc[0], shore_buffer_m=0)
    np.testing.assert_array_equal(a.pixels["a"].values, b.pixels["a"].values)
