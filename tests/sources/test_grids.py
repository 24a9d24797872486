"""Opening reanalysis grids: globs, Zarr, normalisation, variables by standard_name, bad inputs."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from lakefeed.exceptions import SourceError
from lakefeed.sources.grids import decode, find_variable, open_grid, select_roles

LAT = np.round(np.arange(50.95, 49.99, -0.1), 6)  # descending
LON360 = np.round(np.arange(355.05, 365.0, 0.1) % 360, 6)  # 355.05..359.95, 0.05..4.95


def _ds(start: str, hours: int, *, lon=LON360, lat=LAT, coord_attrs=True) -> xr.Dataset:
    t = pd.date_range(start, periods=hours, freq="h")
    lon2 = np.where(np.asarray(lon) > 180, np.asarray(lon) - 360, lon)
    field = 270 + 0.1 * lon2[None, None, :] + 0.01 * np.arange(hours)[:, None, None] + 0 * lat[None, :, None]
    ds = xr.Dataset(
        {
            "t2": (("time", "latitude", "longitude"), field, {"standard_name": "air_temperature", "units": "K"}),
            "foo": (("time", "latitude", "longitude"), np.ones_like(field), {"units": "1"}),
        },
        coords={"time": t, "latitude": lat, "longitude": lon},
    )
    if coord_attrs:
        ds["latitude"].attrs = {"standard_name": "latitude", "units": "degrees_north"}
        ds["longitude"].attrs = {"standard_name": "longitude", "units": "degrees_east"}
    return ds


def _write(ds: xr.Dataset, path: Path, packed: bool = True) -> Path:
    enc = {"t2": {"dtype": "int16", "scale_factor": 0.01, "add_offset": 270.0, "_FillValue": -32767, "zlib": True}}
    ds.to_netcdf(path, encoding=enc if packed else None)
    return path


def test_glob_of_monthly_files_normalised(tmp_path):
    _write(_ds("2024-02-01", 48), tmp_path / "g_2024-02.nc")
    _write(_ds("2024-01-31", 24), tmp_path / "g_2024-01.nc")
    grid = open_grid(str(tmp_path / "g_*.nc"))
    ds = grid.dataset
    assert ds.sizes["time"] == 72 and pd.Index(ds["time"].values).is_monotonic_increasing
    assert grid.files[0].name == "g_2024-01.nc"  # ordered by time, not by name
    lon = grid.lon
    assert lon.min() >= -180 and lon.max() <= 180 and np.all(np.diff(lon) > 0)
    assert grid.lat[0] > grid.lat[-1]  # descending latitude kept (weights handle either order)
    t2 = decode(ds["t2"])
    # values follow their longitudes through the roll: field = 270 + 0.1 * lon (+ time term)
    np.testing.assert_allclose(t2.isel(time=0, latitude=0).values, 270 + 0.1 * lon, atol=0.006)
    assert isinstance(ds["t2"].data, __import__("dask.array", fromlist=["Array"]).Array)


def test_variables_by_standard_name_else_mapping(tmp_path):
    grid = open_grid(_write(_ds("2024-01-01", 3), tmp_path / "a.nc"))
    assert find_variable(grid.dataset, "air_temperature") == "t2"
    assert find_variable(grid.dataset, "eastward_wind", mapping={"eastward_wind": "foo"}) == "foo"
    with pytest.raises(SourceError, match=r"standard_name 'eastward_wind'.*weather.variables.eastward_wind"):
        find_variable(grid.dataset, "eastward_wind", where="a.nc")
    with pytest.raises(SourceError, match=r"'nope'.*not in the file"):
        find_variable(grid.dataset, "eastward_wind", mapping={"eastward_wind": "nope"})


def test_units_missing_or_not_understood(tmp_path):
    ds = _ds("2024-01-01", 3)
    del ds["t2"].attrs["units"]
    grid = open_grid(_write(ds, tmp_path / "a.nc", packed=False))
    with pytest.raises(SourceError, match=r"'t2'.*has no units; declare them under weather.units.air_temperature"):
        select_roles(grid, ["air_temperature"])
    assert select_roles(grid, ["air_temperature"], units={"air_temperature": "K"})["air_temperature"].attrs["units"]
    with pytest.raises(SourceError, match="not understood"):
        select_roles(grid, ["air_temperature"], units={"air_temperature": "kelvinish"})


def test_grid_without_crs_or_geographic_coordinates_is_refused(tmp_path):
    ds = _ds("2024-01-01", 3, coord_attrs=False).rename({"latitude": "y", "longitude": "x"})
    path = _write(ds, tmp_path / "xy.nc")
    with pytest.raises(SourceError, match=r"xy\.nc.*cannot tell that the grid is geographic"):
        open_grid(path)


def test_projected_grid_mapping_is_refused(tmp_path):
    ds = _ds("2024-01-01", 3)
    ds["crs"] = xr.DataArray(0, attrs={"grid_mapping_name": "transverse_mercator"})
    with pytest.raises(SourceError, match="not a latitude/longitude grid"):
        open_grid(_write(ds, tmp_path / "tm.nc"))


def test_duplicate_and_unsorted_times_name_the_file_and_time(tmp_path):
    _write(_ds("2024-01-01", 24), tmp_path / "a.nc")
    _write(_ds("2024-01-01 12:00", 24), tmp_path / "b.nc")
    with pytest.raises(SourceError, match=r"b\.nc.*out of order step at 2024-01-01 12:00"):
        open_grid(str(tmp_path / "*.nc"))
    ds = _ds("2024-01-01", 5)
    ds = ds.isel(time=[0, 1, 1, 2, 3])
    with pytest.raises(SourceError, match=r"dup\.nc.*duplicate step at 2024-01-01 01:00"):
        open_grid(_write(ds, tmp_path / "dup.nc"))


@pytest.mark.parametrize("damage", ["garbage", "truncated"])
def test_corrupt_file_is_named_and_others_are_kept_when_skipping(tmp_path, damage):
    good = [_write(_ds(f"2024-01-0{d}", 24), tmp_path / f"m{d}.nc") for d in (1, 3)]
    bad = tmp_path / "m2.nc"
    if damage == "garbage":
        bad.write_bytes(b"this is not a netcdf file at all")
    else:
        _write(_ds("2024-01-02", 24), bad)
        raw = bad.read_bytes()
        bad.write_bytes(raw[: len(raw) // 2])
    with pytest.raises(SourceError, match=r"m2\.nc.*(corrupt|truncated|not a NetCDF).*2 other file"):
        open_grid(str(tmp_path / "m*.nc"))
    grid = open_grid(str(tmp_path / "m*.nc"), on_error="skip")
    assert [f.name for f in grid.files] == [g.name for g in good]
    assert len(grid.skipped) == 1 and "m2.nc" in grid.skipped[0]


def test_zarr_store(tmp_path):
    ds = _ds("2024-01-01", 6)
    ds.to_zarr(tmp_path / "g.zarr", consolidated=False)
    grid = open_grid(tmp_path / "g.zarr")
    assert grid.dataset.sizes["time"] == 6
    np.testing.assert_allclose(decode(grid.dataset["t2"]).isel(time=0, latitude=0).values, 270 + 0.1 * grid.lon)


def test_local_file_times_converted_to_utc(tmp_path):
    grid = open_grid(_write(_ds("2024-01-01 01:00", 3), tmp_path / "a.nc"), time_zone="Europe/Berlin")
    assert pd.Timestamp(grid.dataset["time"].values[0]) == pd.Timestamp("2024-01-01 00:00")


def test_missing_path_or_empty_glob(tmp_path):
    with pytest.raises(SourceError, match="no file matches"):
        open_grid(str(tmp_path / "none_*.nc"))
    with pytest.raises(SourceError, match="file not found"):
        open_grid(tmp_path / "none.nc")


def test_decoded_values_are_not_decoded_twice(tmp_path):
    """decode() replaces the CF packing attributes, so a zonal mean of decoded data leaves it as it is."""
    import shapely

    from lakefeed.extract.zonal import zonal_mean
    from lakefeed.geometry.weights import zone_weights

    ds = _ds("2024-01-01", 4)
    grid = open_grid(_write(ds, tmp_path / "a.nc"))
    t2 = decode(grid.dataset["t2"])
    assert not {"scale_factor", "add_offset", "_FillValue"} & set(t2.attrs)
    assert t2.attrs["packing_step"] == pytest.approx(0.01) and t2.attrs["units"] == "K"
    w = zone_weights({"box": shapely.box(0.5, 50.2, 2.5, 50.8)}, grid.lat, grid.lon)
    packed = zonal_mean(grid.dataset["t2"], w)["mean"].values  # decoded inside the blocks
    decoded = zonal_mean(t2, w)["mean"].values
    np.testing.assert_allclose(decoded, packed, rtol=1e-12)
    assert 270 < decoded.min() and decoded.max() < 271  # field = 270 + 0.1 * lon + 0.01 * hour


def test_files_packed_differently_are_decoded_each_with_its_own_packing(tmp_path):
    # separately downloaded months of a reanalysis carry their own scale_factor/add_offset
    a, b = _ds("2024-01-01", 24), _ds("2024-01-02", 24)
    _write(a, tmp_path / "g_1.nc")
    enc = {"t2": {"dtype": "int16", "scale_factor": 0.002, "add_offset": 265.0, "_FillValue": -32767, "zlib": True}}
    b.to_netcdf(tmp_path / "g_2.nc", encoding=enc)
    grid = open_grid(str(tmp_path / "g_*.nc"))
    t2 = decode(grid.dataset["t2"])
    want = xr.concat([a["t2"], b["t2"]], dim="time").transpose(*t2.dims).values
    np.testing.assert_allclose(t2.values, want, atol=0.006)  # within the coarser packing step
    assert t2.attrs["packing_step"] == pytest.approx(0.01)  # the larger of the two
