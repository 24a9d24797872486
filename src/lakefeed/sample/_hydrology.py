"""Invented hydrological model outputs, tributary samples and true loads for the sample scenario.

Takes the weather model and the sub-basin network; returns daily routed discharge (m3 s-1) and TN/TP
concentrations (mg L-1) per sub-basin, sparse measured samples at one direct inflow, and the true daily
loads (kg d-1). Runoff comes from a soil bucket and two linear reservoirs per sub-basin, routed down the
network through a channel reservoir; concentrations follow ``ln C = a + b ln(Q/Q50) + seasonal + AR(1)``.
:func:`write_hydrology` writes the CF timeSeries NetCDF, the wide CSVs and the samples CSV.
Must not read files.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr
from pyproj import Transformer

from lakefeed.sample._geo import CRS, Geometry
from lakefeed.sample._io import rng_for, write_netcdf
from lakefeed.sample._weather import WeatherModel, recursive_filter
from lakefeed.units import convert

__all__ = ["RATING", "SAMPLED_SUBBASIN", "TP_DETECTION_LIMIT", "Hydrology", "simulate_hydrology", "write_hydrology"]

#: The direct-inflow sub-basin whose outlet is sampled (the main inflow with the nested chain upstream).
SAMPLED_SUBBASIN = "SB02"
#: Detection limit of the TP analysis (mg L-1); lower values are reported at the limit, flagged censored.
TP_DETECTION_LIMIT = 0.025
#: Concentration-discharge relation per nutrient: ln C = ln(c50) + b ln(Q/Q50) + s sin + c cos (day of year).
RATING: dict[str, dict[str, float]] = {
    "tn": {"c50": 3.2, "b": -0.12, "sin": 0.05, "cos": 0.18, "noise_sd": 0.12, "noise_phi": 0.7},
    "tp": {"c50": 0.045, "b": 0.55, "sin": 0.10, "cos": -0.08, "noise_sd": 0.22, "noise_phi": 0.5},
}
_SOIL_MM, _FAST_DAYS, _SLOW_DAYS, _CHANNEL_DAYS = 140.0, 1.5, 25.0, 0.8


@dataclass(frozen=True)
class Hydrology:
    """Daily series on ``dates`` (written period only); frames have one column per sub-basin id."""

    dates: pd.DatetimeIndex
    discharge: pd.DataFrame  # m3 s-1, routed
    tn: pd.DataFrame  # mg L-1
    tp: pd.DataFrame  # mg L-1
    samples: pd.DataFrame  # date, nutrient, concentration, censored
    loads: pd.DataFrame  # long truth table
    outlets: pd.DataFrame  # subbasin_id, lat, lon, downstream_id


def _reservoir(inflow: np.ndarray, k_days: float, initial: np.ndarray | None = None) -> np.ndarray:
    """Outflow of a linear reservoir (time constant k, daily steps) along axis 0."""
    a = np.exp(-1.0 / k_days)
    return recursive_filter(inflow, a, 1.0 - a, y0=initial)


def _runoff_mm(precip: np.ndarray, temp: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Soil bucket: daily quick flow and percolation (mm d-1) from precipitation (mm d-1), temperature (degC)."""
    pet = 0.2 * np.clip(temp + 2.0, 0.0, None)
    soil = np.full(precip.shape[1], 0.7 * _SOIL_MM)
    quick, perc = np.empty_like(precip), np.empty_like(precip)
    for d in range(precip.shape[0]):  # a short daily loop, vectorised over sub-basins
        soil = soil + precip[d]
        excess = np.clip(soil - _SOIL_MM, 0.0, None)
        soil -= excess
        soil -= pet[d] * soil / _SOIL_MM
        p = 0.008 * soil * soil / _SOIL_MM
        soil -= p
        quick[d] = excess + 0.45 * precip[d] * (soil / _SOIL_MM) ** 2
        perc[d] = p
    return quick, perc


