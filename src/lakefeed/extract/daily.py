"""Hourly UTC zonal series -> daily drivers on the lake's local calendar day.

Takes an ``xarray.Dataset`` with dims (time, zone) of per-step zonal values in canonical
units: ``air_temperature`` and ``dewpoint`` (degC, instantaneous at the stamp),
``wind_speed`` (m s-1, the zonal mean of hourly cell speeds from u and v), ``precipitation``
(mm per step) and ``shortwave_radiation`` (W m-2, mean over the step), both labelled at the
end of their step, and optionally ``valid_fraction`` (0..1). Returns a pandas DataFrame with
the ``drivers_daily`` columns of docs/architecture.md ("Store tables"; without ``lake``): zone, date, ... , flags.

Day assignment: an instantaneous value belongs to the local day of its stamp; an amount or
mean over a step belongs to the local day in which the step starts (stamp minus step), so
the precipitation of local day d is the sum of the steps inside d (DST days have 23/25 h).

Wind: the daily mean of hourly speeds sqrt(u^2 + v^2). It is larger than the speed of the
daily mean vector whenever the wind turns during the day (the vector mean cancels opposing
directions); models driven by wind-mixing want the former.

Missing data: a day lacking any expected step of a variable gets NaN for that variable and
the flag ``missing_hours`` (never averaged over fewer hours). Daily shortwave above 1.1 x the
clear-sky value (FAO-56 Eq. 21, 37) gets ``radiation_above_clear_sky``. ``flags`` is a
';'-joined string of flag names ('' when none); zone flags given by the caller are added.

Must not: open files, compute dask arrays (the input is small and in memory by design).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.exceptions import ExtractError
from lakefeed.extract.accumulation import step_of
from lakefeed.extract.meteo import (
    actual_vapour_pressure_from_dewpoint,
    clear_sky_radiation,
    relative_humidity,
)
from lakefeed.units import convert

__all__ = ["DAILY_COLUMNS", "DAILY_UNITS", "RADIATION_SUSPECT_RATIO", "to_daily"]

#: Daily shortwave above this multiple of clear-sky radiation is suspect (common practice for radiation QC).
RADIATION_SUSPECT_RATIO = 1.1

DAILY_UNITS: dict[str, str] = {
    "air_temperature_mean": "degC",
    "air_temperature_min": "degC",
    "air_temperature_max": "degC",
    "dewpoint_mean": "degC",
    "precipitation_sum": "mm d-1",
    "shortwave_radiation_mean": "W m-2",
    "clear_sky_radiation": "W m-2",
    "radiation_ratio": "1",
    "wind_speed_mean": "m s-1",
    "vapour_pressure_mean": "kPa",
    "relative_humidity_mean": "%",
    "valid_fraction": "1",
}
DAILY_COLUMNS = ["zone", "date", *DAILY_UNITS, "flags"]
_NEEDED = ("air_temperature", "dewpoint", "wind_speed", "precipitation", "shortwave_radiation")


def _local_dates(time: np.ndarray, tz: str) -> np.ndarray:
    idx = pd.DatetimeIndex(time).tz_localize("UTC").tz_convert(tz).tz_localize(None).normalize()
    return idx.values.astype("datetime64[D]")


def _expected_steps(dates: np.ndarray, tz: str, step: np.timedelta64) -> np.ndarray:
    start = pd.DatetimeIndex(dates.astype("datetime64[ns]"))
    lo = start.tz_localize(tz, ambiguous=True, nonexistent="shift_forward")
    hi = (start + pd.Timedelta(days=1)).tz_localize(tz, ambiguous=True, nonexistent="shift_forward")
    return np.asarray((hi - lo) / pd.Timedelta(step), dtype=float)


def _daily(da: xr.DataArray, dates: np.ndarray, all_dates: np.ndarray, expected: np.ndarray, how: str):
    labelled = da.assign_coords(date=("time", dates))
    val = getattr(labelled.groupby("date"), how)(skipna=True).reindex(date=all_dates)
    n = labelled.notnull().groupby("date").sum().reindex(date=all_dates, fill_value=0)
    complete = n >= xr.DataArray(expected, dims="date", coords={"date": all_dates})
    return val.where(complete), ~complete


def to_daily(
    hourly: xr.Dataset,
    *,
    tz: str,
    latitude: Mapping[str, float],
    elevation_m: float | Mapping[str, float] = 0.0,
    zone_flags: Mapping[str, Sequence[str]] | None = None,
) -> pd.DataFrame:
    """Daily drivers per zone and local calendar date.

    Parameters
    ----------
    hourly
        (time, zone) Dataset of the variables listed in the module docstring (canonical units;
        time UTC, regular step).
    tz
        IANA time zone of the lake (local calendar days).
    latitude
        Zone -> latitude in degrees for clear-sky radiation (e.g. the zone's centroid).
    elevation_m
        Elevation in m for clear-sky radiation (FAO-56 Eq. 37), one value or per zone.
    zone_flags
        Zone -> flags to add to every row of the zone (e.g. ``sub_cell_zone``).

    Returns
    -------
    DataFrame with :data:`DAILY_COLUMNS`; units in :data:`DAILY_UNITS`; ``date`` as
    ``datetime64[ns]`` local midnight (naive, the local calendar date).
    """
    missing = [v for v in _NEEDED if v not in hourly]
    if missing:
        raise ExtractError(f"daily drivers need hourly {missing}; have {sorted(map(str, hourly.data_vars))}")
    time = np.asarray(hourly["time"].values, dtype="datetime64[ns]")
    if time.size == 0:
        raise ExtractError("daily drivers: the hourly series is empty")
    step = step_of(time)
    inst = _local_dates(time, tz)
    intv = _local_dates(time - step, tz)
    all_dates = np.union1d(inst, intv)
    expected = _expected_steps(all_dates, tz, step)
    zones = [str(z) for z in hourly["zone"].values]
    hourly = hourly.assign_coords(zone=zones)  # one label type for every per-zone array below

    ta = hourly["air_temperature"]
    td = hourly["dewpoint"]
    cols: dict[str, xr.DataArray] = {}
    incomplete = xr.zeros_like(xr.DataArray(np.zeros((all_dates.size, len(zones))), dims=("date", "zone")), bool)
    incomplete = incomplete.assign_coords(date=all_dates, zone=zones)

    def add(column: str, da: xr.DataArray, how: str, dates: np.ndarray) -> None:
        nonlocal incomplete
        val, inc = _daily(da, dates, all_dates, expected, how)
        cols[column] = val
        incomplete = incomplete | inc

    add("air_temperature_mean", ta, "mean", inst)
    add("air_temperature_min", ta, "min", inst)
    add("air_temperature_max", ta, "max", inst)
    add("dewpoint_mean", td, "mean", inst)
    add("precipitation_sum", hourly["precipitation"], "sum", intv)
    add("shortwave_radiation_mean", hourly["shortwave_radiation"], "mean", intv)
    add("wind_speed_mean", hourly["wind_speed"], "mean", inst)
    add("vapour_pressure_mean", actual_vapour_pressure_from_dewpoint(td), "mean", inst)
    add("relative_humidity_mean", relative_humidity(ta, td), "mean", inst)
    if "valid_fraction" in hourly:
        vf = hourly["valid_fraction"].assign_coords(date=("time", inst)).groupby("date").mean()
        cols["valid_fraction"] = vf.reindex(date=all_dates)
    else:
        cols["valid_fraction"] = xr.full_like(cols["air_temperature_mean"], np.nan)

    lat = xr.DataArray([float(latitude[z]) for z in zones], dims="zone", coords={"zone": zones})
    elev = (
        xr.DataArray([float(elevation_m[z]) for z in zones], dims="zone", coords={"zone": zones})
        if isinstance(elevation_m, Mapping)
        else float(elevation_m)
    )
    doy = xr.DataArray(pd.DatetimeIndex(all_dates).dayofyear.values, dims="date", coords={"date": all_dates})
    rso = convert(clear_sky_radiation(lat, doy, elevation_m=elev), "MJ m-2 d-1", "W m-2")
    cols["clear_sky_radiation"] = rso.transpose("date", "zone")
    ratio = cols["shortwave_radiation_mean"] / cols["clear_sky_radiation"].where(cols["clear_sky_radiation"] > 0)
    cols["radiation_ratio"] = ratio

    # flags are labelled (date, zone) like the values and travel with them through to_dataframe, so a
    # flag can never land on another zone's row whatever the zone order or alignment
    text = xr.where(incomplete, "missing_hours;", "") + xr.where(
        ratio > RADIATION_SUSPECT_RATIO, "radiation_above_clear_sky;", ""
    )
    extra = xr.DataArray(
        ["".join(f"{f};" for f in ((zone_flags or {}).get(z) or ())) for z in zones],
        dims="zone",
        coords={"zone": zones},
    )
    cols["flags"] = (text.astype(object) + extra.astype(object)).transpose("date", "zone")
    ds = xr.Dataset(cols).transpose("date", "zone")
    frame = ds.to_dataframe(dim_order=["date", "zone"]).reset_index()
    frame["flags"] = frame["flags"].astype(str).str.rstrip(";")
    frame["date"] = pd.to_datetime(frame["date"])
    frame = frame[DAILY_COLUMNS].sort_values(["zone", "date"], kind="stable").reset_index(drop=True)
    return frame
