"""Meteorological formulas: humidity (FAO-56 Eq. 11-14, 19), radiation (Eq. 21-25, 37), wind.

Takes numpy, dask or xarray values and returns the same kind (elementwise; nothing is
computed). Units: temperatures degC, vapour pressures kPa, relative humidity %, radiation
MJ m-2 d-1 (FAO-56's unit; convert with :func:`lakefeed.units.convert`), latitude degrees,
elevation m, wind m s-1.

Equations follow Allen, Pereira, Raes, Smith (1998), FAO Irrigation and Drainage Paper 56.

Must not: open files, compute dask arrays.
"""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = [
    "GSC",
    "actual_vapour_pressure_from_dewpoint",
    "actual_vapour_pressure_from_rh_extremes",
    "clear_sky_radiation",
    "extraterrestrial_radiation",
    "mean_saturation_vapour_pressure",
    "relative_humidity",
    "saturation_slope",
    "saturation_vapour_pressure",
    "wind_speed",
]

#: Solar constant, MJ m-2 min-1 (FAO-56 Eq. 21).
GSC = 0.0820


def saturation_vapour_pressure(t: Any) -> Any:
    """e°(T) in kPa from air temperature T in degC (FAO-56 Eq. 11)."""
    return 0.6108 * np.exp(17.27 * t / (t + 237.3))


def mean_saturation_vapour_pressure(t_max: Any, t_min: Any) -> Any:
    """Daily mean saturation vapour pressure es in kPa from Tmax, Tmin in degC (FAO-56 Eq. 12)."""
    return (saturation_vapour_pressure(t_max) + saturation_vapour_pressure(t_min)) / 2


def saturation_slope(t: Any) -> Any:
    """Slope Δ of the saturation vapour pressure curve in kPa degC-1 at T degC (FAO-56 Eq. 13)."""
    return 4098 * saturation_vapour_pressure(t) / (t + 237.3) ** 2


def actual_vapour_pressure_from_dewpoint(t_dew: Any) -> Any:
    """Actual vapour pressure ea in kPa from dewpoint in degC (FAO-56 Eq. 14: ea = e°(Tdew))."""
    return saturation_vapour_pressure(t_dew)


def actual_vapour_pressure_from_rh_extremes(t_min: Any, t_max: Any, rh_max: Any, rh_min: Any) -> Any:
    """ea in kPa from Tmin, Tmax (degC) and RHmax, RHmin (%) (FAO-56 Eq. 17)."""
    return (saturation_vapour_pressure(t_min) * rh_max / 100 + saturation_vapour_pressure(t_max) * rh_min / 100) / 2


def actual_vapour_pressure_from_rh_mean(t_min: Any, t_max: Any, rh_mean: Any) -> Any:
    """ea in kPa from mean relative humidity (%) and Tmin, Tmax in degC (FAO-56 Eq. 19)."""
    return rh_mean / 100 * mean_saturation_vapour_pressure(t_max, t_min)


def relative_humidity(t: Any, t_dew: Any) -> Any:
    """Relative humidity in % from air temperature and dewpoint (degC): 100 e°(Tdew)/e°(T) (FAO-56 Eq. 10, 11, 14)."""
    return 100 * saturation_vapour_pressure(t_dew) / saturation_vapour_pressure(t)


def wind_speed(u: Any, v: Any) -> Any:
    """Wind speed in m s-1 from eastward and northward components (m s-1)."""
    return np.hypot(u, v)


def extraterrestrial_radiation(latitude_deg: Any, day_of_year: Any) -> Any:
    """Daily extraterrestrial radiation Ra in MJ m-2 d-1 (FAO-56 Eq. 21, with Eq. 23, 24, 25).

    Parameters
    ----------
    latitude_deg
        Latitude in degrees (north positive).
    day_of_year
        Day number J (1..366).
    """
    phi = np.deg2rad(latitude_deg)
    j = np.asarray(day_of_year, dtype=float) if not hasattr(day_of_year, "dtype") else day_of_year
    dr = 1 + 0.033 * np.cos(2 * np.pi / 365 * j)  # Eq. 23
    delta = 0.409 * np.sin(2 * np.pi / 365 * j - 1.39)  # Eq. 24
    ws = np.arccos(np.clip(-np.tan(phi) * np.tan(delta), -1.0, 1.0))  # Eq. 25 (polar day/night clipped)
    return 24 * 60 / np.pi * GSC * dr * (ws * np.sin(phi) * np.sin(delta) + np.cos(phi) * np.cos(delta) * np.sin(ws))


def clear_sky_radiation(latitude_deg: Any, day_of_year: Any, *, elevation_m: Any = 0.0) -> Any:
    """Clear-sky solar radiation Rso in MJ m-2 d-1 (FAO-56 Eq. 37: (0.75 + 2e-5 z) Ra)."""
    return (0.75 + 2e-5 * elevation_m) * extraterrestrial_radiation(latitude_deg, day_of_year)
