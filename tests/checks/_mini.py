"""A tiny, complete lake configuration built in code (for check tests; no generator needed).

Everything is invented: lake ``mini`` in EPSG:32632, 3 AOIs, 4 sub-basins (a and c drain
into the lake, b into a, d elsewhere), a 0.1-degree hourly weather grid in two back-to-back files, CF
timeSeries hydrology, a sample station, a STAC catalogue with two sensors and a forecast
archive. Sizes are a few kB.
"""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pystac
import xarray as xr
import yaml
from shapely.geometry import box

CRS = "EPSG:32632"
X0, Y0 = 500_000.0, 5_300_000.0  # about 9.0 E, 47.85 N

LAKE_YAML = {
    "id": "mini",
    "name": "Mini Reservoir",
    "timezone": "Europe/Berlin",
    "sources": "sources.yaml",
    "lake": {"path": "../geometry/lake.gpkg"},
    "aois": {"path": "../geometry/aois.gpkg", "id_field": "aoi_id"},
    "subbasins": {
        "path": "../geometry/subbasins.gpkg",
        "lake_id": "LAKE",
        "outside_ids": ["OUTSIDE"],
    },
    "sensors": {"kite": {"pixel_size_m": 20, "reference": True}, "dune": {"pixel_size_m": 300}},
    # the weather record is 4 days long: windows and leads must fit in it (lakefeed.checks.meaning)
    "features": {"windows": [1, 2], "forecast_leads": [1]},
}

SOURCES_YAML = {
    "weather": {
        "paths": ["../weather/reanalysis_*.nc"],
        "accumulation": {
            "shortwave_radiation": {"kind": "since_reset"},
            "precipitation": {"kind": "since_reset"},
        },
    },
    "hydrology": {"format": "dsg", "path": "../hydrology/subbasin_daily.nc"},
    "samples": [{"id": "tributary", "path": "../samples/tributary_samples.csv", "subbasin": "a"}],
    "scenes": {"catalog": "../scenes/catalog.json"},
    "forecast": {
        "paths": ["../forecast/forecast_*.nc"],
        "accumulation": {"shortwave_radiation": {"kind": "per_step"}, "precipitation": {"kind": "per_step"}},
    },
    "store": "../store",
}

WEATHER_VARS = {
    "air_temp": ("air_temperature", "K", 280.0),
    "dewpoint": ("dew_point_temperature", "K", 275.0),
    "wind_u": ("eastward_wind", "m s-1", 1.0),
    "wind_v": ("northward_wind", "m s-1", -1.0),
    "sw_down": ("integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air", "J m-2", 1e5),
    "precip": ("lwe_thickness_of_precipitation_amount", "m", 1e-4),
}


