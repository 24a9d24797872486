"""GRIB inputs (editions 1 and 2) against the same values in CF NetCDF, written by ecCodes from its samples.

References outside lakefeed: ecCodes (the WMO GRIB codec) writes the files from its shipped sample
templates and decodes the values the NetCDF twin holds (``grib_factory.read_back``); the expected daily
precipitation is summed here with numpy from the per-hour amounts the test invented.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from grib_factory import LAT0, LON0, STEP, hourly_values, messages, netcdf_twin, write_grib
from shapely.geometry import box
from typer.testing import CliRunner

from lakefeed.exceptions import SourceError
from lakefeed.sources.forecasts import ISSUE, LEAD, open_forecasts
from lakefeed.sources.grids import open_grid

pytest.importorskip("cfgrib")


@pytest.fixture(autouse=True)
def _cache(tmp_path, monkeypatch):
    monkeypatch.setenv("LAKEFEED_CACHE_DIR", str(tmp_path / "cache"))


@pytest.fixture(scope="module")
def values() -> dict[str, np.ndarray]:
    return hourly_values(days=3)


def _zones(folder: Path) -> Path:
    """Two zones: one across several cells, one inside the single cell (row 1, column 2)."""
    wide = box(LON0 + 0.05, LAT0 - 0.6, LON0 + 0.8, LAT0 - 0.1)
    lat1, lon2 = LAT0 - STEP, LON0 + 2 * STEP
    cell = box(lon2 - 0.05, lat1 - 0.05, lon2 + 0.05, lat1 + 0.05)
    path = folder / "zones.gpkg"
    gpd.GeoDataFrame({"zone_id": ["wide", "cell"]}, geometry=[wide, cell], crs=4326).to_file(path)
    return path


def _zonal_daily(grid: Path, zones: Path, out: Path, *extra: str) -> pd.DataFrame:
    from lakefeed.cli import app

    args = ["zonal", str(grid), "--zones", str(zones), "--id-field", "zone_id", "--daily", "--out", str(out)]
    r = CliRunner().invoke(app, [*args, *extra])
    assert r.exit_code == 0, r.output
    return pd.read_parquet(out).sort_values(["zone", "date"]).reset_index(drop=True)


@pytest.mark.parametrize("edition", [2, 1])
def test_daily_drivers_from_grib_equal_netcdf(tmp_path, values, edition):
    grib = write_grib(tmp_path / f"analysis.grib{edition}", messages(values), edition=edition)
    nc = netcdf_twin(grib, tmp_path / "analysis.nc")
    zones = _zones(tmp_path)
    # no CF standard_name for 2d and tp in ecCodes: found through the mapping (cfgrib names)
    from_grib = _zonal_daily(
        grib, zones, tmp_path / "g.parquet", "--variable", "dewpoint_temperature=d2m", "--variable", "precipitation=tp"
    )
    from_nc = _zonal_daily(nc, zones, tmp_path / "n.parquet")
    # 4 UTC days touched, the 2 whole ones with values
    assert len(from_grib) == 2 * 4 and from_grib["air_temperature_mean"].notna().sum() == 2 * 2
    pd.testing.assert_frame_equal(from_grib, from_nc, rtol=2e-6, atol=1e-6)  # float32 precision


def test_accumulations_since_reset_and_per_step_give_the_same_daily_totals(tmp_path, values):
    zones = _zones(tmp_path)
    since = write_grib(tmp_path / "since.grib2", messages(values, accumulation="since_reset"))
    step = write_grib(tmp_path / "step.grib2", messages(values, accumulation="per_step"))
    mapping = ("--variable", "dewpoint_temperature=d2m", "--variable", "precipitation=tp")
    a = _zonal_daily(since, zones, tmp_path / "a.parquet", *mapping, "--accumulation", "since_reset")
    b = _zonal_daily(step, zones, tmp_path / "b.parquet", *mapping, "--accumulation", "per_step")
    cols = ["precipitation_sum", "shortwave_radiation_mean"]
    pd.testing.assert_frame_equal(a[cols], b[cols], rtol=1e-5, atol=1e-4)
    # reference: the invented hourly amounts of the single cell, summed per UTC day with numpy (m -> mm)
    cell = a[a.zone == "cell"]
    expected = values["tp"][:, 1, 2].reshape(3, 24).sum(axis=1) * 1000.0
    got = cell["precipitation_sum"].to_numpy()
    np.testing.assert_allclose(got[:3], expected, rtol=1e-5, atol=1e-4)  # amounts ending 01..24 h fill 3 days
    assert np.isnan(got[3])  # day 4 holds one hour only


def test_forecast_grib_maps_time_and_step_to_issue_and_lead(tmp_path, values):
    from grib_factory import Message, netcdf_twin  # noqa: F401

    issues = [pd.Timestamp("2024-03-01"), pd.Timestamp("2024-03-02")]
    fields = [
        Message(short, issue, 0, step, values[short][k * 24 + step - 1])
        for k, issue in enumerate(issues)
        for step in range(6, 25, 6)
        for short in ("2t", "tp")
    ]
    grib = write_grib(tmp_path / "fc.grib2", fields)
    archive = open_forecasts(str(grib))
    ds = archive.dataset
    assert ds["t2m"].dims == (ISSUE, LEAD, "latitude", "longitude")
    assert list(archive.issue_times) == issues
    assert list(archive.leads) == [pd.Timedelta(hours=h) for h in (6, 12, 18, 24)]
    assert archive.step == pd.Timedelta(hours=6)
    np.testing.assert_allclose(ds["t2m"].isel({ISSUE: 1, LEAD: 2}).values, values["2t"][24 + 17], atol=1e-3)
    assert ds["t2m"].attrs["standard_name"] == "air_temperature" and ds["tp"].attrs["units"] == "m"


def test_truncated_and_corrupt_grib_name_file_and_message(tmp_path, values):
    grib = write_grib(tmp_path / "ok.grib2", list(messages(values))[:12])
    data = grib.read_bytes()
    truncated = tmp_path / "truncated.grib2"
    truncated.write_bytes(data[:-40])
    with pytest.raises(SourceError, match=r"truncated\.grib2: message 12 .*truncated or corrupt"):
        open_grid(str(truncated))
    corrupt = tmp_path / "corrupt.grib2"
    bad = bytearray(data)
    second = data.find(b"GRIB", 4)
    first_end = data.rfind(b"7777", 0, second)
    bad[first_end : first_end + 4] = b"XXXX"  # end marker of message 1 destroyed
    corrupt.write_bytes(bytes(bad))
    with pytest.raises(SourceError, match=r"corrupt\.grib2: message 1 "):
        open_grid(str(corrupt))
    notgrib = tmp_path / "x.grib2"
    notgrib.write_bytes(b"NOPE" + data[4:])
    with pytest.raises(SourceError, match=r"x\.grib2: format is grib but the file does not start with 'GRIB'"):
        open_grid(str(notgrib), format="grib")


def test_index_files_go_to_the_cache_never_beside_read_only_inputs(tmp_path, values):
    folder = tmp_path / "inputs"
    folder.mkdir()
    grib = write_grib(folder / "a.grib2", list(messages(values))[:24])
    folder.chmod(stat.S_IRUSR | stat.S_IXUSR)
    try:
        g = open_grid(str(grib))
        assert g.dataset.sizes["time"] == 4
        assert sorted(p.name for p in folder.iterdir()) == ["a.grib2"]
    finally:
        folder.chmod(stat.S_IRWXU)
    assert list((Path(os.environ["LAKEFEED_CACHE_DIR"]) / "grib-index").glob("*.idx"))


def test_check_opens_grib_through_the_build_rules(tmp_path, values):
    from lakefeed.checks.grids import check_weather
    from lakefeed.config.sources import Accumulation, WeatherSource

    grib = write_grib(tmp_path / "a.grib1", messages(values), edition=1)
    lake = gpd.GeoDataFrame(geometry=[box(LON0 + 0.1, LAT0 - 0.5, LON0 + 0.5, LAT0 - 0.2)], crs=4326)
    acc = {"precipitation": Accumulation(kind="since_reset"), "shortwave_radiation": Accumulation(kind="since_reset")}
    src = WeatherSource(paths=[str(grib)], format="grib", accumulation=acc)
    res, period = check_weather(src, {"lake": lake})
    failed = [r for r in res if not r.ok]
    # without a mapping, the roles without a CF name are refused by the build's own rule
    assert any("dewpoint_temperature" in r.message for r in failed), res
    src = src.model_copy(update={"variables": {"dewpoint_temperature": "d2m", "precipitation": "tp"}})
    res, period = check_weather(src, {"lake": lake})
    assert all(r.ok for r in res), [str(r) for r in res if not r.ok]
    assert period is not None and str(period) == "2024-03-01 .. 2024-03-04"
    # the build agrees: the same source opens and its roles resolve
    from lakefeed.sources.grids import select_roles

    grid = open_grid(src.paths, format=src.format)
    roles = select_roles(grid, ["air_temperature", "precipitation"], mapping=src.variables, accumulation=acc)
    assert roles["air_temperature"].attrs["units"] == "K" and roles["precipitation"].attrs["units"] == "m"


def test_grib_dataset_equals_netcdf_values(tmp_path, values):
    grib = write_grib(tmp_path / "a.grib2", list(messages(values))[:48])
    nc = netcdf_twin(grib, tmp_path / "a.nc")
    g, n = open_grid(str(grib)).dataset, xr.open_dataset(nc)
    np.testing.assert_array_equal(g["time"].values, n["time"].values)
    np.testing.assert_allclose(g["t2m"].values, n["t2m"].values, rtol=1e-7)
