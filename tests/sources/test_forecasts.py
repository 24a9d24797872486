"""Opening forecast archives: dims, leads, issue gaps and bad inputs."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from lakefeed.exceptions import SourceError
from lakefeed.sources.forecasts import ISSUE, LEAD, find_issue_gaps, open_forecasts


def make_archive(
    issues: pd.DatetimeIndex,
    *,
    step_h: int = 6,
    horizon_h: int = 240,
    lead_as: str = "timedelta",
    lead_name: str = "forecast_period",
    temp_k: float = 283.15,
    precip_m_per_step: float = 0.001,
) -> xr.Dataset:
    """A tiny CF forecast archive on a 0.25 degree grid (latitude descending), per-step amounts."""
    leads = pd.to_timedelta(np.arange(0, horizon_h + 1, step_h), unit="h")
    lat = np.array([48.75, 48.5, 48.25])
    lon = np.array([9.0, 9.25, 9.5, 9.75])
    shape = (len(issues), len(leads), lat.size, lon.size)
    lead_hours = np.asarray(leads / pd.Timedelta(hours=1))
    temp = temp_k + 0.1 * lead_hours[None, :, None, None] / 24 + np.zeros(shape)

    def var(values, sn, units):
        return (
            ("forecast_reference_time", lead_name, "latitude", "longitude"),
            values,
            {"standard_name": sn, "units": units},
        )

    coords = {
        "forecast_reference_time": ("forecast_reference_time", issues, {"standard_name": "forecast_reference_time"}),
        "latitude": ("latitude", lat, {"standard_name": "latitude", "units": "degrees_north"}),
        "longitude": ("longitude", lon, {"standard_name": "longitude", "units": "degrees_east"}),
    }
    if lead_as == "timedelta":
        coords[lead_name] = (lead_name, leads, {"standard_name": "forecast_period"})
    elif lead_as == "hours":
        coords[lead_name] = (lead_name, lead_hours, {"standard_name": "forecast_period", "units": "hours"})
    elif lead_as == "text":
        coords[lead_name] = (
            lead_name,
            np.array([f"T+{int(h)}" for h in lead_hours]),
            {"standard_name": "forecast_period"},
        )
    per_step = np.full(shape, precip_m_per_step)
    per_step[:, 0] = 0.0
    sw = np.full(shape, 200.0 * step_h * 3600)
    sw[:, 0] = 0.0
    return xr.Dataset(
        {
            "air_temp": var(temp, "air_temperature", "K"),
            "dewpoint": var(temp - 5, "dew_point_temperature", "K"),
            "wind_u": var(np.full(shape, 3.0), "eastward_wind", "m s-1"),
            "wind_v": var(np.full(shape, 4.0), "northward_wind", "m s-1"),
            "sw_down": var(sw, "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air", "J m-2"),
            "precip": var(per_step, "lwe_thickness_of_precipitation_amount", "m"),
        },
        coords=coords,
    )


def write(ds: xr.Dataset, path: Path) -> Path:
    ds.to_netcdf(path)
    return path


def test_open_normalises_dims_and_leads(tmp_path):
    issues = pd.date_range("2021-01-01", periods=5, freq="D")
    f = write(make_archive(issues, lead_as="hours", lead_name="step"), tmp_path / "fc.nc")
    arc = open_forecasts(str(f))
    assert tuple(arc.dataset["air_temp"].dims) == (ISSUE, LEAD, "latitude", "longitude")
    assert arc.step == pd.Timedelta(hours=6)
    assert arc.leads[-1] == pd.Timedelta(hours=240)
    assert list(arc.issue_times) == list(issues)
    assert arc.issue_gaps == ()
    grid = arc.as_grid()
    assert grid.dataset.sizes["time"] == 5 * 41
    assert pd.Timestamp(grid.dataset["time"].values[42]) == issues[1] + pd.Timedelta(hours=6)


def test_several_files_and_issue_gaps_reported(tmp_path):
    a = pd.date_range("2021-01-01", periods=3, freq="D")
    b = pd.date_range("2021-01-06", periods=2, freq="D")
    write(make_archive(a), tmp_path / "fc_1.nc")
    write(make_archive(b), tmp_path / "fc_2.nc")
    arc = open_forecasts(str(tmp_path / "fc_*.nc"))
    assert len(arc.issue_times) == 5
    assert arc.issue_gaps == ("2 issue(s) missing between 2021-01-03 00:00 and 2021-01-06 00:00 UTC",)
    assert find_issue_gaps(pd.date_range("2021-01-01", periods=3, freq="D"), pd.Timedelta(days=1)) == []


def test_archive_without_lead_dimension_is_an_error(tmp_path):
    ds = make_archive(pd.date_range("2021-01-01", periods=2, freq="D")).isel(forecast_period=0, drop=True)
    f = write(ds, tmp_path / "nolead.nc")
    with pytest.raises(SourceError, match="no lead-time dimension"):
        open_forecasts(str(f))


def test_unparseable_lead_is_an_error(tmp_path):
    f = write(make_archive(pd.date_range("2021-01-01", periods=2, freq="D"), lead_as="text"), tmp_path / "bad.nc")
    with pytest.raises(SourceError, match="cannot be read as a time span"):
        open_forecasts(str(f))


def test_lead_with_non_time_units_is_an_error(tmp_path):
    ds = make_archive(pd.date_range("2021-01-01", periods=2, freq="D"), lead_as="hours")
    ds["forecast_period"].attrs["units"] = "metres"
    f = write(ds, tmp_path / "bad_units.nc")
    with pytest.raises(SourceError, match="not a time unit"):
        open_forecasts(str(f))


def test_duplicate_issues_across_files_are_an_error(tmp_path):
    issues = pd.date_range("2021-01-01", periods=2, freq="D")
    write(make_archive(issues), tmp_path / "a.nc")
    write(make_archive(issues), tmp_path / "b.nc")
    with pytest.raises(SourceError, match="appears twice"):
        open_forecasts([str(tmp_path / "a.nc"), str(tmp_path / "b.nc")])
