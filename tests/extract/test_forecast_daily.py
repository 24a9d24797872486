"""Forecast steps to daily drivers per lead: de-accumulation, lead numbering, local days, horizon."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from lakefeed.exceptions import ExtractError
from lakefeed.extract.forecast_daily import (
    check_increments,
    deaccumulate_forecast,
    first_full_day,
    to_daily_by_lead,
)

ISSUE, LEAD = "forecast_reference_time", "forecast_period"


def _steps(issues, *, step_h=6, horizon_h=240, zones=("lake",), precip=1.5, temp=10.0):
    leads = pd.to_timedelta(np.arange(0, horizon_h + 1, step_h), unit="h")
    shape = (len(issues), len(leads), len(zones))
    hours = np.asarray(leads / pd.Timedelta(hours=1))
    t = temp + np.zeros(shape) + 0.01 * hours[None, :, None]
    pr = np.full(shape, precip)
    pr[:, 0] = np.nan  # the step ending at lead 0 lies before the issue
    dims = (ISSUE, LEAD, "zone")
    return xr.Dataset(
        {
            "air_temperature": (dims, t),
            "dewpoint": (dims, t - 4),
            "wind_speed": (dims, np.full(shape, 2.0)),
            "precipitation": (dims, pr),
            "shortwave_radiation": (dims, np.full(shape, 150.0)),
            "valid_fraction": (dims, np.ones(shape)),
        },
        coords={ISSUE: issues, LEAD: leads, "zone": list(zones)},
    )


def test_first_full_day():
    """Lead 1 is the first full local day after issue (00 UTC is 01:00 in Berlin in winter, 02:00 in summer)."""
    t = pd.DatetimeIndex(["2021-01-10 00:00", "2021-07-10 00:00", "2021-07-09 22:00"])
    assert list(first_full_day(t, "Europe/Berlin").strftime("%m-%d")) == ["01-11", "07-11", "07-10"]
    assert list(first_full_day(t[:1], "UTC").strftime("%m-%d")) == ["01-10"]


@pytest.mark.parametrize(
    ("tz", "first_lead_date", "n_leads"), [("Europe/Berlin", "2021-01-11", 9), ("UTC", "2021-01-10", 10)]
)
def test_leads_and_horizon(tz, first_lead_date, n_leads):
    """6-hourly 240 h forecast issued 00 UTC: full local days 1..9 at UTC+1 (day 10 ends at 263 h), 1..10 at UTC."""
    issues = pd.date_range("2021-01-10", periods=2, freq="D")
    daily = to_daily_by_lead(_steps(issues), tz=tz, latitude={"lake": 48.5})
    first = daily[daily["issue_time"] == issues[0]]
    assert first["lead_days"].tolist() == list(range(1, n_leads + 1))
    assert str(first["date"].iloc[0].date()) == first_lead_date
    assert (first["date"] - first["issue_date"]).dt.days.tolist() == first["lead_days"].tolist()
    # 4 steps of 1.5 mm in every full day; wind and radiation passed through
    np.testing.assert_allclose(first["precipitation_sum"], 6.0)
    np.testing.assert_allclose(first["shortwave_radiation_mean"], 150.0)
    assert first["flags"].str.contains("missing_hours").sum() == 0


def test_lead_dependent_values_land_on_their_day():
    """Temperature rises 0.01 K per lead hour: the lead-k day mean equals the mean of its four stamps."""
    issues = pd.DatetimeIndex(["2021-03-01"])
    daily = to_daily_by_lead(_steps(issues), tz="UTC", latitude={"lake": 48.5})
    # UTC lead k covers stamps 24(k-1) .. 24(k-1)+18 h: mean lead hour 24(k-1) + 9
    expected = 10.0 + 0.01 * (24 * (daily["lead_days"].to_numpy() - 1) + 9)
    np.testing.assert_allclose(daily["air_temperature_mean"], expected)


def test_deaccumulate_since_forecast_start():
    """Totals since the forecast start 0, 1, 3, 6 mm at leads 0, 6, 12, 18 h give steps NaN, 1, 2, 3."""
    leads = pd.to_timedelta([0, 6, 12, 18], unit="h")
    da = xr.DataArray(
        np.array([[0.0, 1.0, 3.0, 6.0]]),
        dims=(ISSUE, LEAD),
        coords={ISSUE: pd.DatetimeIndex(["2021-01-01"]), LEAD: leads},
    )
    inc, bad = deaccumulate_forecast(da, kind="since_reset")
    np.testing.assert_allclose(inc.values[0], [np.nan, 1.0, 2.0, 3.0])
    assert not bool(bad.any())
    per, _ = deaccumulate_forecast(da, kind="per_step")
    np.testing.assert_allclose(per.values[0], [np.nan, 1.0, 3.0, 6.0])


def test_mis_declared_accumulation_is_an_error():
    """Per-step totals declared as 'since forecast start' give negative increments: error naming issue and lead."""
    leads = pd.to_timedelta([0, 6, 12, 18], unit="h")
    da = xr.DataArray(
        np.array([[0.0, 3.0, 1.0, 2.0]]),
        dims=(ISSUE, LEAD),
        coords={ISSUE: pd.DatetimeIndex(["2021-01-01"]), LEAD: leads},
        name="precip",
    )
    _, bad = deaccumulate_forecast(da, kind="since_reset")
    with pytest.raises(ExtractError, match="lead 0 days 12:00:00 of the forecast issued 2021-01-01"):
        check_increments(bad, da[ISSUE].values, da[LEAD].values, name="precip")


def test_deaccumulation_stays_lazy():
    dask = pytest.importorskip("dask.array")
    leads = pd.to_timedelta([0, 6, 12], unit="h")
    da = xr.DataArray(
        dask.ones((2, 3, 4), chunks=(1, 3, 4)),
        dims=(ISSUE, LEAD, "x"),
        coords={ISSUE: pd.date_range("2021-01-01", periods=2), LEAD: leads},
    )
    inc, bad = deaccumulate_forecast(da, kind="since_reset")
    assert inc.chunks is not None and bad.chunks is not None
