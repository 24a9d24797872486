"""Shared set-up of the forecast stage tests: the sample lake on its lake zone only (speed), its weather,
synthetic targets every 5 days and hindcast features, as the forecast stage expects to find them."""

from __future__ import annotations

import dataclasses
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from lakefeed.config import Project, load_project
from lakefeed.store import Store


def lake_zone_project(sample: Path, **forecast: Any) -> Project:
    """The sample lake with only the lake zone; its forecast source updated with ``forecast`` (the reduced
    sample covers one year, so callers lower ``min_overlap_days`` to 30 days, the config's floor)."""
    project = load_project(next((sample / "config").glob("lake-*.yaml")))
    lake = project.lake.model_copy(
        update={"zones": project.lake.zones.model_copy(update={"aois": False, "catchment": False})}
    )
    src = project.sources.forecast.model_copy(update=forecast)
    return dataclasses.replace(project, lake=lake, sources=project.sources.model_copy(update={"forecast": src}))


def weather_targets_features(project: Project, store: Store) -> None:
    """Weather, synthetic targets (every 5 days from day 60 to day 330 of the record) and hindcast features."""
    from lakefeed.stages.features import build_features
    from lakefeed.stages.weather import build_weather

    build_weather(project, store)
    first = pd.Timestamp(store.read_table("drivers_daily", project.id)["date"].min())
    days = pd.date_range(first + pd.Timedelta(days=60), first + pd.Timedelta(days=330), freq="5D")
    td = pd.DataFrame({"aoi": "intake", "date": days.date, "chla": 5 + np.arange(len(days)) % 7})
    store.write_table("target_daily", project.id, td)
    build_features(project, store)
