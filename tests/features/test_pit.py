"""Point-in-time rows: issue dates, persistence baseline, forecast drivers, no look-ahead."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lakefeed.features import build_feature_rows, calendar_features

LABEL = ["chla"]


def _drivers(n: int = 60, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    days = pd.date_range("2024-01-01", periods=n)
    return pd.DataFrame(
        {"precipitation_sum": rng.gamma(0.5, 3, n), "air_temperature_mean": rng.normal(12, 3, n)}, index=days
    )


def _targets() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "aoi": ["a", "a", "a", "b", "b"],
            "date": pd.to_datetime(["2024-01-10", "2024-01-20", "2024-02-05", "2024-01-18", "2024-02-05"]),
            "chla": [2.0, 3.0, 4.0, 10.0, 11.0],
        }
    )


def test_lead_zero_persistence_and_ages() -> None:
    rows = build_feature_rows(_targets(), _drivers(), lead=0, windows=[1, 3])
    a = rows[rows["aoi"] == "a"]
    assert a["issue_date"].tolist() == a["target_date"].tolist()
    assert np.isnan(a["persistence_chla"].iloc[0]) and "no_prior_observation" in a["flags"].iloc[0]
    assert a["persistence_chla"].tolist()[1:] == [2.0, 3.0]  # previous observation, never the target itself
    assert a["persistence_age_days"].tolist()[1:] == [10.0, 16.0]
    assert a["days_since_prev_obs"].tolist()[1:] == [10.0, 16.0]
    b = rows[rows["aoi"] == "b"]
    assert b["persistence_chla"].tolist()[1] == 10.0  # AOIs do not mix


def test_lead_five_uses_only_data_known_at_issue() -> None:
    d = _drivers()
    rows = build_feature_rows(_targets(), d, lead=5, windows=[1, 3, 10], max_missing_fraction=0.5)
    r = rows[(rows["aoi"] == "a") & (rows["target_date"] == "2024-01-20")].iloc[0]
    assert r["issue_date"] == pd.Timestamp("2024-01-15")
    # observation of 10 Jan is known at issue (15 Jan); age at target 10 d, at issue 5 d
    assert r["persistence_chla"] == 2.0 and r["persistence_age_days"] == 10 and r["days_since_prev_obs"] == 5
    # the 1- and 3-day windows (17..19 Jan) lie after the issue date: missing without forecasts
    assert np.isnan(r["precipitation_sum__sum_1d"]) and np.isnan(r["precipitation_sum__sum_3d"])
    # 10-day window 10..19 Jan: 4 days unknown (16..19) <= 50 %: the mean over the 6 known days
    known = d.loc["2024-01-10":"2024-01-15", "air_temperature_mean"]
    assert r["air_temperature_mean__mean_10d"] == pytest.approx(known.mean(), rel=1e-12)


def test_forecast_drivers_fill_days_after_issue() -> None:
    d = _drivers()
    issue = pd.Timestamp("2024-01-15")
    fc = pd.DataFrame(
        {
            "issue_date": issue,
            "date": pd.date_range(issue, periods=6),
            "precipitation_sum": [100.0, 1.0, 2.0, 3.0, 4.0, 5.0],
            "air_temperature_mean": 20.0,
        }
    )
    t = pd.DataFrame({"aoi": ["a"], "date": [pd.Timestamp("2024-01-20")], "chla": [1.0]})
    r = build_feature_rows(t, d, lead=5, windows=[3, 10], forecast_drivers=fc).iloc[0]
    # 3-day window 17..19 Jan: forecast days 2, 3, 4 after issue
    assert r["precipitation_sum__sum_3d"] == 2.0 + 3.0 + 4.0
    # 10-day window: observed 10..15 Jan (the issue day is observed, not forecast) + forecast 16..19 Jan
    want = d.loc["2024-01-10":"2024-01-15", "precipitation_sum"].sum() + 1 + 2 + 3 + 4
    assert r["precipitation_sum__sum_10d"] == pytest.approx(want, rel=1e-12)
    assert "forecast_drivers" in r["flags"]


def test_target_dates_outside_driver_record_are_kept_and_flagged() -> None:
    t = pd.DataFrame({"aoi": ["a", "a"], "date": pd.to_datetime(["2023-12-01", "2024-06-01"]), "chla": [1.0, 2.0]})
    rows = build_feature_rows(t, _drivers(), lead=0, windows=[3])
    assert len(rows) == 2 and rows["outside_driver_record"].all()
    assert rows.filter(like="__").isna().all().all()
    assert rows["flags"].str.contains("outside_driver_record").all()


def test_calendar_features_on_the_unit_circle() -> None:
    s, c = calendar_features(pd.DatetimeIndex(["2023-01-01", "2024-07-02"]))
    assert s[0] == 0.0 and c[0] == 1.0
    # 2 July 2024 is day 184 of a leap year: angle 2 pi * 183 / 366 = pi
    assert s[1] == pytest.approx(0.0, abs=1e-12) and c[1] == pytest.approx(-1.0)


# -- the no-look-ahead property --------------------------------------------------------------


@st.composite
def _world(draw: st.DrawFn) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame, int, int, bool, int]:
    n = draw(st.integers(20, 80))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    days = pd.date_range("2022-03-01", periods=n)
    drivers = pd.DataFrame({"precipitation_sum": rng.gamma(0.6, 3, n), "air_temperature_mean": rng.normal(9, 4, n)},
                           index=days)  # fmt: skip
    drivers[rng.random(drivers.shape) < 0.1] = np.nan
    m = draw(st.integers(2, 20))
    tdays = days[rng.choice(n, m, replace=False)] + pd.to_timedelta(rng.integers(0, 5, m), unit="D")
    targets = pd.DataFrame({"aoi": rng.choice(["x", "y"], m), "date": tdays, "chla": rng.gamma(2, 4, m)})
    targets = targets.drop_duplicates(["aoi", "date"]).reset_index(drop=True)
    issue0 = days[0] - pd.Timedelta(days=3)
    fc = pd.DataFrame([(issue0 + pd.Timedelta(days=i), issue0 + pd.Timedelta(days=i + o))
                       for i in range(n + 10) for o in range(12)], columns=["issue_date", "date"])  # fmt: skip
    fc["precipitation_sum"] = rng.gamma(0.6, 3, len(fc))
    fc["air_temperature_mean"] = rng.normal(9, 4, len(fc))
    lead = draw(st.integers(0, 10))
    row = draw(st.integers(0, len(targets) - 1))
    include = draw(st.booleans())
    use_fc = draw(st.booleans())
    return targets, drivers, fc if use_fc else None, lead, row, include, seed


@settings(max_examples=60, deadline=None)
@given(_world())
def test_changing_inputs_after_issue_time_changes_nothing(world) -> None:
    """Property: perturb every input dated after the issue date (drivers, observations, forecasts
    issued later); the row's features stay identical (the label ``chla`` is the target itself)."""
    targets, drivers, fc, lead, row, include, seed = world
    kw = dict(lead=lead, windows=[1, 3, 7, 15], include_target_day=include, max_missing_fraction=0.3,
              forecast_drivers=fc)  # fmt: skip
    base = build_feature_rows(targets, drivers, **kw).iloc[row]
    issue = base["issue_date"]
    rng = np.random.default_rng(seed + 1)
    d2 = drivers.copy()
    late = d2.index > issue
    d2.loc[late] = rng.normal(50, 30, (late.sum(), d2.shape[1]))
    d2.loc[late & (rng.random(len(d2)) < 0.3)] = np.nan
    t2 = targets.copy()
    late_t = t2["date"] > issue
    t2.loc[late_t, "chla"] = rng.gamma(2, 40, late_t.sum())
    extra = pd.DataFrame({"aoi": ["x", "y"], "date": [issue + pd.Timedelta(days=1)] * 2, "chla": [999.0, 999.0]})
    t2 = pd.concat([t2, extra[~extra.set_index(["aoi", "date"]).index.isin(t2.set_index(["aoi", "date"]).index)]],
                   ignore_index=True)  # fmt: skip
    f2 = None
    if fc is not None:
        f2 = fc.copy()
        later = f2["issue_date"] > issue
        f2.loc[later, ["precipitation_sum", "air_temperature_mean"]] = rng.normal(70, 9, (later.sum(), 2))
    after = build_feature_rows(t2, d2, **kw | {"forecast_drivers": f2}).iloc[row]
    cols = [c for c in base.index if c not in LABEL]
    pd.testing.assert_series_equal(after[cols], base[cols], check_names=False)
