"""Invented hourly weather for the sample scenario, evaluable at any set of points.

A regional state (daily synoptic anomalies, cloudiness, wet days with intermittent hourly rain, wind)
is drawn once from the seed; :meth:`WeatherModel.at` turns it into hourly fields at given latitudes
and longitudes through smooth, known spatial functions (terrain height, lapse rate, solar geometry).
The reanalysis grid, the forecast grid, the sub-basins and the lake all read the same truth.
:func:`write_reanalysis` writes monthly CF NetCDF files (0.1 degree, latitude descending, a NaN
corner, ``precip`` and ``sw_down`` accumulated since 00 UTC). Must not read files.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.sample._io import rng_for, write_netcdf
from lakefeed.units import convert

__all__ = [
    "VARIABLES",
    "WeatherModel",
    "accumulate_since_midnight",
    "draw_weather",
    "grid_attrs",
    "recursive_filter",
    "write_reanalysis",
]

#: Variable name -> (standard_name, units, long_name) of the gridded weather files.
VARIABLES: dict[str, tuple[str, str, str]] = {
    "air_temp": ("air_temperature", "K", "2 m air temperature"),
    "dewpoint": ("dew_point_temperature", "K", "2 m dew point temperature"),
    "wind_u": ("eastward_wind", "m s-1", "10 m eastward wind"),
    "wind_v": ("northward_wind", "m s-1", "10 m northward wind"),
    "sw_down": (
        "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air",
        "J m-2",
        "surface downwelling shortwave radiation, accumulated since 00 UTC",
    ),
    "precip": ("lwe_thickness_of_precipitation_amount", "m", "total precipitation, accumulated since 00 UTC"),
}
#: Reanalysis grid: 0.1 degree cell centres (latitude descending) and the no-data corner.
LATS = np.round(48.65 - 0.1 * np.arange(12), 2)
LONS = np.round(9.0 + 0.1 * np.arange(16), 2)
NODATA_CORNER = {"latitude": slice(0, 3), "longitude": slice(12, 16)}
LAKE_ELEVATION_M = 540.0
_TIME_NOTE = "time (UTC); accumulated fields: end of the accumulation period"


def terrain_m(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """Smooth invented terrain height (m) used for the temperature lapse and orographic rain."""
    hills = 420.0 * np.exp(-(((lat - 48.45) / 0.25) ** 2 + ((lon - 9.35) / 0.35) ** 2))
    return 480.0 + hills + 120.0 * (lat - 47.5) + 60.0 * np.sin(3.0 * lon)


@dataclass(frozen=True)
class WeatherModel:
    """Regional weather state; hourly stamps ``stamps`` mark the end of each hourly interval (UTC)."""

    stamps: pd.DatetimeIndex
    days: pd.DatetimeIndex
    temp_anom_k: np.ndarray  # daily synoptic anomaly, K
    cloud: np.ndarray  # daily cloud cover fraction 0..1
    rain_mm: np.ndarray  # (days, 24) hourly rain amounts, mm, regional
    rain_pattern: np.ndarray  # (days, 2) coefficients of the daily spatial rain pattern
    wind: np.ndarray  # (days, 2) daily u, v in m s-1
    gradient_k_per_deg: np.ndarray  # daily west-east temperature gradient

    def at(self, lat: np.ndarray, lon: np.ndarray, hours: slice | None = None) -> dict[str, np.ndarray]:
        """Hourly fields at points: (n_hours, n_points) arrays, for all stamps or the slice ``hours`` of them.

        Returns ``air_temp`` and ``dewpoint`` (degC), ``wind_u``/``wind_v`` (m s-1) at the stamps,
        and hourly amounts over the interval ending at each stamp: ``precip`` (mm) and
        ``sw_flux`` (W m-2, interval mean).
        """
        lat = np.asarray(lat, dtype=float)[None, :]
        lon = np.asarray(lon, dtype=float)[None, :]
        nd = len(self.days)
        hours = np.arange(nd * 24)[hours if hours is not None else slice(None)]
        day_of = hours // 24
        t_stamp = (hours + 1.0) / 24.0  # stamp time in days since the first day 00 UTC
        doy = self.days.dayofyear.to_numpy()[day_of][:, None].astype(float)
        hod = ((hours + 1) % 24).astype(float)[:, None]
        centres = np.arange(nd) + 0.5
        anom = np.interp(t_stamp, centres, self.temp_anom_k)[:, None]
        cloud_h = np.interp(t_stamp, centres, self.cloud)[:, None]
        season = -np.cos(2 * np.pi * (doy - 18.0) / 365.25)
        diurnal_amp = (3.0 + 2.0 * (season + 1.0)) * (1.0 - 0.6 * cloud_h)
        height = terrain_m(lat, lon)
        grad = self.gradient_k_per_deg[day_of][:, None]
        temp = (
            8.5
            + 9.5 * season
            + anom
            + diurnal_amp * np.cos(2 * np.pi * (hod - 13.5) / 24.0)
            - 0.0065 * (height - LAKE_ELEVATION_M)
            + grad * (lon - 9.7)
        )
        depression = 0.6 + (1.0 - cloud_h) * (2.5 + 2.0 * (1.0 + np.cos(2 * np.pi * (hod - 14.0) / 24.0)))
        dew = temp - depression
        gust = 1.0 + 0.25 * np.cos(2 * np.pi * (hod - 14.0) / 24.0)
        rough = 1.0 + 0.1 * (height - LAKE_ELEVATION_M) / 300.0
        u = np.interp(t_stamp, centres, self.wind[:, 0])[:, None] * gust * rough
        v = np.interp(t_stamp, centres, self.wind[:, 1])[:, None] * gust * rough
        # Interval-mean shortwave from the solar geometry at the interval midpoint.
        t_mid = t_stamp - 0.5 / 24.0
        frac_hour = ((hours + 0.5) % 24)[:, None]
        gamma = 2 * np.pi * (doy - 1.0) / 365.0
        decl = 0.006918 - 0.399912 * np.cos(gamma) + 0.070257 * np.sin(gamma) - 0.006758 * np.cos(2 * gamma)
        eqt_h = 0.1644 * np.sin(2 * gamma) - 0.1278 * np.sin(gamma)  # equation of time, hours (approx.)
        hour_angle = np.deg2rad(15.0 * (frac_hour + lon / 15.0 + eqt_h - 12.0))
        phi = np.deg2rad(lat)
        sin_h = np.sin(phi) * np.sin(decl) + np.cos(phi) * np.cos(decl) * np.cos(hour_angle)
        top = 1361.0 * (1.0 + 0.033 * np.cos(2 * np.pi * doy / 365.0)) * np.clip(sin_h, 0.0, None)
        cloud_mid = np.interp(t_mid, centres, self.cloud)[:, None]
        sw = 0.76 * top * (1.0 - 0.75 * cloud_mid**3.4)
        pattern = self.rain_pattern[day_of]
        spatial = (
            1.0
            + 0.3 * pattern[:, :1] * np.sin(2 * np.pi * (lon - 9.0) / 1.5)
            + 0.3 * pattern[:, 1:] * np.cos(2 * np.pi * (lat - 47.5) / 1.2)
        ) * (1.0 + 0.0008 * (height - LAKE_ELEVATION_M))
        rain = self.rain_mm.reshape(-1)[hours][:, None] * np.clip(spatial, 0.2, None)
        return {"air_temp": temp, "dewpoint": dew, "wind_u": u, "wind_v": v, "precip": rain, "sw_flux": sw}


def recursive_filter(x: np.ndarray, a: float, b: float = 1.0, y0: np.ndarray | float | None = None) -> np.ndarray:
    """First-order recursion along axis 0: ``y[t] = a * y[t-1] + b * x[t]`` with ``y[-1] = y0`` (default 0).

    Used for AR(1) noise, linear reservoirs and exponential smoothing; series here are short (days).
    """
    x = np.asarray(x, dtype=float)
    y = np.empty_like(x)
    prev = np.zeros(x.shape[1:]) if y0 is None else np.asarray(y0, dtype=float)
    for t in range(x.shape[0]):
        prev = a * prev + b * x[t]
        y[t] = prev
    return y


def _ar1(rng: np.random.Generator, n: int, phi: float, sd: float) -> np.ndarray:
    """Stationary AR(1) series of length n with lag-1 correlation ``phi`` and standard deviation ``sd``."""
    eps = rng.normal(0.0, sd * np.sqrt(1.0 - phi**2), n)
    eps[0] = rng.normal(0.0, sd)
    return recursive_filter(eps, phi)


def draw_weather(seed: int, first_day: pd.Timestamp, n_days: int) -> WeatherModel:
    """Draw the regional weather state for ``n_days`` days from ``first_day`` (00 UTC)."""
    rng = rng_for(seed, "weather")
    days = pd.date_range(first_day, periods=n_days, freq="D")
    doy = days.dayofyear.to_numpy().astype(float)
    winter = np.cos(2 * np.pi * (doy - 15.0) / 365.25)
    z = _ar1(rng, n_days, 0.6, 1.0)
    cloud = 1.0 / (1.0 + np.exp(-(1.6 * z + 0.2 + 0.6 * winter)))
    wet = (z + rng.normal(0.0, 0.6, n_days)) > 0.15
    amount = rng.gamma(0.75, 5.0 * (1.0 + 0.35 * (1.0 - winter)), n_days) * wet
    weights = rng.gamma(0.25, 1.0, (n_days, 24))
    weights[weights < 0.02] = 0.0  # intermittent: dry hours inside wet days
    weights[np.arange(n_days), rng.integers(0, 24, n_days)] += 0.05
    rain = amount[:, None] * weights / weights.sum(axis=1, keepdims=True)
    wind = np.column_stack([1.8 + _ar1(rng, n_days, 0.7, 2.2), 0.3 + _ar1(rng, n_days, 0.7, 1.8)])
    return WeatherModel(
        stamps=pd.date_range(first_day + pd.Timedelta(hours=1), periods=24 * n_days, freq="h"),
        days=days,
        temp_anom_k=_ar1(rng, n_days, 0.8, 3.0),
        cloud=cloud,
        rain_mm=rain,
        rain_pattern=rng.uniform(-1.0, 1.0, (n_days, 2)),
        wind=wind,
        gradient_k_per_deg=rng.normal(0.0, 0.8, n_days),
    )


def accumulate_since_midnight(amounts: np.ndarray, stamps: pd.DatetimeIndex) -> np.ndarray:
    """Running totals since 00 UTC along axis 0 (value at 00 UTC = total of the previous day).

    ``amounts[k]`` is the amount over the hour ending at ``stamps[k]``; the first stamp must be 01 UTC.
    """
    if stamps[0].hour != 1:
        raise ValueError(f"accumulation must start at 01 UTC, got {stamps[0]}")
    n = amounts.shape[0]
    pad = (-n) % 24  # a last, partial day
    padded = np.concatenate([amounts, np.zeros((pad, *amounts.shape[1:]), amounts.dtype)])
    days = padded.reshape(-1, 24, *amounts.shape[1:])
    return np.cumsum(days, axis=1).reshape(padded.shape)[:n]


def grid_attrs(ds: xr.Dataset) -> xr.Dataset:
    """CF attributes of the latitude/longitude coordinates and the grid-mapping variable."""
    ds["latitude"].attrs = {"standard_name": "latitude", "units": "degrees_north", "axis": "Y"}
    ds["longitude"].attrs = {"standard_name": "longitude", "units": "degrees_east", "axis": "X"}
    ds["crs"] = xr.DataArray(
        np.int32(0),
        attrs={
            "grid_mapping_name": "latitude_longitude",
            "semi_major_axis": 6378137.0,
            "inverse_flattening": 298.257223563,
        },
    )
    return ds


def write_reanalysis(
    model: WeatherModel,
    folder: Path,
    start: pd.Timestamp,
    end: pd.Timestamp,
    *,
    progress: Callable[[int, int], None] | None = None,
) -> list[Path]:
    """Write ``reanalysis_YYYY-MM.nc`` from ``start`` 00 UTC to ``end`` 23 UTC (inclusive months)."""
    lat2, lon2 = np.meshgrid(LATS, LONS, indexing="ij")
    months = pd.period_range(start, end, freq="M")
    paths = []
    for i, month in enumerate(months):
        lo = max(month.start_time, start)
        hi = min(month.end_time.floor("h"), end + pd.Timedelta(hours=23))
        # evaluate from 01 UTC of the day before, so the 00 UTC value holds that day's total
        k0 = model.stamps.get_loc(lo - pd.Timedelta(hours=23))
        k1 = model.stamps.get_loc(hi) + 1
        stamps = model.stamps[k0:k1]
        f = model.at(lat2.ravel(), lon2.ravel(), slice(k0, k1))
        fields = {
            "air_temp": convert(f["air_temp"], "degC", "K"),
            "dewpoint": convert(f["dewpoint"], "degC", "K"),
            "wind_u": f["wind_u"],
            "wind_v": f["wind_v"],
            "sw_down": accumulate_since_midnight(f["sw_flux"] * 3600.0, stamps),  # W m-2 over 3600 s -> J m-2
            "precip": accumulate_since_midnight(convert(f["precip"], "mm", "m"), stamps),
        }
        shape = (len(stamps), len(LATS), len(LONS))
        fields = {k: v.reshape(shape)[23:].astype(np.float32) for k, v in fields.items()}
        for arr in fields.values():
            arr[:, NODATA_CORNER["latitude"], NODATA_CORNER["longitude"]] = np.nan
        sel = slice(23, None)
        ds = xr.Dataset(
            {
                k: (("time", "latitude", "longitude"), fields[k], _var_attrs(k))
                for k in ("air_temp", "dewpoint", "wind_u", "wind_v", "sw_down", "precip")
            },
            coords={
                "time": (
                    "time",
                    stamps[sel].to_numpy(),
                    {"standard_name": "time", "axis": "T", "long_name": _TIME_NOTE},
                ),
                "latitude": LATS,
                "longitude": LONS,
            },
        )
        ds = grid_attrs(ds)
        ds.attrs = {"title": f"Invented hourly reanalysis for the Tallow sample scenario, {month}"}
        enc = {
            k: {"dtype": "float32", "zlib": True, "complevel": 1, "shuffle": True, "chunksizes": (24, 12, 16)}
            for k in VARIABLES
        }
        enc["time"] = {"units": "hours since 1970-01-01 00:00:00", "calendar": "proleptic_gregorian", "dtype": "int64"}
        paths.append(write_netcdf(ds, folder / f"reanalysis_{month.strftime('%Y-%m')}.nc", encoding=enc))
        if progress:
            progress(i + 1, len(months))
    return paths


def _var_attrs(name: str) -> dict[str, str]:
    std, units, long = VARIABLES[name]
    attrs = {"standard_name": std, "units": units, "long_name": long, "grid_mapping": "crs"}
    if name in ("sw_down", "precip"):
        attrs["cell_methods"] = "time: sum (interval: 1 hour) where accumulated since 00 UTC, reset daily"
    return attrs
