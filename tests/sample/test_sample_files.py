"""The sample scenario: determinism, layout, CF/STAC metadata, configuration (reduced scenario, seed 7)."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pystac
import pytest
import rasterio
import xarray as xr

from lakefeed.config import load_project
from lakefeed.sample import generate
from lakefeed.sample._config import REPO_DATA, REPO_GEO, REPO_STORE, render_config
from lakefeed.sources.vectors import read_layer

REPO = Path(__file__).resolve().parents[2]


def _hashes(folder: Path) -> dict[str, str]:
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def test_same_seed_gives_identical_files(small_sample: Path, small_sample_again: Path) -> None:
    first, second = _hashes(small_sample), _hashes(small_sample_again)
    assert len(first) > 100
    assert first == second


def test_other_seed_gives_other_data(small_sample: Path, small_sample_other_seed: Path) -> None:
    first, other = _hashes(small_sample), _hashes(small_sample_other_seed)
    assert first.keys() == other.keys()
    for name in (
        "weather/reanalysis_2022-06.nc",
        "hydrology/discharge.csv",
        "truth/chla_truth.csv",
        "scenes/data/kite/kite_20220101_chla.tif",
        "forecast/forecast_2022-06.nc",
    ):
        assert first[name] != other[name], name
    # the geometry and the configuration do not depend on the seed
    for name in ("geometry/lake.gpkg", "geometry/aois.gpkg", "geometry/subbasins.gpkg", "config/sources.yaml"):
        assert first[name] == other[name], name


def test_layout(small_sample: Path) -> None:
    expected = [
        "config/lake-tallow.yaml",
        "config/sources.yaml",
        "geometry/lake.gpkg",
        "geometry/aois.gpkg",
        "geometry/subbasins.gpkg",
        "hydrology/subbasin_daily.nc",
        "hydrology/discharge.csv",
        "hydrology/tn.csv",
        "hydrology/tp.csv",
        "samples/tributary_samples.csv",
        "scenes/catalog.json",
        "truth/truth.json",
        "truth/chla_truth.csv",
        "truth/loads_truth.csv",
        "truth/scenes_truth.csv",
    ]
    for rel in expected:
        assert (small_sample / rel).is_file(), rel
    months = [f"2022-{m:02d}" for m in range(1, 13)]
    assert sorted(p.name for p in (small_sample / "weather").glob("*.nc")) == [f"reanalysis_{m}.nc" for m in months]
    assert sorted(p.name for p in (small_sample / "forecast").glob("*.nc")) == [f"forecast_{m}.nc" for m in months]
    assert {p.name for p in (small_sample / "scenes" / "data").iterdir()} == {"kite", "dune"}


def test_generate_rejects_zero_years(tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="years"):
        generate(tmp_path, years=0)


def test_config_validates_and_points_into_the_folder(small_sample: Path, monkeypatch) -> None:
    monkeypatch.delenv("LAKEFEED_STORE", raising=False)
    project = load_project(small_sample / "config" / "lake-tallow.yaml")
    lake, src = project.lake, project.sources
    assert lake.id == "tallow" and lake.timezone == "Europe/Berlin"
    assert lake.reference_sensor == "kite"
    assert lake.sensors["kite"].pixel_size_m == 20 and lake.sensors["dune"].pixel_size_m == 300
    assert lake.sensors["kite"].bad_quality_bits == [0, 1, 2, 3]
    assert [(t.name, t.value) for t in lake.thresholds] == [
        ("who_low_probability", 10),
        ("who_moderate_probability", 50),
    ]
    assert all("responsible authority" in t.description for t in lake.thresholds)
    assert lake.lake.path == small_sample.resolve() / "geometry" / "lake.gpkg"
    assert src.hydrology.format == "dsg" and Path(src.hydrology.path).is_file()
    assert src.samples[0].subbasin == "SB02" and Path(src.samples[0].path).is_file()
    assert Path(src.scenes.catalog).is_file() and src.scenes.asset == "chla"
    assert src.weather.accumulation["precip"].kind == "since_reset"
    assert src.weather.accumulation["sw_down"].reset_hour == 0
    assert src.forecast.accumulation["precip"].kind == "per_step"
    assert src.forecast.accumulation["sw_down"].kind == "per_step"
    assert len(list(small_sample.glob("weather/reanalysis_*.nc"))) == 12
    assert Path(src.store) == small_sample.resolve() / "store"


def test_repository_config_and_geometry_match_the_generator(small_sample: Path, monkeypatch) -> None:
    lake_text, sources_text = render_config(data=REPO_DATA, geo=REPO_GEO, store=REPO_STORE)
    assert (REPO / "config" / "lake-tallow.yaml").read_text(encoding="utf-8") == lake_text
    assert (REPO / "config" / "sources.yaml").read_text(encoding="utf-8") == sources_text
    for name in ("lake", "aois", "subbasins"):  # same content (bytes may differ between GDAL versions)
        committed = gpd.read_file(REPO / "sample_geo" / f"{name}.gpkg")
        generated = gpd.read_file(small_sample / "geometry" / f"{name}.gpkg")
        assert committed.crs == generated.crs, name
        pd.testing.assert_frame_equal(committed.drop(columns="geometry"), generated.drop(columns="geometry"))
        assert committed.geometry.geom_equals_exact(generated.geometry, tolerance=0.01).all(), name
    monkeypatch.setenv("LAKEFEED_SAMPLE_DATA", str(small_sample))
    project = load_project(REPO / "config" / "lake-tallow.yaml")
    assert Path(project.sources.scenes.catalog) == small_sample / "scenes" / "catalog.json"
    assert project.lake.aois.path == REPO / "sample_geo" / "aois.gpkg"


def test_geometry_layers(small_sample: Path) -> None:
    project = load_project(small_sample / "config" / "lake-tallow.yaml")
    lake = read_layer(project.lake.lake, what="lake")
    aois = read_layer(project.lake.aois, what="areas of interest", id_field="aoi_id")
    sub = read_layer(project.lake.subbasins, what="sub-basins", id_field="subbasin_id")
    assert lake.crs.to_epsg() == aois.crs.to_epsg() == sub.crs.to_epsg() == 32632
    assert list(lake["name"]) == ["Tallow Reservoir"]
    assert sorted(aois["aoi_id"]) == ["bathing_bay", "intake", "open_water"]
    assert aois.within(lake.geometry.iloc[0]).all()
    assert 10 <= len(sub) <= 15
    down = dict(zip(sub["subbasin_id"], sub["downstream_id"], strict=True))
    assert 2 <= sum(v == "LAKE" for v in down.values()) <= 3
    assert sum(v == "OUTSIDE" for v in down.values()) == 1
    assert all(v in down or v in ("LAKE", "OUTSIDE") for v in down.values())
    depth = {}
    for sid in down:  # longest chain to the lake; a cycle would loop forever, so bound it
        n, cur = 0, sid
        while down[cur] in down and n < 50:
            cur, n = down[cur], n + 1
        depth[sid] = n
    assert max(depth.values()) >= 4
    inside = sub[sub["downstream_id"] != "OUTSIDE"]
    assert 150e6 < inside.area.sum() < 600e6  # a few hundred km2
    x0, y0, x1, y1 = lake.total_bounds
    assert 4000 < x1 - x0 < 8000 and 2500 < y1 - y0 < 6000


def test_weather_files_are_cf(small_sample: Path) -> None:
    with xr.open_dataset(small_sample / "weather" / "reanalysis_2022-03.nc") as ds:
        assert ds.attrs["Conventions"].startswith("CF-")
        assert "history" not in ds.attrs
        expected = {
            "air_temp": ("air_temperature", "K"),
            "dewpoint": ("dew_point_temperature", "K"),
            "wind_u": ("eastward_wind", "m s-1"),
            "wind_v": ("northward_wind", "m s-1"),
            "sw_down": ("integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air", "J m-2"),
            "precip": ("lwe_thickness_of_precipitation_amount", "m"),
        }
        for name, (std, units) in expected.items():
            assert ds[name].attrs["standard_name"] == std and ds[name].attrs["units"] == units
            assert ds[name].dims == ("time", "latitude", "longitude")
            assert ds[name].encoding["dtype"] == np.float32 and ds[name].encoding["zlib"]
            assert ds[name].encoding["chunksizes"][0] == 24
        assert ds["latitude"].attrs["units"] == "degrees_north"
        assert np.all(np.diff(ds["latitude"].values) < 0)
        assert np.allclose(np.diff(ds["longitude"].values), 0.1)
        assert ds.sizes["latitude"] * ds.sizes["longitude"] >= 150
        times = pd.DatetimeIndex(ds["time"].values)
        assert times[0] == pd.Timestamp("2022-03-01 00:00") and times[-1] == pd.Timestamp("2022-03-31 23:00")
        assert (times.to_series().diff().dropna() == pd.Timedelta(hours=1)).all()
        nan_cells = ds["air_temp"].isnull().all("time")
        assert 0 < int(nan_cells.sum()) < nan_cells.size // 4
        assert not bool(ds["air_temp"].sel(latitude=48.1, longitude=9.7, method="nearest").isnull().any())
        assert bool(nan_cells.isel(latitude=0, longitude=-1))  # the no-data block sits in a corner


def test_hydrology_dsg_and_csv_agree(small_sample: Path) -> None:
    with xr.open_dataset(small_sample / "hydrology" / "subbasin_daily.nc") as ds:
        assert ds.attrs["featureType"] == "timeSeries"
        assert ds["station_id"].attrs["cf_role"] == "timeseries_id"
        assert ds["discharge"].dims == ("station", "time")
        assert ds["discharge"].attrs["standard_name"] == "water_volume_transport_in_river_channel"
        assert ds["discharge"].attrs["units"] == "m3 s-1"
        assert ds["tn"].attrs["units"] == ds["tp"].attrs["units"] == "mg L-1"
        ids = [str(s) for s in ds["station_id"].values]
        nc_q = ds["discharge"].values
    for name in ("discharge", "tn", "tp"):
        wide = pd.read_csv(small_sample / "hydrology" / f"{name}.csv", parse_dates=["date"])
        assert list(wide.columns) == ["date", *ids]
        assert len(wide) == 365
    wide_q = pd.read_csv(small_sample / "hydrology" / "discharge.csv")[ids].to_numpy().T
    np.testing.assert_allclose(wide_q, nc_q, rtol=1e-5)


def test_scene_catalog(small_sample: Path) -> None:
    catalog = pystac.Catalog.from_file(str(small_sample / "scenes" / "catalog.json"))
    items = list(catalog.get_items())
    truth = json.loads((small_sample / "truth" / "truth.json").read_text())
    assert len(items) == sum(truth["scene_count"].values())
    by_sensor = {}
    for item in items:
        by_sensor.setdefault(item.properties["constellation"], []).append(item)
    assert set(by_sensor) == {"kite", "dune"}
    kite_days = pd.DatetimeIndex([i.datetime for i in by_sensor["kite"]]).normalize()
    assert set(np.diff(kite_days.values).astype("timedelta64[D]").astype(int)) == {5}
    item = by_sensor["kite"][0]
    assert item.properties["proj:code"] == "EPSG:32632"
    assert item.assets["chla"].roles == ["data"]
    assert item.assets["chla"].extra_fields["raster:bands"][0]["nodata"] == -9999
    with rasterio.open(item.assets["chla"].get_absolute_href()) as src:
        assert src.crs.to_epsg() == 32632 and src.res == (20.0, 20.0) and src.nodata == -9999
        assert src.dtypes[0] == "float32"
        assert list(src.transform)[:6] == item.properties["proj:transform"]
        assert [src.height, src.width] == item.properties["proj:shape"]
    with rasterio.open(item.assets["quality"].get_absolute_href()) as src:
        assert src.dtypes[0] == "uint8"
    with rasterio.open(by_sensor["dune"][0].assets["uncertainty"].get_absolute_href()) as src:
        assert src.res == (300.0, 300.0) and src.dtypes[0] == "float32"


def test_forecast_files(small_sample: Path) -> None:
    with xr.open_dataset(small_sample / "forecast" / "forecast_2022-02.nc") as ds:
        assert ds["air_temp"].dims == ("forecast_reference_time", "forecast_period", "latitude", "longitude")
        assert ds["forecast_period"].attrs["standard_name"] == "forecast_period"
        assert ds["forecast_reference_time"].attrs["standard_name"] == "forecast_reference_time"
        lead = pd.to_timedelta(ds["forecast_period"].values)
        assert lead[0] == pd.Timedelta(hours=6) and lead[-1] == pd.Timedelta(hours=240) and len(lead) == 40
        issues = pd.DatetimeIndex(ds["forecast_reference_time"].values)
        assert len(issues) == 28 and (issues.hour == 0).all()
        assert np.allclose(np.diff(ds["latitude"].values), -0.25)
        assert ds["precip"].attrs["standard_name"] == "lwe_thickness_of_precipitation_amount"
        assert float(ds["precip"].min()) >= 0.0
