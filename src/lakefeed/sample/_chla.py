"""Planted chlorophyll-a truth of the sample scenario: known functions of temperature, light and phosphorus.

Takes the weather model (lake-centre air temperature and shortwave), the true phosphorus load into the
lake and the AOIs; returns the lake-wide daily chlorophyll-a series, its drivers, a smooth spatial
pattern over the lake and the true daily AOI values (mean of the pattern over the reference sensor's
pixel centres inside each AOI). Must not read or write files.

The model (all planted, stored in ``truth/truth.json``)::

    Tw    = exponentially weighted mean of daily air temperature (time constant TAU_DAYS), at least 3.5 degC
    f_T   = THETA ** (Tw - 20)
    f_I   = I / (I + I_K)                  I: daily mean shortwave, W m-2
    f_P   = P / (P + K_P)                  P: 30-day trailing mean TP load into the lake, kg d-1
    bloom = A_y exp(-((doy - d_y) / W)^2 / 2)   late-winter bloom, A_y and d_y drawn per year
    chla  = (C_MAX f_T f_I f_P + BACKGROUND + bloom) exp(AR(1) noise)     mg m-3
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from lakefeed.sample._geo import LAKE_LATLON
from lakefeed.sample._io import rng_for
from lakefeed.sample._weather import WeatherModel, recursive_filter

__all__ = ["PARAMS", "lake_truth", "spatial_pattern"]

PARAMS: dict[str, float] = {
    "TAU_DAYS": 12.0,
    "THETA": 1.07,
    "I_K": 80.0,
    "K_P": 20.0,
    "C_MAX": 70.0,
    "BACKGROUND": 1.0,
    "BLOOM_WIDTH_DAYS": 9.0,
    "BLOOM_AMPLITUDE_MIN": 12.0,
    "BLOOM_AMPLITUDE_MAX": 22.0,
    "BLOOM_DOY_MIN": 50.0,
    "BLOOM_DOY_MAX": 75.0,
    "NOISE_SD": 0.12,
    "NOISE_PHI": 0.85,
    "P_WINDOW_DAYS": 30.0,
}
#: Centres (metres east/north of the lake centre) and scales of the spatial pattern's bumps.
_BUMPS = (((-1750.0, -2300.0), 900.0, 0.45), ((2350.0, 50.0), 700.0, -0.15))


def spatial_pattern(x: np.ndarray, y: np.ndarray, centre: tuple[float, float]) -> np.ndarray:
    """Smooth multiplicative pattern of chlorophyll-a over the lake (dimensionless, about 1).

    ``x``, ``y`` are EPSG:32632 coordinates in metres; the shallow bathing arm is greener, the deep
    water at the dam clearer.
    """
    dx = np.asarray(x) - centre[0]
    dy = np.asarray(y) - centre[1]
    c, s = np.cos(np.deg2rad(12.0)), np.sin(np.deg2rad(12.0))
    lx, ly = c * dx + s * dy, -s * dx + c * dy  # back into the lake's local frame
    g = 0.05 * lx / 3000.0
    for (bx, by), scale, amp in _BUMPS:
        g = g + amp * np.exp(-((lx - bx) ** 2 + (ly - by) ** 2) / (2 * scale**2))
    return np.exp(g)


def lake_truth(
    model: WeatherModel, tp_load: pd.Series, seed: int, start: pd.Timestamp, end: pd.Timestamp
) -> pd.DataFrame:
    """Daily lake-wide chlorophyll-a truth and its drivers, ``start``..``end``.

    Parameters
    ----------
    model : WeatherModel
        The scenario weather; read at the lake centre.
    tp_load : pandas.Series
        True daily TP load into the lake, kg d-1, indexed by date.

    Returns
    -------
    pandas.DataFrame
        Index ``date``; columns ``water_temperature_proxy`` (degC), ``shortwave`` (W m-2),
        ``tp_load_30d`` (kg d-1), ``f_t``, ``f_i``, ``f_p``, ``bloom`` and ``chla`` (mg m-3).
    """
    p = PARAMS
    rng = rng_for(seed, "chla")
    f = model.at(np.array([LAKE_LATLON[0]]), np.array([LAKE_LATLON[1]]))
    nd = len(model.days)
    air = f["air_temp"][:, 0].reshape(nd, 24).mean(axis=1)
    sw = f["sw_flux"][:, 0].reshape(nd, 24).mean(axis=1)
    alpha = 1.0 / p["TAU_DAYS"]
    tw = recursive_filter(air, 1.0 - alpha, alpha, y0=air[0])
    frame = pd.DataFrame({"water_temperature_proxy": np.maximum(tw, 3.5), "shortwave": sw}, index=model.days)
    frame = frame.loc[start:end].copy()
    frame["tp_load_30d"] = tp_load.reindex(frame.index).rolling(int(p["P_WINDOW_DAYS"]), min_periods=1).mean()
    frame["f_t"] = p["THETA"] ** (frame["water_temperature_proxy"] - 20.0)
    frame["f_i"] = frame["shortwave"] / (frame["shortwave"] + p["I_K"])
    frame["f_p"] = frame["tp_load_30d"] / (frame["tp_load_30d"] + p["K_P"])
    doy = frame.index.dayofyear.to_numpy().astype(float)
    years = frame.index.year.to_numpy()
    bloom = np.zeros(len(frame))
    for y in np.unique(years):
        amp = rng.uniform(p["BLOOM_AMPLITUDE_MIN"], p["BLOOM_AMPLITUDE_MAX"])
        peak = rng.uniform(p["BLOOM_DOY_MIN"], p["BLOOM_DOY_MAX"])
        sel = years == y
        bloom[sel] = amp * np.exp(-0.5 * ((doy[sel] - peak) / p["BLOOM_WIDTH_DAYS"]) ** 2)
    frame["bloom"] = bloom
    phi = p["NOISE_PHI"]
    noise = recursive_filter(rng.normal(0.0, p["NOISE_SD"] * np.sqrt(1 - phi**2), len(frame)), phi)
    frame["chla"] = (p["C_MAX"] * frame["f_t"] * frame["f_i"] * frame["f_p"] + p["BACKGROUND"] + bloom) * np.exp(noise)
    frame.index.name = "date"
    return frame
