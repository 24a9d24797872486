"""End to end: the weather stage and the `lakefeed zonal` command on the reduced sample scenario."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyproj
import pytest
import xarray as xr
from typer.testing import CliRunner

from lakefeed.config import load_project
from lakefeed.exceptions import SourceError
from lakefeed.extract.daily import DAILY_COLUMNS, DAILY_UNITS
from lakefeed.extract.step_units import to_mm_per_step
from lakefeed.sources.grids import open_grid
from lakefeed.stages.weather import build_weather, get_weights
from lakefeed.store import Store

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def built(small_sample, tmp_path_factory):
    project = load_project(next((small_sample / "config").glob("lake-*.yaml")))
    store = Store(tmp_path_factory.mktemp("store"))
    result = build_weather(project, store)
    return project, store, result


def test_drivers_daily_table_columns_units_and_cache(built):
    project, store, result = built
    assert result.tables["drivers_daily"] > 0 and not result.skipped
    frame = store.read_table("drivers_daily", project.id)
    assert list(frame.columns) == ["lake", *DAILY_COLUMNS]
    assert frame.attrs["units"] == {k: v for k, v in DAILY_UNITS.items()}
    assert set(frame["zone"]) >= {"lake", "catchment", "aoi:intake", "aoi:bathing_bay", "aoi:open_water"}
    inner = frame[~frame["flags"].str.contains("missing_hours")]
    assert inner["air_temperature_mean"].notna().all()
    assert (inner["precipitation_sum"] >= 0).all()
    assert list(Path(store.root, "_cache", "weights").glob("*.npz"))


def test_catchment_temperature_matches_an_independent_computation(built, small_sample):
    """Independent check: exactextract (spherical areas) per hour on the raw grid, then local-day means."""
    import geopandas as gpd
    from exactextract import exact_extract
    from exactextract.raster import NumPyRasterSource

    from lakefeed.geometry.network import trace_catchment

    project, store, _ = built
    frame = store.read_table("drivers_daily", project.id)
    day = frame[(frame.zone == "catchment") & (frame["flags"] == "")]["date"].iloc[40]
    subs = gpd.read_file(project.lake.subbasins.path)
    lake = gpd.read_file(project.lake.lake.path)
    catch = trace_catchment(subs, lake, id_field="subbasin_id", downstream_field="downstream_id", lake_id="LAKE")
    poly = gpd.GeoDataFrame(geometry=[catch.polygon], crs=subs.crs).to_crs(4326)
    start = pd.Timestamp(day).tz_localize(project.lake.timezone).tz_convert("UTC").tz_localize(None)
    files = sorted((small_sample / "weather").glob("reanalysis_*.nc"))
    ds = xr.open_mfdataset(files, data_vars="minimal", coords="minimal", compat="override")
    ds = ds.sel(time=slice(start, start + pd.Timedelta("23h")))
    lat, lon = ds["latitude"].values, ds["longitude"].values
    res = abs(float(lon[1] - lon[0]))
    wkt = pyproj.CRS("EPSG:4326").to_wkt()
    hourly = []
    for t in range(ds.sizes["time"]):
        v = ds["air_temp"].isel(time=t).values
        v = v if lat[0] > lat[-1] else v[::-1]
        src = NumPyRasterSource(
            v, lon.min() - res / 2, lat.min() - res / 2, lon.max() + res / 2, lat.max() + res / 2, srs_wkt=wkt
        )
        hourly.append(exact_extract(src, poly, "mean(coverage_weight=area_spherical_m2)", output="pandas")["mean"][0])
    expected = np.mean(hourly) - 273.15
    got = frame[(frame.zone == "catchment") & (frame.date == day)]["air_temperature_mean"].item()
    assert got == pytest.approx(expected, abs=2e-3)  # sphere vs ellipsoid cell areas: ~1e-5 relative in K


def test_zonal_command_long_and_daily(small_sample, tmp_path):
    from lakefeed.cli import app

    files = sorted((small_sample / "weather").glob("reanalysis_*.nc"))[:1]
    runner = CliRunner()
    out = tmp_path / "long.parquet"
    args = ["zonal", str(files[0]), "--zones", str(small_sample / "geometry" / "aois.gpkg"), "--id-field", "aoi_id"]
    r = runner.invoke(app, [*args, "--out", str(out), "--weights-cache", str(tmp_path / "w")])
    assert r.exit_code == 0, r.output
    long = pd.read_parquet(out)
    assert list(long.columns) == ["zone", "time", "variable", "value", "unit", "valid_fraction"]
    assert {"air_temperature", "lwe_thickness_of_precipitation_amount"} <= set(long["variable"])
    t = long[long.variable == "air_temperature"]
    assert set(t["unit"]) == {"degC"} and t["value"].between(-40, 45).all()
    r = runner.invoke(
        app,
        [
            *args,
            "--out",
            str(tmp_path / "d.parquet"),
            "--daily",
            "--tz",
            "Europe/Berlin",
            "--weights-cache",
            str(tmp_path / "w"),
        ],
    )
    assert r.exit_code == 0, r.output
    assert "weights from cache" in r.output
    daily = pd.read_parquet(tmp_path / "d.parquet")
    assert list(daily.columns) == DAILY_COLUMNS


def test_unconvertible_units_and_precipitation_units(small_sample):
    grid = open_grid(sorted((small_sample / "weather").glob("reanalysis_*.nc"))[0])
    x = xr.DataArray([1.0])
    assert to_mm_per_step(x, "m", 3600).item() == pytest.approx(1000.0)
    assert to_mm_per_step(x, "kg m-2", 3600).item() == pytest.approx(1.0)
    assert to_mm_per_step(x, "kg m-2 s-1", 3600).item() == pytest.approx(3600.0)
    with pytest.raises(SourceError, match="not an amount"):
        to_mm_per_step(x, "K", 3600)
    from lakefeed.config.sources import WeatherSource
    from lakefeed.stages.weather import hourly_drivers

    zones = __import__("geopandas").GeoDataFrame(
        {"zone": ["z"]}, geometry=[__import__("shapely").Point(grid.lon[3], grid.lat[3]).buffer(0.01)], crs=4326
    )
    w, _ = get_weights(zones, grid)
    # the rule lakefeed check applies too (grid_rules.role_problems): every problem named at once
    with pytest.raises(SourceError, match=r"'air_temp' \(air_temperature\) has units 'm s-1' .*not a temperature unit"):
        hourly_drivers(grid, w, source=WeatherSource(paths=[], units={"air_temperature": "m s-1"}))


def test_clear_sky_radiation_uses_the_lake_elevation(built):
    """FAO-56 Eq. 37: Rso = (0.75 + 2e-5 z) Ra; Ra (Eq. 21) and Rso from pyet as the reference library."""
    import geopandas as gpd
    import pyet
    import shapely

    project, store, _ = built
    assert project.lake.elevation_m == 512  # the sample template's invented elevation
    frame = store.read_table("drivers_daily", project.id)
    lake_rows = frame[frame["zone"] == "lake"].iloc[::37]
    lake = gpd.read_file(project.lake.lake.path).to_crs(4326)
    lat = float(shapely.get_y(shapely.point_on_surface(lake.geometry.union_all())))
    index = pd.DatetimeIndex(pd.to_datetime(lake_rows["date"]))
    ra = pyet.extraterrestrial_r(index, np.deg2rad(lat))  # MJ m-2 d-1
    rso = pyet.calc_rso(ra, 512.0)
    expected = rso.to_numpy() * 1e6 / 86400.0  # MJ m-2 d-1 -> W m-2
    np.testing.assert_allclose(lake_rows["clear_sky_radiation"].to_numpy(), expected, rtol=2e-3)
    # and differs from the sea-level value by the factor of Eq. 37
    at_sea = pyet.calc_rso(ra, 0.0).to_numpy() * 1e6 / 86400.0
    np.testing.assert_allclose(
        lake_rows["clear_sky_radiation"].to_numpy() / at_sea, (0.75 + 2e-5 * 512) / 0.75, rtol=2e-3
    )


def test_forked_workers_give_the_same_zonal_means_as_threads(small_sample):
    """compute_by_time in worker processes equals one dask compute, bit for bit (exact same arithmetic)."""
    import geopandas as gpd

    from lakefeed.extract.zonal import zonal_mean
    from lakefeed.stages.weather import compute_by_time

    grid = open_grid(sorted((small_sample / "weather").glob("reanalysis_*.nc"))[:2], chunk_time=200)
    aois = gpd.read_file(small_sample / "geometry" / "aois.gpkg").to_crs(grid.crs)
    zones = gpd.GeoDataFrame({"zone": aois["aoi_id"]}, geometry=aois.geometry.values, crs=grid.crs)
    w, _ = get_weights(zones, grid)
    lazy = [zonal_mean(grid.dataset[n], w) for n in ("air_temp", "wind_u")]
    assert len(lazy[0]["mean"].chunks[0]) > 2
    seen = []
    forked = compute_by_time(lazy, processes=True, progress=lambda d, done, total: seen.append((done, total)))
    threaded = compute_by_time(lazy, processes=False)
    for a, b in zip(forked, threaded, strict=True):
        xr.testing.assert_identical(a, b)
    assert seen[-1][0] == seen[-1][1] == len(lazy[0]["mean"].chunks[0])
    # the `lakefeed zonal` long table (no accumulated amounts: the forked path) is the same either way
    from dataclasses import replace

    from lakefeed.stages.weather import zonal_long

    plain = replace(grid, dataset=grid.dataset[["air_temp", "wind_u"]])
    pd.testing.assert_frame_equal(zonal_long(plain, w, processes=True), zonal_long(plain, w, processes=False))


def test_worker_processes_only_where_safe():
    """No fork inside a multi-threaded process (a Prefect task) or with a configured Dask scheduler."""
    import threading

    import dask

    from lakefeed.stages.weather import use_processes

    got = []
    t = threading.Thread(target=lambda: got.append(use_processes()))
    t.start()
    t.join()
    assert got == [False]
    with dask.config.set(scheduler="threads"):
        assert not use_processes()
