"""Honest fitting (expanding refits, leave-one-year-out), no look-ahead and the before/after table."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from lakefeed.exceptions import ExtractError
from lakefeed.extract.forecast_evaluation import (
    bias_table,
    expanding_adjustment,
    leave_one_year_out,
    overlap_days,
)

VARS = ["air_temperature_mean", "precipitation_sum"]
OPTIONS = {"quantiles": 20, "season": "month", "month_window": 1, "min_values": 20}


def synthetic(days: int = 365 * 2, leads=(1, 3, 5), seed: int = 3, start: str = "2020-01-01"):
    """Reanalysis plus forecasts with a planted bias: +0.3 K + 0.2 K per lead day; precipitation x (1 + 0.1 lead)."""
    rng = np.random.default_rng(seed)
    dates = pd.date_range(start, periods=days, freq="D")
    doy = dates.dayofyear.to_numpy()
    temp = 9 + 9 * np.sin(2 * np.pi * (doy - 110) / 365) + rng.normal(0, 2.5, days)
    rain = np.where(rng.random(days) < 0.45, rng.gamma(0.9, 5.0, days), 0.0)
    ref = pd.DataFrame({"zone": "lake", "date": dates, "air_temperature_mean": temp, "precipitation_sum": rain})
    rows = []
    for h in leads:
        issue = dates - pd.Timedelta(days=h)
        noise = rng.normal(0, 0.5 + 0.2 * h, days)
        rows.append(
            pd.DataFrame(
                {
                    "zone": "lake",
                    "issue_date": issue,
                    "lead_days": h,
                    "date": dates,
                    "air_temperature_mean": temp + 0.3 + 0.2 * h + noise,
                    "precipitation_sum": rain * (1 + 0.1 * h),
                }
            )
        )
    return pd.concat(rows, ignore_index=True), ref


def test_expanding_adjustment_removes_planted_bias():
    """Planted: temperature bias 0.3 + 0.2 h K and precipitation x (1 + 0.1 h). After the out-of-sample
    (expanding) adjustment the mean bias per lead is below 0.15 K and 10 % of mean precipitation
    (sampling noise of a monthly refit on the past months only; common practice)."""
    fc, ref = synthetic()
    res = expanding_adjustment(fc, ref, variables=VARS, min_overlap_days=60, options=OPTIONS)
    done = res.adjusted["air_temperature_mean"].notna()
    assert res.unadjusted_issues and min(res.unadjusted_issues) < pd.Timestamp("2020-03-01")
    table = bias_table(fc[done], res.adjusted[done], ref, variables=VARS)
    t = table[table["variable"] == "air_temperature_mean"].set_index("lead_days")
    np.testing.assert_allclose(t["mean_bias_raw"], [0.5, 0.9, 1.3], atol=0.1)
    assert (t["mean_bias_adjusted"].abs() < 0.15).all()
    assert (t["ks_adjusted"] < t["ks_raw"]).all()
    assert (t["quantile_rmse_adjusted"] < t["quantile_rmse_raw"]).all()
    p = table[table["variable"] == "precipitation_sum"].set_index("lead_days")
    assert p["mean_bias_raw"].is_monotonic_increasing
    mean_rain = ref["precipitation_sum"].mean()
    assert (p["mean_bias_adjusted"].abs() < 0.1 * mean_rain).all()


def test_no_look_ahead():
    """The adjusted value of an issue dated t does not change when the reanalysis after t changes."""
    fc, ref = synthetic(days=300)
    cut = pd.Timestamp("2020-07-15")
    first = expanding_adjustment(fc, ref, variables=VARS, min_overlap_days=45, options=OPTIONS).adjusted
    altered = ref.copy()
    later = altered["date"] > cut
    altered.loc[later, "air_temperature_mean"] += 50.0
    altered.loc[later, "precipitation_sum"] *= 7.0
    second = expanding_adjustment(fc, altered, variables=VARS, min_overlap_days=45, options=OPTIONS).adjusted
    upto = (fc["issue_date"] <= cut).to_numpy()
    pd.testing.assert_frame_equal(first[upto], second[upto])
    assert (
        first.loc[upto, "fitted_through"].dropna()
        < first.loc[upto, "issue_date"][first.loc[upto, "fitted_through"].notna()]
    ).all()
    assert not first[~upto]["air_temperature_mean"].equals(second[~upto]["air_temperature_mean"])


@settings(max_examples=5, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(0, 190), st.floats(-30, 30), st.integers(0, 10_000))
def test_no_look_ahead_property(cut_day, shift, seed):
    """Property: any change of the reanalysis after day t leaves every adjustment issued on or before t unchanged."""
    fc, ref = synthetic(days=200, leads=(1, 2), seed=seed)
    cut = pd.Timestamp("2020-01-01") + pd.Timedelta(days=cut_day)
    altered = ref.copy()
    later = altered["date"] > cut
    altered.loc[later, "air_temperature_mean"] += shift
    opts = dict(OPTIONS, quantiles=10)
    a = expanding_adjustment(fc, ref, variables=VARS, min_overlap_days=30, options=opts).adjusted
    b = expanding_adjustment(fc, altered, variables=VARS, min_overlap_days=30, options=opts).adjusted
    upto = (fc["issue_date"] <= cut).to_numpy()
    pd.testing.assert_frame_equal(a[upto], b[upto])


def test_leave_one_year_out():
    fc, ref = synthetic(days=365 * 3)
    adj = leave_one_year_out(fc, ref, variables=VARS, min_overlap_days=300, options=OPTIONS)
    table = bias_table(fc, adj, ref, variables=VARS, method="leave_one_year_out")
    t = table[table["variable"] == "air_temperature_mean"]
    assert (t["mean_bias_adjusted"].abs() < 0.15).all()
    with pytest.raises(ExtractError, match="at least two years"):
        leave_one_year_out(fc[fc["issue_date"].dt.year == 2021], ref, variables=VARS, min_overlap_days=30)


def test_too_short_overlap_leaves_everything_unadjusted():
    fc, ref = synthetic(days=40)
    assert overlap_days(fc, ref, VARS) == 40
    res = expanding_adjustment(fc, ref, variables=VARS, min_overlap_days=365, options=OPTIONS)
    assert res.adjusted["air_temperature_mean"].isna().all()
    assert len(res.unadjusted_issues) == fc["issue_date"].nunique()
    assert res.tables == {}


def test_bias_table_hand_worked():
    """Bias = mean(forecast - reanalysis); KS of identical samples is 0 and of disjoint samples 1 (definition)."""
    dates = pd.date_range("2020-01-01", periods=4, freq="D")
    ref = pd.DataFrame({"zone": "z", "date": dates, "air_temperature_mean": [1.0, 2.0, 3.0, 4.0]})
    raw = pd.DataFrame({"zone": "z", "lead_days": 1, "date": dates, "air_temperature_mean": [11.0, 12.0, 13.0, 14.0]})
    adj = raw.assign(air_temperature_mean=[1.0, 2.0, 3.0, 4.0])
    t = bias_table(raw, adj, ref, variables=["air_temperature_mean"], units={"air_temperature_mean": "degC"})
    row = t.iloc[0]
    assert row["mean_bias_raw"] == 10.0 and row["mean_bias_adjusted"] == 0.0
    assert row["ks_raw"] == 1.0 and row["ks_adjusted"] == 0.0
    assert row["quantile_rmse_raw"] == pytest.approx(10.0) and row["unit"] == "degC"
