"""Planted truth of the sample scenario, written for tests only (``truth/``).

Takes the in-memory truth of every part (chlorophyll-a, loads, scenes, forecast biases) and writes it
as JSON and CSV with sorted keys and fixed float formats. Must not compute scenario values.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from lakefeed.sample._chla import PARAMS
from lakefeed.sample._geo import NETWORK
from lakefeed.sample._hydrology import RATING, SAMPLED_SUBBASIN, TP_DETECTION_LIMIT, Hydrology
from lakefeed.sample._io import write_json
from lakefeed.sample._scenes import OUTLIER_FACTOR, SENSORS, SHORE_FLAG_PROBABILITY

__all__ = ["write_truth"]


def write_truth(
    folder: Path,
    *,
    seed: int,
    start: pd.Timestamp,
    end: pd.Timestamp,
    truth: pd.DataFrame,
    factors: dict[str, float],
    hyd: Hydrology,
    scenes: pd.DataFrame,
    biases: dict[str, dict[str, float | str]],
    every: dict[str, int] | None,
) -> None:
    """Write ``truth.json``, ``chla_truth.csv``, ``loads_truth.csv`` and ``scenes_truth.csv`` into ``folder``.

    ``truth``: lake-wide daily chlorophyll-a and drivers (:func:`lakefeed.sample._chla.lake_truth`);
    ``factors``: AOI means of the spatial pattern; ``scenes``: one planted-facts row per scene;
    ``every``: revisit overrides of the reduced scenario.
    """
    folder.mkdir(parents=True, exist_ok=True)
    rows = []
    for aoi, f in factors.items():
        part = truth.reset_index().assign(
            aoi=aoi, chla=truth["chla"].to_numpy() * f, lake_chla=truth["chla"].to_numpy()
        )
        rows.append(part)
    chla = pd.concat(rows, ignore_index=True)
    cols = [
        "date",
        "aoi",
        "chla",
        "lake_chla",
        "water_temperature_proxy",
        "shortwave",
        "tp_load_30d",
        "f_t",
        "f_i",
        "f_p",
        "bloom",
    ]
    chla = chla[cols].sort_values(["date", "aoi"])
    chla["date"] = chla["date"].dt.strftime("%Y-%m-%d")
    chla.to_csv(folder / "chla_truth.csv", index=False, float_format="%.6g", lineterminator="\n")
    loads = hyd.loads.assign(date=hyd.loads["date"].dt.strftime("%Y-%m-%d"))
    loads.to_csv(folder / "loads_truth.csv", index=False, float_format="%.6g", lineterminator="\n")
    scenes.to_csv(folder / "scenes_truth.csv", index=False, lineterminator="\n")
    outliers = sorted(scenes.loc[scenes["outlier_factor"] != 1.0, "scene_id"])
    doc = {
        "scenario": "Tallow Reservoir (invented)",
        "seed": int(seed),
        "period": {"start": start.strftime("%Y-%m-%d"), "end": end.strftime("%Y-%m-%d")},
        "sensor_bias": {
            name: {
                "model": "ratio",
                "factor": s.bias_ratio,
                "pixel_noise_sd": s.noise_sd,
                "pixel_size_m": s.pixel_m,
                "revisit_days": (every or {}).get(name, s.every_days),
                "overpass_hour_utc": s.hour_utc,
                "reference": s.bias_ratio == 1.0,
            }
            for name, s in SENSORS.items()
        },
        "dune_over_kite_ratio": SENSORS["dune"].bias_ratio / SENSORS["kite"].bias_ratio,
        "outlier_factor": OUTLIER_FACTOR,
        "outlier_scenes": outliers,
        "shore_flag_probability": SHORE_FLAG_PROBABILITY,
        "quality_bits": {"0": "cloud", "1": "cloud shadow", "2": "sun glint", "3": "adjacency/mixed shore pixel"},
        "forecast_bias": {"lead_unit": "day (forecast_period / 24 h)", "variables": biases},
        "chla_model": {
            "parameters": PARAMS,
            "aoi_factor": factors,
            "formula": "chla_aoi = aoi_factor * (C_MAX f_T f_I f_P + BACKGROUND + bloom) * exp(AR1 noise); "
            "f_T = THETA**(Tw-20), f_I = I/(I+I_K), f_P = P/(P+K_P)",
            "units": {
                "chla": "mg m-3",
                "water_temperature_proxy": "degC",
                "shortwave": "W m-2",
                "tp_load_30d": "kg d-1",
            },
        },
        "loads": {
            "units": {"discharge": "m3 s-1", "tn_load": "kg d-1", "tp_load": "kg d-1"},
            "rating": RATING,
            "sampled_subbasin": SAMPLED_SUBBASIN,
            "tp_detection_limit_mg_per_l": TP_DETECTION_LIMIT,
            "direct_inflows": sorted(k for k, v in NETWORK.items() if v[0] == "LAKE"),
        },
        "weather": {"nodata_corner": {"latitude_index": [0, 3], "longitude_index": [12, 16]}},
        "scene_count": {k: int(v) for k, v in scenes.groupby("sensor").size().items()},
        "mean_cloud_fraction": {
            k: round(float(v), 4) for k, v in scenes.groupby("sensor")["cloud_fraction"].mean().items()
        },
    }
    write_json(doc, folder / "truth.json")
