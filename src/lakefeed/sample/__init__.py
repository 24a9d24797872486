"""Deterministic generator of the invented sample scenario "Tallow Reservoir".

:func:`generate` writes, into one folder, everything lakefeed reads (weather grids, hydrological model
outputs, tributary samples, chlorophyll-a scenes with a STAC catalog, a forecast archive, geometry and a
ready configuration) plus the planted truth under ``truth/`` that tests compare against. The same seed
gives byte-identical files. Everything is invented: no real place, sensor or data set.
"""

from __future__ import annotations

import shutil
import time
from pathlib import Path

import pandas as pd

from lakefeed.sample._chla import PARAMS, lake_truth, spatial_pattern
from lakefeed.sample._config import render_config, write_config
from lakefeed.sample._forecast import write_forecasts
from lakefeed.sample._geo import NETWORK, build_geometry, write_geometry
from lakefeed.sample._hydrology import RATING, SAMPLED_SUBBASIN, TP_DETECTION_LIMIT, simulate_hydrology, write_hydrology
from lakefeed.sample._io import write_json
from lakefeed.sample._scenes import OUTLIER_FACTOR, SENSORS, SHORE_FLAG_PROBABILITY, aoi_pattern_means, write_scenes
from lakefeed.sample._weather import draw_weather, write_reanalysis
from lakefeed.stages._result import Progress, no_progress

__all__ = ["FIRST_YEAR", "LAST_TIMINGS", "build_geometry", "generate", "render_config", "write_geometry"]

#: Seconds spent per part in the last :func:`generate` call (for benchmarks and the CLI summary).
LAST_TIMINGS: dict[str, float] = {}

#: The scenario starts on 1 January of this year (UTC).
FIRST_YEAR = 2022
_SPINUP_DAYS = 61
#: Sub-folders the generator owns; a previous scenario's are removed before writing a new one.
_FOLDERS = ("config", "geometry", "weather", "hydrology", "samples", "scenes", "forecast", "truth")
_FORECAST_DAYS = 11


def generate(
    out: str | Path,
    *,
    seed: int = 42,
    years: int = 3,
    small: bool = False,
    progress: Progress | None = None,
) -> Path:
    """Generate the sample scenario into ``out`` and return ``out``.

    Parameters
    ----------
    out : path
        Folder to write into (created). A scenario generated there before is replaced (its sub-folders
        are removed first); other files in the folder are left alone.
    seed : int
        Seed of every random draw; the same seed gives byte-identical files.
    years : int
        Number of calendar years from 1 January 2022 (ignored when ``small``).
    small : bool
        Reduced scenario for tests: one year and fewer scenes; everything else is the same.
    progress : callable, optional
        ``progress(description, done, total)`` for progress bars.

    Returns
    -------
    pathlib.Path
        ``out``; the configuration is ``out/config/lake-tallow.yaml``.

    Examples
    --------
    >>> generate("demo/sample", seed=42)  # doctest: +SKIP
    """
    report = progress or no_progress
    out = Path(out)
    years = 1 if small else int(years)
    if years < 1:
        raise ValueError(f"years must be >= 1, got {years}")
    if (out / "truth" / "truth.json").is_file():  # a previous scenario: no stale months or scenes may remain
        for name in _FOLDERS:
            shutil.rmtree(out / name, ignore_errors=True)
    out.mkdir(parents=True, exist_ok=True)
    start = pd.Timestamp(f"{FIRST_YEAR}-01-01")
    end = pd.Timestamp(f"{FIRST_YEAR + years - 1}-12-31")
    first = start - pd.Timedelta(days=_SPINUP_DAYS)
    timings: dict[str, float] = {}
    clock = time.perf_counter()

    def lap(name: str) -> None:
        nonlocal clock
        now = time.perf_counter()
        timings[name] = now - clock
        clock = now

    report("geometry", 0, 1)
    geo = build_geometry()
    write_geometry(geo, out / "geometry")
    write_config(out / "config")
    report("geometry", 1, 1)
    lap("geometry")

    model = draw_weather(seed, first, (end - first).days + 1 + _FORECAST_DAYS)
    write_reanalysis(model, out / "weather", start, end, progress=lambda d, n: report("weather", d, n))
    lap("weather")

    hyd = simulate_hydrology(model, geo, seed, start, end)
    write_hydrology(hyd, out)
    lap("hydrology")

    lake_load = hyd.loads[hyd.loads["subbasin"] == "LAKE"].set_index("date")["tp_load"]
    truth = lake_truth(model, lake_load, seed, start, end)
    pattern = lambda x, y: spatial_pattern(x, y, geo.centre)  # noqa: E731
    lake_poly = geo.lake.geometry.iloc[0]
    aoi_geoms = dict(zip(geo.aois["aoi_id"], geo.aois.geometry, strict=True))
    factors = aoi_pattern_means(lake_poly, aoi_geoms, pattern)
    every = {"kite": 5, "dune": 3} if small else None
    scenes = write_scenes(
        out,
        truth=truth["chla"],
        cloud=pd.Series(model.cloud, index=model.days),
        lake=lake_poly,
        pattern_fn=pattern,
        seed=seed,
        every_days=every,
        progress=lambda d, n: report("scenes", d, n),
    )
    lap("scenes")

    biases = write_forecasts(
        model, out / "forecast", start, end, seed=seed, progress=lambda d, n: report("forecast", d, n)
    )
    lap("forecast")

    _write_truth(
        out / "truth",
        seed=seed,
        start=start,
        end=end,
        truth=truth,
        factors=factors,
        hyd=hyd,
        scenes=scenes,
        biases=biases,
    )
    lap("truth")
    LAST_TIMINGS.clear()
    LAST_TIMINGS.update(timings)
    report("done", 1, 1)
    return out


def _write_truth(folder: Path, *, seed, start, end, truth, factors, hyd, scenes, biases) -> None:
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
                "revisit_days": s.every_days,
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
