"""Write small GRIB files with ecCodes from its shipped sample templates, and the same values as CF NetCDF.

The GRIB files hold an invented 0.25-degree grid: hourly instantaneous fields (2 m temperature and dew
point, 10 m wind) and accumulated fields (total precipitation, surface solar radiation downwards),
accumulated since the start of each day's 00 UTC run (``since_reset``) or over each hour (``per_step``).
The NetCDF twin holds the values ecCodes decodes from the GRIB messages (GRIB packs values; the twin
must hold the *same* values), with CF standard names and units.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

LAT0, LON0, STEP = 47.5, 8.0, 0.25
NY, NX = 4, 5
SAMPLES = {2: "regular_ll_sfc_grib2", 1: "regular_ll_sfc_grib1"}
#: GRIB short name -> (cfgrib name, NetCDF standard_name, units)
PARAMS = {
    "2t": ("t2m", "air_temperature", "K"),
    "2d": ("d2m", "dew_point_temperature", "K"),
    "10u": ("u10", "eastward_wind", "m s-1"),
    "10v": ("v10", "northward_wind", "m s-1"),
    "tp": ("tp", "lwe_thickness_of_precipitation_amount", "m"),
    "ssrd": ("ssrd", "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air", "J m-2"),
}
INSTANT = ("2t", "2d", "10u", "10v")
ACCUM = ("tp", "ssrd")


@dataclass(frozen=True)
class Message:
    """One GRIB field: parameter, issue time, step range in hours (start == end: instantaneous), values."""

    short: str
    issue: pd.Timestamp
    start: int
    end: int
    values: np.ndarray


def hourly_values(days: int = 3, seed: int = 7) -> dict[str, np.ndarray]:
    """Invented hourly fields (days*24, NY, NX) valid from day 0 01 UTC to day ``days`` 00 UTC; amounts per hour."""
    rng = np.random.default_rng(seed)
    n = days * 24
    hour = (np.arange(n) + 1) % 24
    diurnal = np.sin((hour - 9) / 24 * 2 * np.pi)[:, None, None]
    shape = (n, NY, NX)
    ramp = np.linspace(0, 1, NY * NX).reshape(1, NY, NX)
    sun = np.clip(diurnal, 0, None) * 2.5e6 * (0.6 + 0.4 * ramp)  # J m-2 per hour
    rain = np.where(rng.random(shape) < 0.3, rng.gamma(0.8, 0.6e-3, shape), 0.0)  # m per hour
    return {
        "2t": 275.0 + 6.0 * diurnal + 2.0 * ramp + rng.normal(0, 0.3, shape),
        "2d": 271.0 + 2.0 * diurnal + ramp + rng.normal(0, 0.3, shape),
        "10u": 3.0 + rng.normal(0, 1.0, shape),
        "10v": -1.0 + rng.normal(0, 1.0, shape),
        "tp": rain,
        "ssrd": sun,
    }


def messages(
    values: dict[str, np.ndarray], start: str = "2024-03-01", accumulation: str = "since_reset"
) -> Iterator[Message]:
    """GRIB fields of :func:`hourly_values`: instantaneous at their valid time, amounts as steps of the 00 runs."""
    t0 = pd.Timestamp(start)
    n = next(iter(values.values())).shape[0]
    for i in range(n):
        valid = t0 + pd.Timedelta(hours=i + 1)
        for short in INSTANT:
            yield Message(short, valid, 0, 0, values[short][i])
        day = i // 24
        step = i % 24 + 1
        issue = t0 + pd.Timedelta(days=day)
        for short in ACCUM:
            if accumulation == "since_reset":
                total = values[short][day * 24 : i + 1].sum(axis=0)
                yield Message(short, issue, 0, step, total)
            else:
                yield Message(short, issue, step - 1, step, values[short][i])


def write_grib(path: Path, fields: Iterator[Message] | list[Message], edition: int = 2) -> Path:
    """Write ``fields`` as GRIB ``edition`` from ecCodes' regular lat/lon surface sample template."""
    import eccodes

    with open(path, "wb") as fh:
        for m in fields:
            h = eccodes.codes_grib_new_from_samples(SAMPLES[edition])
            try:
                for key, value in (
                    ("Ni", NX),
                    ("Nj", NY),
                    ("latitudeOfFirstGridPointInDegrees", LAT0),
                    ("longitudeOfFirstGridPointInDegrees", LON0),
                    ("latitudeOfLastGridPointInDegrees", LAT0 - STEP * (NY - 1)),
                    ("longitudeOfLastGridPointInDegrees", LON0 + STEP * (NX - 1)),
                    ("iDirectionIncrementInDegrees", STEP),
                    ("jDirectionIncrementInDegrees", STEP),
                    ("dataDate", int(m.issue.strftime("%Y%m%d"))),
                    ("dataTime", int(m.issue.strftime("%H%M"))),
                    ("shortName", m.short),
                ):
                    eccodes.codes_set(h, key, value)
                if m.short in ACCUM:
                    eccodes.codes_set(h, "stepType", "accum")
                    eccodes.codes_set(h, "startStep", m.start)
                    eccodes.codes_set(h, "endStep", m.end)
                else:
                    eccodes.codes_set(h, "step", m.end)
                eccodes.codes_set(h, "bitsPerValue", 24)
                eccodes.codes_set_values(h, np.asarray(m.values, dtype=float).ravel())
                eccodes.codes_write(h, fh)
            finally:
                eccodes.codes_release(h)
    return path