def simulate_hydrology(
    model: WeatherModel, geo: Geometry, seed: int, start: pd.Timestamp, end: pd.Timestamp
) -> Hydrology:
    """Run the invented hydrology over the weather's days and keep ``start``..``end`` (daily, inclusive)."""
    rng = rng_for(seed, "hydrology")
    sub = geo.subbasins.sort_values("subbasin_id").reset_index(drop=True)
    ids = list(sub["subbasin_id"])
    cent = sub.geometry.representative_point()
    lon, lat = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True).transform(cent.x.to_numpy(), cent.y.to_numpy())
    f = model.at(lat, lon)
    nd = len(model.days)
    precip = f["precip"].reshape(nd, 24, -1).sum(axis=1)
    temp = f["air_temp"].reshape(nd, 24, -1).mean(axis=1)
    quick, perc = _runoff_mm(precip, temp)
    area_km2 = convert(sub.geometry.area.to_numpy(), "m2", "km2")
    base = np.full(len(ids), np.mean(perc[:365], axis=0))
    runoff = _reservoir(quick, _FAST_DAYS) + _reservoir(perc, _SLOW_DAYS, initial=base)
    local = convert(runoff * area_km2[None, :], "mm km2 d-1", "m3 s-1")
    routed = local.copy()
    downstream = dict(zip(ids, sub["downstream_id"], strict=True))
    depth = {i: 0 for i in ids}
    for i in ids:  # depth in the network, to route from the top down
        j, n = i, 0
        while downstream[j] in downstream:
            j, n = downstream[j], n + 1
        depth[i] = n
    for i in sorted(ids, key=lambda k: (-depth[k], k)):
        d = downstream[i]
        if d in downstream:
            routed[:, ids.index(d)] += _reservoir(routed[:, [ids.index(i)]], _CHANNEL_DAYS)[:, 0]
    keep = (model.days >= start) & (model.days <= end)
    dates = model.days[keep]
    q = routed[keep]
    doy = dates.dayofyear.to_numpy()[:, None].astype(float)
    conc = {}
    for nut, p in RATING.items():
        noise = recursive_filter(
            rng.normal(0, p["noise_sd"], q.shape), p["noise_phi"], np.sqrt(1.0 - p["noise_phi"] ** 2)
        )
        level = np.log(p["c50"]) + rng.normal(0.0, 0.12, len(ids))[None, :]
        conc[nut] = np.exp(
            level
            + p["b"] * np.log(q / np.median(q, axis=0))
            + p["sin"] * np.sin(2 * np.pi * doy / 365.25)
            + p["cos"] * np.cos(2 * np.pi * doy / 365.25)
            + noise
        )
    frames = {k: pd.DataFrame(v, index=dates, columns=ids) for k, v in {"q": q, **conc}.items()}
    samples = _samples(
        rng, frames["q"][SAMPLED_SUBBASIN], frames["tn"][SAMPLED_SUBBASIN], frames["tp"][SAMPLED_SUBBASIN]
    )
    outlets = pd.DataFrame({"subbasin_id": ids, "lat": lat, "lon": lon, "downstream_id": sub["downstream_id"]})
    loads = _loads(frames, [i for i in ids if downstream[i] == "LAKE"])
    return Hydrology(dates, frames["q"], frames["tn"], frames["tp"], samples, loads, outlets)


def _samples(rng: np.random.Generator, q: pd.Series, tn: pd.Series, tp: pd.Series) -> pd.DataFrame:
    """Routine samples about every 3 weeks plus event samples on high-flow days (20-40 a year)."""
    picked: list[pd.Timestamp] = []
    for _, qy in q.groupby(q.index.year):
        routine = qy.index[np.arange(int(rng.integers(0, 10)), len(qy), 21)]
        jitter = rng.integers(-3, 4, len(routine))
        routine = [
            qy.index[np.clip(qy.index.get_loc(d) + j, 0, len(qy) - 1)] for d, j in zip(routine, jitter, strict=True)
        ]
        high = qy[qy > qy.quantile(0.85)].index
        n_event = min(len(high), int(rng.integers(8, 14)))
        events = list(rng.choice(high, n_event, replace=False)) if n_event else []
        picked.extend(sorted(set(routine) | {pd.Timestamp(e) for e in events}))
    dates = pd.DatetimeIndex(sorted(set(picked)))
    err = rng.normal(0.0, 0.05, (len(dates), 2))
    tn_obs = tn.loc[dates].to_numpy() * np.exp(err[:, 0])
    tp_obs = tp.loc[dates].to_numpy() * np.exp(err[:, 1])
    censored = tp_obs < TP_DETECTION_LIMIT
    tp_obs = np.where(censored, TP_DETECTION_LIMIT, tp_obs)
    rows = pd.concat(
        [
            pd.DataFrame({"date": dates, "nutrient": "tn", "concentration": tn_obs, "censored": False}),
            pd.DataFrame({"date": dates, "nutrient": "tp", "concentration": tp_obs, "censored": censored}),
        ]
    )
    return rows.sort_values(["date", "nutrient"]).reset_index(drop=True)


