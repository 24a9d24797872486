"""Grid checks on in-memory datasets: variables and units, accumulation, extent (incl. 0..360), forecast axes."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import _mini
import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from shapely.geometry import box

from lakefeed.checks import CheckResult
from lakefeed.checks._grid_values import zone_cell_results
from lakefeed.checks.grids import check_forecast, grid_extent_results, weather_variables
from lakefeed.config import Accumulation, ForecastSource

F = Path("grid.nc")
ACC = {"shortwave_radiation": Accumulation(kind="since_reset"), "precipitation": Accumulation(kind="since_reset")}


def grid() -> xr.Dataset:
    return _mini.weather_dataset(pd.date_range("2024-01-01", periods=2, freq="h"))


def run(ds: xr.Dataset, **kw: Any) -> list[CheckResult]:
    opts = {"variables": {}, "units": {}, "accumulation": ACC, "section": "weather", "file": F, **kw}
    return weather_variables(ds, **opts)


def test_all_roles_found_by_standard_name() -> None:
    (res,) = run(grid())
    assert res.ok and "6 of 6 roles" in res.message


def test_missing_standard_name_needs_a_mapping() -> None:
    ds = grid()
    del ds["air_temp"].attrs["standard_name"]
    res, found = run(ds)
    assert not res.ok and found.ok and "5 of 6 roles" in found.message
    # the build's own message (lakefeed.sources.grids.find_variable)
    assert "no variable with standard_name 'air_temperature' and no mapping" in res.message
    assert "add the file's variable name under that key" in res.message
    (res,) = run(ds, variables={"air_temperature": "air_temp"})
    assert res.ok and "by weather.variables.air_temperature" in res.message


def test_mapping_to_an_absent_variable_and_unknown_role_did_you_mean() -> None:
    ds = grid()
    del ds["air_temp"].attrs["standard_name"]
    res = run(ds, variables={"air_temperature": "t2m", "air_temperatur": "air_temp"})
    msgs = " | ".join(r.message for r in res if not r.ok)
    assert "weather.variables.air_temperatur: unknown role; did you mean 'air_temperature'?" in msgs
    assert "variable 't2m' (weather.variables.air_temperature in sources.yaml) is not in the file" in msgs


def test_units_must_convert() -> None:
    ds = grid()
    ds["wind_u"].attrs["units"] = "K"
    res = [r for r in run(ds) if not r.ok]
    # the build's own rule and words (lakefeed.sources.grid_rules.role_problems)
    assert len(res) == 1 and "variable 'wind_u' (eastward_wind) has units 'K'" in res[0].message
    assert "which is not a speed unit (convertible to 'm s-1')" in res[0].message
    # a unit declared in the config wins over the file's attribute
    assert all(r.ok for r in run(ds, units={"eastward_wind": "km h-1"}))


def test_amounts_need_an_accumulation_kind() -> None:
    res = [r for r in run(grid(), accumulation={}) if not r.ok]
    assert {r.message.split(" (")[1].split(")")[0] for r in res} == {"shortwave_radiation", "precipitation"}
    assert res[0].hint.startswith("set weather.accumulation.")


def _lake(lon: float, lat: float) -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(geometry=gpd.points_from_xy([lon], [lat]).buffer(0.01), crs="EPSG:4326")


def test_lake_inside_and_outside_the_grid() -> None:
    ds = grid()  # lon 8.5..9.5, lat 47.3..48.3 (centres), 0.1 degree cells
    (ok,) = grid_extent_results(ds, {"lake": _lake(9.0, 47.8)}, section="weather", file=F)
    assert ok.ok and "grid 8.45..9.55 E, 47.25..48.35 N" in ok.message
    (bad,) = grid_extent_results(ds, {"lake": _lake(10.0, 47.8)}, section="weather", file=F)
    assert not bad.ok and "lake (9.990..10.010 E" in bad.message


def test_longitudes_0_to_360() -> None:
    """A grid in 0..360 longitudes must still contain a lake at -3 E (= 357 E)."""
    ds = _mini.weather_dataset(pd.date_range("2024-01-01", periods=1, freq="h"), lon0=356.5)
    (res,) = grid_extent_results(ds, {"lake": _lake(-3.0, 47.8)}, section="weather", file=F)
    assert res.ok, res.message
    (res,) = grid_extent_results(ds, {"lake": _lake(3.0, 47.8)}, section="weather", file=F)
    assert not res.ok


def test_projected_lake_is_reprojected_before_comparing() -> None:
    (res,) = grid_extent_results(grid(), {"lake": _mini.lake_layer()}, section="weather", file=F)
    assert res.ok


def test_forecast_without_lead_dimension(tmp_path: Path) -> None:
    ds = _mini.forecast_dataset(pd.date_range("2024-01-01", periods=2, freq="D")).isel(forecast_period=0, drop=True)
    ds.to_netcdf(tmp_path / "fc.nc")
    src = ForecastSource(paths=[str(tmp_path / "fc.nc")], accumulation=ACC)
    res, period = check_forecast(src, {"lake": _mini.lake_layer()})
    bad = [r for r in res if not r.ok]
    assert len(bad) == 1 and "no forecast_period/lead dimension" in bad[0].message
    assert str(period) == "2024-01-01 .. 2024-01-02"


def test_forecast_files_missing_name_the_key(tmp_path: Path) -> None:
    src = ForecastSource(paths=[str(tmp_path / "fc_*.nc")])
    res, period = check_forecast(src, {})
    assert period is None
    assert res[0].message == f"forecast.paths[0]: no file matches {tmp_path / 'fc_*.nc'}"


@pytest.mark.parametrize("missing", ["forecast_reference_time"])
def test_forecast_without_reference_time(tmp_path: Path, missing: str) -> None:
    ds = _mini.forecast_dataset(pd.date_range("2024-01-01", periods=1, freq="D")).isel({missing: 0}, drop=True)
    ds.to_netcdf(tmp_path / "fc.nc")
    res, _ = check_forecast(ForecastSource(paths=[str(tmp_path / "fc.nc")], accumulation=ACC), {})
    assert any("no forecast_reference_time" in r.message for r in res if not r.ok)


def test_zone_cells_counted_as_the_build_weighs_them() -> None:
    """The check counts the cells the weights carry (partly covered ones too), not cell centres inside a zone."""
    from lakefeed.geometry.weights import zone_weights
    from lakefeed.sources.grids import Grid

    ds = grid()  # 0.1 degree cells, centres at lon 8.5 + 0.1 k, lat 48.3 - 0.1 k
    g = Grid(dataset=ds, files=(F,))
    lake = box(8.97, 47.77, 9.03, 47.83)  # inside the cell centred (9.0, 47.8): no other centre in it
    catchment = box(8.92, 47.72, 9.08, 47.88)  # overlaps 3 x 3 cells, holds only one cell centre
    w = zone_weights({"lake": lake, "catchment": catchment}, g.lat, g.lon)
    lake_res, catch_res = zone_cell_results(g, w, "air_temp")
    assert lake_res.ok and "lake: all 1 cells the build weighs hold data" in lake_res.message
    # the build weighs every cell the box overlaps: 3 x 3 (exact coverage, exactextract's rule), not 1 centre
    assert "catchment: all 9 cells the build weighs hold data" in catch_res.message
    assert w.cells("catchment").size == np.count_nonzero(w.matrix[1].toarray())
    ds["air_temp"][:, 5, 5] = np.nan
    lake_res, catch_res = zone_cell_results(Grid(dataset=ds, files=(F,)), w, "air_temp")
    assert lake_res.status == "warning" and "lake: 1 of the 1 cells the build weighs are no-data" in lake_res.message
    assert catch_res.status == "warning" and "catchment: 1 of the 9 cells" in catch_res.message


def test_weather_files_gap_overlap_and_odd_grid(tmp_path: Path) -> None:
    from lakefeed.checks._open import scan_files

    t = pd.date_range("2024-01-01", periods=24, freq="h")
    for name, times in (("w1.nc", t), ("w3.nc", t + pd.Timedelta(days=3))):
        _mini.weather_dataset(times).to_netcdf(tmp_path / name)
    files = [tmp_path / "w1.nc", tmp_path / "w3.nc"]
    res, period = scan_files(files, "time", section="weather")
    assert str(period) == "2024-01-01 .. 2024-01-04"
    (gap,) = [r for r in res if r.status == "warning"]
    # the first file ends 2024-01-01 23:00, the second starts 2024-01-04 00:00: 48 hourly steps are missing
    assert "gap from 2024-01-01 23:00:00 (w1.nc) to 2024-01-04 00:00:00 (w3.nc): 2 days 00:00:00 missing" in gap.message
    _mini.weather_dataset(t + pd.Timedelta(hours=12), lon0=8.6).to_netcdf(tmp_path / "w2.nc")
    res, _ = scan_files([*files, tmp_path / "w2.nc"], "time", section="weather")
    msgs = [r.message for r in res]
    assert any(m.startswith("w2.nc: grid or variables differ from w1.nc") for m in msgs)
    assert any("w2.nc starts at 2024-01-01 12:00:00, before w1.nc ends" in m for m in msgs)
