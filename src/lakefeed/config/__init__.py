"""Configuration: YAML in, frozen validated pydantic models out.

Takes YAML files; returns :class:`Project` objects (a lake with its sources). Only
:mod:`lakefeed.config._load` touches files. The core never sees raw dicts or paths.
"""

from lakefeed.config._base import LayerRef
from lakefeed.config._load import Project, find_lake_files, load_lake, load_project, load_projects, load_sources
from lakefeed.config.lake import (
    AoiLayer,
    FeatureOptions,
    LakeConfig,
    SensorConfig,
    SkillOptions,
    SubbasinLayer,
    TargetOptions,
    Threshold,
    ZoneOptions,
)
from lakefeed.config.sources import (
    WEATHER_ROLES,
    Accumulation,
    ForecastSource,
    HydrologySource,
    SampleSheet,
    SampleStation,
    SceneSource,
    SourcesConfig,
    WeatherSource,
)

__all__ = [
    "WEATHER_ROLES",
    "Accumulation",
    "AoiLayer",
    "FeatureOptions",
    "ForecastSource",
    "HydrologySource",
    "LakeConfig",
    "LayerRef",
    "Project",
    "SampleSheet",
    "SampleStation",
    "SceneSource",
    "SensorConfig",
    "SkillOptions",
    "SourcesConfig",
    "SubbasinLayer",
    "TargetOptions",
    "Threshold",
    "WeatherSource",
    "ZoneOptions",
    "find_lake_files",
    "load_lake",
    "load_project",
    "load_projects",
    "load_sources",
]