def read_back(path: Path) -> list[tuple[str, pd.Timestamp, int, np.ndarray, float]]:
    """Every message of ``path`` as ecCodes decodes it: (short name, issue time, end step, values (NY, NX),
    packing step ``2**E * 10**-D``, the WMO simple-packing resolution)."""
    import eccodes

    out = []
    with open(path, "rb") as fh:
        while (h := eccodes.codes_grib_new_from_file(fh)) is not None:
            try:
                issue = pd.Timestamp(f"{eccodes.codes_get(h, 'dataDate')}T{int(eccodes.codes_get(h, 'dataTime')):04d}")
                vals = eccodes.codes_get_values(h).reshape(NY, NX)
                e, d = eccodes.codes_get(h, "binaryScaleFactor"), eccodes.codes_get(h, "decimalScaleFactor")
                short, end = eccodes.codes_get(h, "shortName"), int(eccodes.codes_get(h, "endStep"))
                out.append((short, issue, end, vals, 2.0**e * 10.0**-d))
            finally:
                eccodes.codes_release(h)
    return out


def grid_coords() -> dict[str, xr.DataArray]:
    """CF latitude (descending, as in the GRIB) and longitude coordinates."""
    lat = LAT0 - STEP * np.arange(NY)
    lon = LON0 + STEP * np.arange(NX)
    return {
        "latitude": xr.DataArray(lat, dims="latitude", attrs={"standard_name": "latitude", "units": "degrees_north"}),
        "longitude": xr.DataArray(lon, dims="longitude", attrs={"standard_name": "longitude", "units": "degrees_east"}),
    }


def netcdf_twin(grib: Path, path: Path) -> Path:
    """The analysis GRIB's decoded values (float32) as a CF NetCDF on the valid-time axis.

    Amounts carry the GRIB packing resolution as ``packing_step`` (their noise, as the GRIB reader gives it).
    """
    fields: dict[str, dict[pd.Timestamp, np.ndarray]] = {}
    steps: dict[str, float] = {}
    for short, issue, end, vals, step in read_back(grib):
        fields.setdefault(short, {})[issue + pd.Timedelta(hours=end)] = vals
        steps[short] = max(steps.get(short, 0.0), step)
    times = sorted(next(iter(fields.values())))
    ds = xr.Dataset(coords={**grid_coords(), "time": ("time", pd.DatetimeIndex(times).values)})
    for short, by_time in fields.items():
        name, sn, units = PARAMS[short]
        data = np.stack([by_time[t] for t in times]).astype(np.float32)
        attrs = {"standard_name": sn, "units": units} | ({"packing_step": steps[short]} if short in ACCUM else {})
        ds[name] = (("time", "latitude", "longitude"), data, attrs)
    ds.to_netcdf(path)
    return path
