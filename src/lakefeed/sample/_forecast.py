"""Invented archive of daily weather forecasts with biases that grow with lead time.

Takes the weather model (the truth) and writes ``forecast/forecast_YYYY-MM.nc``: issues at 00 UTC every day,
steps every 6 hours to 240 h, on a 0.25 degree grid covering the reanalysis area. Each forecast is the
truth at the valid time plus planted biases and noise that grow with lead (see :data:`BIASES`);
``precip`` and ``sw_down`` are totals over each 6-hour step. Returns the bias parameters for the truth file.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.sample._io import rng_for, write_netcdf
from lakefeed.sample._weather import VARIABLES, WeatherModel, grid_attrs
from lakefeed.units import convert

__all__ = ["BIASES", "LATS", "LONS", "STEP_HOURS", "write_forecasts"]

LATS = np.round(48.75 - 0.25 * np.arange(6), 2)
LONS = np.round(9.0 + 0.25 * np.arange(7), 2)
STEP_HOURS = np.arange(6, 241, 6)
#: Planted forecast errors; ``ld`` is the lead in days (forecast_period / 24 h).
#: additive: forecast = truth + (slope * ld) + noise; multiplicative: forecast = truth * (a + slope * ld) * noise.
BIASES: dict[str, dict[str, float | str]] = {
    "air_temp": {
        "kind": "additive",
        "units": "K",
        "intercept": 0.0,
        "slope_per_day": 0.3,
        "noise_sd": 0.5,
        "noise_sd_per_day": 0.25,
    },
    "dewpoint": {
        "kind": "additive",
        "units": "K",
        "intercept": 0.0,
        "slope_per_day": 0.2,
        "noise_sd": 0.5,
        "noise_sd_per_day": 0.25,
    },
    "wind_u": {
        "kind": "additive",
        "units": "m s-1",
        "intercept": 0.0,
        "slope_per_day": 0.0,
        "noise_sd": 0.5,
        "noise_sd_per_day": 0.2,
    },
    "wind_v": {
        "kind": "additive",
        "units": "m s-1",
        "intercept": 0.0,
        "slope_per_day": 0.0,
        "noise_sd": 0.5,
        "noise_sd_per_day": 0.2,
    },
    "precip": {
        "kind": "multiplicative",
        "units": "1",
        "intercept": 1.1,
        "slope_per_day": 0.05,
        "noise_sd": 0.15,
        "noise_sd_per_day": 0.06,
    },
    "sw_down": {
        "kind": "multiplicative",
        "units": "1",
        "intercept": 1.0,
        "slope_per_day": -0.01,
        "noise_sd": 0.08,
        "noise_sd_per_day": 0.03,
    },
}


def _truth_on_grid(model: WeatherModel) -> dict[str, np.ndarray]:
    """Hourly truth on the forecast grid: instantaneous fields and cumulative sums of the amounts."""
    lat2, lon2 = np.meshgrid(LATS, LONS, indexing="ij")
    f = model.at(lat2.ravel(), lon2.ravel())
    zero = np.zeros((1, f["precip"].shape[1]))
    return {
        "air_temp": convert(f["air_temp"], "degC", "K"),
        "dewpoint": convert(f["dewpoint"], "degC", "K"),
        "wind_u": f["wind_u"],
        "wind_v": f["wind_v"],
        # cumulative sums with a leading zero: total over (k-6, k] hours = cum[k] - cum[k-6]
        "precip": np.concatenate([zero, np.cumsum(convert(f["precip"], "mm", "m"), axis=0)]),
        "sw_down": np.concatenate([zero, np.cumsum(f["sw_flux"] * 3600.0, axis=0)]),  # W m-2 over 1 h -> J m-2
    }


def write_forecasts(
    model: WeatherModel,
    folder: Path,
    start: pd.Timestamp,
    end: pd.Timestamp,
    *,
    seed: int,
    progress: Callable[[int, int], None] | None = None,
) -> dict[str, dict[str, float | str]]:
    """Write monthly forecast files for issues ``start``..``end`` (00 UTC daily); return :data:`BIASES`.

    The weather model must cover ``end`` + 240 h.
    """
    rng = rng_for(seed, "forecast")
    truth = _truth_on_grid(model)
    issues = pd.date_range(start, end, freq="D")
    first = model.stamps[0] - pd.Timedelta(hours=1)  # 00 UTC of the model's first day
    base = ((issues - first) // pd.Timedelta(hours=1)).to_numpy()  # hours since the model start
    valid = base[:, None] + STEP_HOURS[None, :]  # hours since start of the valid time
    ld = STEP_HOURS / 24.0
    ni, ns, npts = len(issues), len(STEP_HOURS), len(LATS) * len(LONS)
    out: dict[str, np.ndarray] = {}
    for name, b in BIASES.items():
        if name in ("precip", "sw_down"):
            value = truth[name][valid] - truth[name][valid - 6]
        else:
            value = truth[name][valid - 1]  # row k of an instantaneous field is the stamp k + 1 h
        sd = (b["noise_sd"] + b["noise_sd_per_day"] * ld)[None, :, None]
        shared = rng.standard_normal((ni, ns, 1))  # errors coherent over the grid ...
        local = rng.standard_normal((ni, ns, npts))  # ... plus a little local noise
        eps = sd * (0.9 * shared + np.sqrt(1 - 0.81) * local)
        factor = (b["intercept"] + b["slope_per_day"] * ld)[None, :, None]
        if b["kind"] == "additive":
            value = value + factor + eps
        else:
            value = np.clip(value, 0.0, None) * factor * np.exp(eps - 0.5 * sd**2)
        out[name] = value
    out["dewpoint"] = np.minimum(out["dewpoint"], out["air_temp"] - 0.1)
    months = pd.period_range(start, end, freq="M")
    shape = (ni, ns, len(LATS), len(LONS))
    for i, month in enumerate(months):
        sel = (issues >= month.start_time) & (issues <= month.end_time)
        ds = xr.Dataset(
            {
                k: (
                    ("forecast_reference_time", "forecast_period", "latitude", "longitude"),
                    out[k].reshape(shape)[sel].astype(np.float32),
                    _attrs(k),
                )
                for k in VARIABLES
            },
            coords={
                "forecast_reference_time": (
                    "forecast_reference_time",
                    issues[sel].to_numpy(),
                    {"standard_name": "forecast_reference_time", "long_name": "issue time (UTC)"},
                ),
                "forecast_period": (
                    "forecast_period",
                    pd.to_timedelta(STEP_HOURS, unit="h").to_numpy(),
                    {"standard_name": "forecast_period", "long_name": "lead time (end of the step)"},
                ),
                "latitude": LATS,
                "longitude": LONS,
            },
        )
        ds = grid_attrs(ds)
        ds.attrs = {"title": f"Invented forecast archive for the Tallow sample scenario, issues of {month}"}
        enc = {
            k: {
                "dtype": "float32",
                "zlib": True,
                "complevel": 1,
                "shuffle": True,
                "chunksizes": (min(8, int(sel.sum())), ns, len(LATS), len(LONS)),
            }
            for k in VARIABLES
        }
        enc["forecast_reference_time"] = {
            "units": "hours since 1970-01-01 00:00:00",
            "calendar": "proleptic_gregorian",
            "dtype": "int64",
        }
        enc["forecast_period"] = {"units": "hours", "dtype": "int32"}
        write_netcdf(ds, folder / f"forecast_{month.strftime('%Y-%m')}.nc", encoding=enc)
        if progress:
            progress(i + 1, len(months))
    return BIASES


def _attrs(name: str) -> dict[str, str]:
    std, units, long = VARIABLES[name]
    attrs = {"standard_name": std, "units": units, "grid_mapping": "crs"}
    if name in ("precip", "sw_down"):
        attrs["long_name"] = long.replace(
            "accumulated since 00 UTC", "total over the 6-hour step ending at the lead time"
        )
        attrs["cell_methods"] = "forecast_period: sum (interval: 6 hours)"
    else:
        attrs["long_name"] = long
    return attrs
