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

from lakefeed.progress import Progress, no_progress
from lakefeed.sample._chla import lake_truth, spatial_pattern
from lakefeed.sample._config import render_config, write_config
from lakefeed.sample._forecast import write_forecasts
from lakefeed.sample._geo import build_geometry, write_geometry
from lakefeed.sample._hydrology import simulate_hydrology, write_hydrology
from lakefeed.sample._scenes import aoi_pattern_means, write_scenes
from lakefeed.sample._truth import write_truth
from lakefeed.sample._weather import draw_weather, write_reanalysis

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
    # the reduced scenario has one year of forecasts: fit quantile mapping on 90 days at least
    write_config(out / "config", min_overlap_days=90 if small else None)
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

    write_truth(
        out / "truth",
        seed=seed,
        start=start,
        end=end,
        truth=truth,
        factors=factors,
        hyd=hyd,
        scenes=scenes,
        biases=biases,
        every=every,
    )
    lap("truth")
    LAST_TIMINGS.clear()
    LAST_TIMINGS.update(timings)
    report("done", 1, 1)
    return out
