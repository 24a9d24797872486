"""Re-forecast feature rows: observed drivers up to the issue date, forecasts after it, persistence at issue."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lakefeed.exceptions import FeatureError
from lakefeed.features.reforecast import forecast_days, reforecast_rows

DAYS = pd.date_range("2021-05-01", "2021-06-30", freq="D")


def _inputs(obs_value=1.0, fc_value=10.0):
    drivers = pd.DataFrame({"air_temperature_mean": np.full(len(DAYS), obs_value)}, index=DAYS)
    rows = []
    for d in DAYS:
        for k in range(1, 10):
            rows.append({"issue_date": d, "date": d + pd.Timedelta(days=k), "air_temperature_mean": fc_value + k / 100})
    fc = pd.DataFrame(rows)
    targets = pd.DataFrame(
        {
            "aoi": "bay",
            "target_date": pd.to_datetime(["2021-06-01", "2021-06-05", "2021-06-20"]),
            "chla": [5.0, 7.0, 9.0],
        }
    )
    return targets, drivers, fc


def test_windows_mix_observed_and_forecast_days():
    """Lead 3, target 5 June: issue 2 June; window 3d = 2 June observed (1.0) + 3, 4 June from the forecast
    issued 2 June (leads 1, 2: 10.01, 10.02) -> mean (1 + 10.01 + 10.02) / 3 (worked by hand)."""
    targets, drivers, fc = _inputs()
    rows = reforecast_rows(targets, drivers, fc, leads=[3], windows=[1, 3, 5], stats={"air_temperature_mean": ["mean"]})
    r = rows[rows["target_date"] == "2021-06-05"].iloc[0]
    assert r["lead_days"] == 3 and r["issue_date"] == pd.Timestamp("2021-06-02")
    assert r["air_temperature_mean__mean_1d"] == pytest.approx(10.02)
    assert r["air_temperature_mean__mean_3d"] == pytest.approx((1 + 10.01 + 10.02) / 3)
    assert r["air_temperature_mean__mean_5d"] == pytest.approx((3 * 1 + 10.01 + 10.02) / 5)
    assert r["forecast_days"] == 2 and r["forecast_fraction"] == pytest.approx(2 / 5)
    # persistence at the issue date: the 1 June observation (5.0), 4 days old at the target
    assert r["persistence_chla"] == 5.0 and r["persistence_age_days"] == 4
    assert "forecast_drivers" in r["flags"]


def test_lead_one_uses_no_forecast_day_and_columns_match_hindcast():
    from lakefeed.features.pit import build_feature_rows

    targets, drivers, fc = _inputs()
    rows = reforecast_rows(targets, drivers, fc, leads=[1, 10], windows=[3])
    hind = build_feature_rows(targets, drivers, lead=0, windows=[3])
    extra = set(rows.columns) - set(hind.columns)
    assert extra == {"forecast_days", "forecast_fraction"}
    one = rows[rows["lead_days"] == 1]
    assert (one["forecast_days"] == 0).all()
    np.testing.assert_allclose(one["air_temperature_mean__mean_3d"], 1.0)
    ten = rows[rows["lead_days"] == 10]
    assert (ten["forecast_days"] == 9).all() and (ten["forecast_fraction"] == 1.0).all()
    assert forecast_days(3, include_target_day=True) == 3


def test_bad_inputs():
    targets, drivers, fc = _inputs()
    with pytest.raises(FeatureError, match="> 0"):
        reforecast_rows(targets, drivers, fc, leads=[0])
    with pytest.raises(FeatureError, match="two rows"):
        reforecast_rows(targets, drivers, pd.concat([fc, fc.iloc[:1]]), leads=[1])


@settings(max_examples=25, deadline=None)
@given(st.integers(1, 9), st.integers(0, 2), st.floats(-50, 50))
def test_no_look_ahead(lead, which, delta):
    """Property: changing observed drivers after a row's issue date, or forecasts issued on any other
    date, changes nothing in that row."""
    targets, drivers, fc = _inputs()
    base = reforecast_rows(targets, drivers, fc, leads=[lead], windows=[1, 5, 10])
    issue = base["issue_date"].iloc[which]
    d2 = drivers.copy()
    d2.loc[d2.index > issue, "air_temperature_mean"] += delta
    f2 = fc.copy()
    f2.loc[f2["issue_date"] != issue, "air_temperature_mean"] += delta
    changed = reforecast_rows(targets, d2, f2, leads=[lead], windows=[1, 5, 10])
    pd.testing.assert_frame_equal(base.iloc[[which]], changed.iloc[[which]])