def _loads(frames: dict[str, pd.DataFrame], direct: list[str]) -> pd.DataFrame:
    """True daily loads (kg d-1) of each direct inflow and their sum (``subbasin`` = ``LAKE``)."""
    parts = []
    for sid in [*direct, "LAKE"]:
        cols = direct if sid == "LAKE" else [sid]
        q = frames["q"][cols]
        row = {"date": frames["q"].index, "subbasin": sid, "discharge": q.sum(axis=1).to_numpy()}
        for nut in ("tn", "tp"):
            row[f"{nut}_load"] = convert((q * frames[nut][cols]).sum(axis=1).to_numpy(), "m3 s-1 mg L-1", "kg d-1")
        parts.append(pd.DataFrame(row))
    return pd.concat(parts, ignore_index=True)


def write_hydrology(hyd: Hydrology, out: Path) -> list[Path]:
    """Write ``hydrology/subbasin_daily.nc`` (CF timeSeries), the wide CSVs and ``samples/tributary_samples.csv``."""
    folder = out / "hydrology"
    folder.mkdir(parents=True, exist_ok=True)
    ids = list(hyd.discharge.columns)
    ds = xr.Dataset(
        {
            "discharge": (
                ("station", "time"),
                hyd.discharge.to_numpy().T,
                {
                    "standard_name": "water_volume_transport_in_river_channel",
                    "units": "m3 s-1",
                    "long_name": "routed discharge at the sub-basin outlet (daily mean)",
                    "coordinates": "lat lon station_id",
                },
            ),
            "tn": (("station", "time"), hyd.tn.to_numpy().T, _conc_attrs("total nitrogen")),
            "tp": (("station", "time"), hyd.tp.to_numpy().T, _conc_attrs("total phosphorus")),
            "downstream_id": (("station",), np.array(list(hyd.outlets["downstream_id"]), dtype=object)),
        },
        coords={
            "time": ("time", hyd.dates.to_numpy(), {"standard_name": "time", "axis": "T", "long_name": "day (UTC)"}),
            "station_id": (
                ("station",),
                np.array(ids, dtype=object),
                {"cf_role": "timeseries_id", "long_name": "sub-basin id"},
            ),
            "lat": (
                ("station",),
                hyd.outlets["lat"].to_numpy(),
                {"standard_name": "latitude", "units": "degrees_north"},
            ),
            "lon": (
                ("station",),
                hyd.outlets["lon"].to_numpy(),
                {"standard_name": "longitude", "units": "degrees_east"},
            ),
        },
        attrs={"featureType": "timeSeries", "title": "Invented daily sub-basin model outputs, Tallow sample scenario"},
    )
    ds["downstream_id"].attrs = {
        "long_name": "id of the downstream sub-basin (LAKE: the reservoir; OUTSIDE: elsewhere)"
    }
    enc = {v: {"dtype": "float32", "zlib": True, "complevel": 4} for v in ("discharge", "tn", "tp")}
    enc["time"] = {"units": "days since 1970-01-01", "calendar": "proleptic_gregorian", "dtype": "int32"}
    paths = [write_netcdf(ds, folder / "subbasin_daily.nc", encoding=enc)]
    for name, frame in (("discharge", hyd.discharge), ("tn", hyd.tn), ("tp", hyd.tp)):
        wide = frame.rename_axis("date").reset_index()
        wide["date"] = wide["date"].dt.strftime("%Y-%m-%d")
        path = folder / f"{name}.csv"
        wide.to_csv(path, index=False, float_format="%.6g", lineterminator="\n")
        paths.append(path)
    samples = hyd.samples.assign(date=hyd.samples["date"].dt.strftime("%Y-%m-%d"))
    (out / "samples").mkdir(parents=True, exist_ok=True)
    path = out / "samples" / "tributary_samples.csv"
    samples.to_csv(path, index=False, float_format="%.5g", lineterminator="\n")
    paths.append(path)
    return paths


def _station_attrs(name: str, units: str) -> dict[str, str]:
    return {"standard_name": name, "units": units, "long_name": f"{name} of a point inside the sub-basin"}


def _conc_attrs(what: str) -> dict[str, str]:
    return {
        "units": "mg L-1",
        "long_name": f"{what} concentration at the sub-basin outlet (daily mean)",
        "coordinates": "lat lon station_id",
    }