def write_layer(gdf: gpd.GeoDataFrame, path: Path) -> None:
    """Write a GeoPackage (one layer)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    gdf.to_file(path, driver="GPKG")


def lake_layer() -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame({"name": ["Mini Reservoir"]}, geometry=[box(X0, Y0, X0 + 3000, Y0 + 2000)], crs=CRS)


def aoi_layer() -> gpd.GeoDataFrame:
    geoms = [
        box(X0 + 100, Y0 + 100, X0 + 500, Y0 + 500),
        box(X0 + 2000, Y0 + 1200, X0 + 2800, Y0 + 1800),
        box(X0 + 1000, Y0 + 600, X0 + 1800, Y0 + 1400),
    ]
    return gpd.GeoDataFrame({"aoi_id": ["intake", "bathing_bay", "open_water"]}, geometry=geoms, crs=CRS)


def subbasin_layer() -> gpd.GeoDataFrame:
    geoms = [
        box(X0 - 5000, Y0 - 3000, X0, Y0 + 5000),  # a: west of the lake
        box(X0 - 12000, Y0 - 3000, X0 - 5000, Y0 + 5000),  # b: upstream of a
        box(X0 + 3000, Y0 - 3000, X0 + 8000, Y0 + 5000),  # c: east
        box(X0 + 8000, Y0 - 3000, X0 + 12000, Y0 + 5000),  # d: drains elsewhere
    ]
    return gpd.GeoDataFrame(
        {"subbasin_id": ["a", "b", "c", "d"], "downstream_id": ["LAKE", "a", "LAKE", "OUTSIDE"]},
        geometry=geoms,
        crs=CRS,
    )


def weather_dataset(times: pd.DatetimeIndex, *, lon0: float = 8.5, lat0: float = 48.3) -> xr.Dataset:
    lat = np.round(lat0 - 0.1 * np.arange(11), 3)  # descending
    lon = np.round(lon0 + 0.1 * np.arange(11), 3)
    shape = (len(times), lat.size, lon.size)
    ds = xr.Dataset(
        {
            name: (
                ("time", "latitude", "longitude"),
                np.full(shape, v, dtype="float32"),
                {"standard_name": s, "units": u},
            )
            for name, (s, u, v) in WEATHER_VARS.items()
        },
        coords={
            "time": times,
            "latitude": ("latitude", lat, {"standard_name": "latitude", "units": "degrees_north"}),
            "longitude": ("longitude", lon, {"standard_name": "longitude", "units": "degrees_east"}),
        },
    )
    return ds


def forecast_dataset(issues: pd.DatetimeIndex) -> xr.Dataset:
    lat = np.round(48.5 - 0.25 * np.arange(7), 3)
    lon = np.round(8.25 + 0.25 * np.arange(7), 3)
    steps = pd.to_timedelta(np.arange(0, 25, 6), unit="h")
    shape = (len(issues), len(steps), lat.size, lon.size)
    return xr.Dataset(
        {
            name: (
                ("forecast_reference_time", "forecast_period", "latitude", "longitude"),
                np.full(shape, v, dtype="float32"),
                {"standard_name": s, "units": u},
            )
            for name, (s, u, v) in WEATHER_VARS.items()
        },
        coords={
            "forecast_reference_time": (
                "forecast_reference_time",
                issues,
                {"standard_name": "forecast_reference_time"},
            ),
            "forecast_period": ("forecast_period", steps, {"standard_name": "forecast_period"}),
            "latitude": ("latitude", lat, {"standard_name": "latitude", "units": "degrees_north"}),
            "longitude": ("longitude", lon, {"standard_name": "longitude", "units": "degrees_east"}),
        },
    )


def hydrology_dataset(ids: list[str], days: pd.DatetimeIndex) -> xr.Dataset:
    shape = (len(ids), len(days))
    return xr.Dataset(
        {
            "discharge": (
                ("station", "time"),
                np.ones(shape),
                {"standard_name": "water_volume_transport_in_river_channel", "units": "m3 s-1"},
            ),
            "tn": (("station", "time"), np.full(shape, 2.0), {"units": "mg L-1"}),
            "tp": (("station", "time"), np.full(shape, 0.05), {"units": "mg L-1"}),
            "station_id": (("station",), np.array(ids, dtype=object), {"cf_role": "timeseries_id"}),
        },
        coords={"time": days},
        attrs={"featureType": "timeSeries", "Conventions": "CF-1.8"},
    )


def write_scenes(folder: Path, scenes: list[tuple[str, str]]) -> None:
    """A STAC catalogue with one item per (date, sensor); asset files are placeholders."""
    cat = pystac.Catalog(id="mini-scenes", description="invented chlorophyll-a scenes")
    for date, sensor in scenes:
        sid = f"{sensor}_{date.replace('-', '')}"
        data = folder / "data" / sensor / f"{sid}_chla.tif"
        data.parent.mkdir(parents=True, exist_ok=True)
        data.write_bytes(b"placeholder")
        item = pystac.Item(
            id=sid,
            geometry=None,
            bbox=None,
            datetime=pd.Timestamp(date + "T10:00:00Z").to_pydatetime(),
            properties={"constellation": sensor},
        )
        rel = f"../data/{sensor}/{data.name}"  # relative to scenes/<id>/<id>.json
        item.add_asset("chla", pystac.Asset(href=rel, roles=["data"], media_type=pystac.MediaType.GEOTIFF))
        item.add_asset("quality", pystac.Asset(href=rel, roles=["metadata"]))
        item.add_asset("uncertainty", pystac.Asset(href=rel, roles=["metadata"]))
        cat.add_item(item)
    cat.normalize_hrefs(str(folder))
    cat.save(catalog_type=pystac.CatalogType.SELF_CONTAINED)


def build(root: Path) -> Path:
    """Write the mini scenario under ``root``; return the lake config path."""
    write_layer(lake_layer(), root / "geometry" / "lake.gpkg")
    write_layer(aoi_layer(), root / "geometry" / "aois.gpkg")
    write_layer(subbasin_layer(), root / "geometry" / "subbasins.gpkg")
    (root / "weather").mkdir(parents=True)
    for day in ("2024-01-01", "2024-01-03"):  # two files of 48 hourly steps, back to back
        t = pd.date_range(day, periods=48, freq="h")
        weather_dataset(t).to_netcdf(root / "weather" / f"reanalysis_{day}.nc")
    (root / "forecast").mkdir()
    forecast_dataset(pd.date_range("2024-01-02", periods=3, freq="D")).to_netcdf(
        root / "forecast" / "forecast_2024-01.nc"
    )
    (root / "hydrology").mkdir()
    hydrology_dataset(["a", "b", "c", "d"], pd.date_range("2023-12-01", "2024-03-31", freq="D")).to_netcdf(
        root / "hydrology" / "subbasin_daily.nc"
    )
    (root / "samples").mkdir()
    pd.DataFrame(
        {
            "date": ["2024-01-03", "2024-01-20", "2024-02-02"],
            "nutrient": ["tp", "tp", "tn"],
            "concentration": [0.05, 0.07, 2.1],
            "censored": [False, False, False],
        }
    ).to_csv(root / "samples" / "tributary_samples.csv", index=False)
    write_scenes(root / "scenes", [("2024-01-02", "kite"), ("2024-01-07", "kite"), ("2024-01-03", "dune")])
    return write_config(root)


def write_config(root: Path, lake: dict | None = None, sources: dict | None = None) -> Path:
    """Write the two YAML files (defaults above, or the given dicts); return the lake config path."""
    cfg = root / "config"
    cfg.mkdir(exist_ok=True)
    (cfg / "sources.yaml").write_text(yaml.safe_dump(sources or SOURCES_YAML, sort_keys=False))
    path = cfg / "lake-mini.yaml"
    path.write_text(yaml.safe_dump(lake or LAKE_YAML, sort_keys=False))
    return path
