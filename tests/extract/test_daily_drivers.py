"""Hourly UTC zonal series -> daily drivers on local calendar days (DST, missing hours, flags)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from lakefeed.exceptions import ExtractError
from lakefeed.extract.daily import DAILY_COLUMNS, to_daily
from lakefeed.extract.meteo import clear_sky_radiation, relative_humidity
from lakefeed.units import convert

VARS = ("air_temperature", "dewpoint", "wind_speed", "precipitation", "shortwave_radiation")


def _hourly(start: str, hours: int, zones=("z",), **values) -> xr.Dataset:
    t = pd.date_range(start, periods=hours, freq="h")
    data = {}
    for v in VARS:
        x = values.get(v, 1.0)
        arr = np.broadcast_to(np.asarray(x, dtype=float).reshape(-1, 1) if np.ndim(x) else x, (hours, len(zones)))
        data[v] = (("time", "zone"), np.array(arr))
    return xr.Dataset(data, coords={"time": t, "zone": list(zones)})


def test_dst_days_have_23_and_25_hours_and_precip_sums_by_step_start():
    """Europe/Berlin: 31 March 2024 has 23 h, 27 October 2024 has 25 h (IANA tz database)."""
    for start, day, n in (("2024-03-29 23:00", "2024-03-31", 23), ("2024-10-25 22:00", "2024-10-27", 25)):
        h = _hourly(start, 24 * 4)  # 1 mm in every hourly step
        d = to_daily(h, tz="Europe/Berlin", latitude={"z": 50.0}).set_index("date")
        assert d.loc[day, "precipitation_sum"] == n
        assert d.loc[day, "flags"] == ""
        assert d.loc[day, "air_temperature_mean"] == 1.0


def test_days_with_missing_hours_are_flagged_and_not_averaged():
    temp = np.arange(72, dtype=float)
    h = _hourly("2024-06-01 00:00", 72, air_temperature=temp)
    h["air_temperature"][30, 0] = np.nan
    d = to_daily(h, tz="UTC", latitude={"z": 50.0}).set_index("date")
    assert np.isnan(d.loc["2024-06-02", "air_temperature_mean"])
    assert d.loc["2024-06-02", "flags"] == "missing_hours"
    assert d.loc["2024-06-02", "precipitation_sum"] == 24  # other variables of that day are complete
    assert d.loc["2024-06-01", "air_temperature_mean"] == pytest.approx(np.mean(np.arange(24)))
    assert d.loc["2024-06-01", "air_temperature_min"] == 0 and d.loc["2024-06-01", "air_temperature_max"] == 23


def test_amounts_belong_to_the_day_their_step_starts():
    """Stamps at the end of their step (docs/architecture.md, "Pitfalls"): the daily total of day d is the sum
    of stamps 01..23 UTC of d plus 00 UTC of d+1."""
    rain = np.zeros(72)
    rain[24] = 5.0  # stamp 2024-06-02 00:00 UTC = the hour 23-24 UTC of 1 June
    h = _hourly("2024-06-01 00:00", 72, precipitation=rain)
    d = to_daily(h, tz="UTC", latitude={"z": 50.0}).set_index("date")
    assert d.loc["2024-06-01", "precipitation_sum"] == 5.0
    assert d.loc["2024-06-02", "precipitation_sum"] == 0.0


def test_wind_is_mean_of_hourly_speeds_not_speed_of_mean_vector():
    """Opposite winds of 4 m s-1 all day: the mean speed is 4, the mean vector is 0 (module docstring)."""
    speed = np.full(48, 4.0)  # speeds come from hourly u, v (|(+-4, 0)| = 4)
    h = _hourly("2024-06-01 00:00", 48, wind_speed=speed)
    d = to_daily(h, tz="UTC", latitude={"z": 50.0}).set_index("date")
    assert d.loc["2024-06-01", "wind_speed_mean"] == 4.0


def test_radiation_above_clear_sky_is_flagged_and_humidity_columns():
    lat = 50.0
    rso = float(convert(clear_sky_radiation(lat, 153), "MJ m-2 d-1", "W m-2"))  # 1 June 2024 is day 153
    sw = np.full(72, 1.2 * rso)
    h = _hourly("2024-06-01 00:00", 72, shortwave_radiation=sw, air_temperature=25.0, dewpoint=12.0)
    d = to_daily(h, tz="UTC", latitude={"z": lat}, zone_flags={"z": ["sub_cell_zone"]}).set_index("date")
    row = d.loc["2024-06-01"]
    assert row["clear_sky_radiation"] == pytest.approx(rso)
    assert row["radiation_ratio"] == pytest.approx(1.2)
    assert row["flags"] == "radiation_above_clear_sky;sub_cell_zone"
    assert row["relative_humidity_mean"] == pytest.approx(relative_humidity(25.0, 12.0))
    assert row["vapour_pressure_mean"] == pytest.approx(1.403, abs=5e-4)  # FAO-56 Table 2.3, 12 degC (from memory)
    assert sorted(d.reset_index().columns) == sorted(DAILY_COLUMNS)


def test_missing_variable_is_an_error():
    with pytest.raises(ExtractError, match="wind_speed"):
        to_daily(_hourly("2024-06-01", 24).drop_vars("wind_speed"), tz="UTC", latitude={"z": 50.0})


def test_flags_stay_on_their_own_zone_when_incomplete_days_differ():
    """Regression: z0 misses an hour on 11 January, z1 on 10 and 12 January; each flag stays on its zone."""
    h = _hourly("2024-01-10 00:00", 24 * 4, zones=("z0", "z1"))
    h["air_temperature"][30, 0] = np.nan  # 11 January 06 UTC, zone z0
    h["air_temperature"][5, 1] = np.nan  # 10 January 05 UTC, zone z1
    h["dewpoint"][53, 1] = np.nan  # 12 January 05 UTC, zone z1
    d = to_daily(h, tz="UTC", latitude={"z0": 50.0, "z1": 51.0})
    d = d.loc[d["date"].between("2024-01-10", "2024-01-12")]  # 9 and 13 January are partial for all zones
    flagged = d.loc[d["flags"] == "missing_hours"]
    got = {(z, str(t.date())) for z, t in zip(flagged["zone"], flagged["date"], strict=True)}
    assert got == {("z0", "2024-01-11"), ("z1", "2024-01-10"), ("z1", "2024-01-12")}
    # the values of each zone agree with its own flags
    assert d.loc[d["flags"] == "", "air_temperature_mean"].notna().all()
    for z, day in got:
        row = d.loc[(d["zone"] == z) & (d["date"] == day)].iloc[0]
        assert row[["air_temperature_mean", "dewpoint_mean"]].isna().any()


def test_flags_follow_zone_order_not_sorted_order():
    """Zones given out of sorted order keep their own flags (rows come out sorted by zone)."""
    h = _hourly("2024-01-10 00:00", 24 * 3, zones=("zb", "za"))
    h["precipitation"][30, 0] = np.nan  # zb misses an hour on 11 January
    d = to_daily(h, tz="UTC", latitude={"za": 50.0, "zb": 50.0}, zone_flags={"za": ["sub_cell_zone"]})
    d = d.set_index(["zone", "date"])
    assert d.loc[("zb", pd.Timestamp("2024-01-11")), "flags"] == "missing_hours"
    assert d.loc[("za", pd.Timestamp("2024-01-11")), "flags"] == "sub_cell_zone"
    assert np.isnan(d.loc[("zb", pd.Timestamp("2024-01-11")), "precipitation_sum"])


def test_non_string_zone_ids_keep_their_flags():
    """Regression: integer zone ids (e.g. from a layer's id field) gave flags misaligned or an error."""
    h = _hourly("2024-01-10 00:00", 24 * 3, zones=(1, 0))
    h["air_temperature"][30, 0] = np.nan  # zone 1 misses an hour on 11 January
    d = to_daily(h, tz="UTC", latitude={"0": 50.0, "1": 50.0}).set_index(["zone", "date"])
    assert d.loc[("1", pd.Timestamp("2024-01-11")), "flags"] == "missing_hours"
    assert d.loc[("0", pd.Timestamp("2024-01-11")), "flags"] == ""
