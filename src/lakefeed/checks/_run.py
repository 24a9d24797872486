"""Run every cheap check for one or more lake configs.

Takes lake YAML files or folders; returns one :class:`LakeReport` per lake config with its
:class:`CheckResult` lines, in the order the data flows (config, geometry, weather,
hydrology, samples, scenes, forecast, time coverage, feature windows against the weather record, quality
bits against the quality band). Sources that are not configured are
reported as skipped. Opens sources for metadata only; never writes anything.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import yaml

from lakefeed.checks._open import Period
from lakefeed.checks._result import CheckResult, failed, guarded, passed, skipped
from lakefeed.checks.coverage import check_coverage
from lakefeed.checks.geometry import Layers, check_geometry
from lakefeed.checks.grids import check_forecast, check_weather
from lakefeed.checks.meaning import check_quality_bits, check_record_length
from lakefeed.checks.sources import check_hydrology, check_samples, check_scenes
from lakefeed.config import Project, SourcesConfig, find_lake_files, load_project
from lakefeed.exceptions import ConfigError, LakefeedError
from lakefeed.extract.loads import model_subbasins

if TYPE_CHECKING:
    import geopandas as gpd

__all__ = ["LakeReport", "check_paths", "check_project"]


@dataclass
class LakeReport:
    """The check lines of one lake config file."""

    lake_file: Path
    lake_id: str | None = None
    results: list[CheckResult] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        """True when no line is a problem."""
        return all(r.ok for r in self.results)

    def count(self, status: str) -> int:
        """Number of lines with ``status``."""
        return sum(r.status == status for r in self.results)


def _grid_zones(project: Project, layers: Layers) -> gpd.GeoDataFrame | None:
    """The weather stage's zones (lon/lat), built by its own function; None when the layers fall short.

    A problem building them is reported by the geometry checks; the weather values are then not sampled.
    """
    from lakefeed.geometry.zones import build_zones

    lake = project.lake
    if layers.lake is None:
        return None
    try:
        return build_zones(
            layers.lake,
            aois=layers.aois if lake.zones.aois else None,
            aoi_id_field=lake.aois.id_field,
            subbasins=layers.subbasins if lake.zones.catchment or lake.zones.subbasins else None,
            subbasin_layer=lake.subbasins,
            options=lake.zones,
            crs="EPSG:4326",
        )
    except LakefeedError:
        return None


def check_project(project: Project) -> list[CheckResult]:
    """All source checks for a loaded project (the config itself already validated)."""
    lake, src = project.lake, project.sources
    results: list[CheckResult] = [
        passed("config", f"{project.lake_file.name} and {project.sources_file.name} are valid"),
        passed("lake id", f"{lake.id!r} is a plain slug"),
        passed("time zone", f"{lake.timezone} is a known IANA time zone"),
    ]
    try:
        geo, layers = check_geometry(lake)
    except Exception as err:  # an unexpected library failure is still a finding, not a crash
        geo, layers = [failed("geometry", f"{type(err).__name__}: {err}", "check the geometry files")], Layers()
    results += geo
    zones = {"lake": layers.lake, "catchment": layers.catchment(lake.subbasins.id_field)}
    periods: dict[str, Period | None] = {}

    def run(name: str, key: str, fn: Callable[[], tuple[list[CheckResult], Period | None]]) -> None:
        holder: dict[str, Period | None] = {}

        def body() -> list[CheckResult]:
            res, holder["period"] = fn()
            return res

        results.extend(guarded(name, body))
        periods[key] = holder.get("period")

    grid_zones = _grid_zones(project, layers)
    run(
        "weather",
        "weather",
        lambda: check_weather(
            src.weather,
            zones,
            grid_zones=grid_zones,
            allow_partial_coverage=lake.zones.allow_partial_coverage,
        ),
    )
    ids = [] if layers.subbasins is None else layers.subbasins[lake.subbasins.id_field].astype(str).tolist()
    if layers.subbasins is None and src.hydrology is not None:
        results.append(skipped("hydrology ids", "needs the sub-basin layer"))
    required = layers.catchment_ids(lake.subbasins.id_field)
    stations = {s.id: s.subbasin for s in src.samples if s.subbasin}
    if layers.traced is not None and src.hydrology is not None and set(stations.values()) <= set(layers.traced.graph):
        # what the stage reads: the inflow's members and each station's flow members (routed: its own sub-basin)
        members, flows = model_subbasins(layers.traced, stations, discharge_kind=src.hydrology.discharge_kind)
        required = list(dict.fromkeys([*members, *(m for ids in flows.values() for m in ids)]))
    run("hydrology", "hydrology", lambda: check_hydrology(src.hydrology, required_ids=required))
    run("samples", "samples", lambda: check_samples(src.samples, subbasin_ids=ids))
    run("scenes", "scenes", lambda: check_scenes(src.scenes, lake))
    run("forecast", "forecast issues", lambda: check_forecast(src.forecast, zones))
    results += check_coverage(periods)
    results += guarded("feature windows", lambda: check_record_length(lake, periods.get("weather")))
    results += guarded("quality bits", lambda: check_quality_bits(src.scenes, lake))
    results.append(_check_store(project))
    return results


def _check_store(project: Project) -> CheckResult:
    """Whether the store of ``store:`` can be written (the run lock of every writing command asks the same)."""
    from lakefeed.store.location import store_location_problem

    root = project.sources.store
    if not root:
        return skipped("store", f"no 'store:' in {project.sources_file.name}; writing commands need --store DIR")
    if problem := store_location_problem(root):
        return failed("store", f"{project.sources_file} (key 'store'): {problem}")
    return passed("store", f"{root} can hold the store")


def _is_sources_file(path: Path) -> bool:
    try:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, yaml.YAMLError):
        return False
    return isinstance(data, dict) and bool(data) and set(map(str, data)) <= set(SourcesConfig.model_fields)


def _check_file(lake_file: Path) -> LakeReport:
    report = LakeReport(lake_file=lake_file)
    if lake_file.is_file() and _is_sources_file(lake_file):
        report.results = [
            failed(
                "config",
                f"{lake_file} is a sources config, not a lake config",
                "give the lake config (e.g. lake-<id>.yaml) that names it under 'sources', or its folder",
            )
        ]
        return report
    try:
        project = load_project(lake_file)
    except ConfigError as err:
        problems = err.problems or [str(err)]
        report.results = [
            failed(
                "config",
                p,
                "fix that key in the file named above (line given where known), then run lakefeed check again",
            )
            for p in problems
        ]
        report.results.append(skipped("sources", "not opened: fix the configuration first"))
        return report
    report.lake_id = project.id
    report.results = check_project(project)
    return report


def check_paths(paths: Sequence[str | Path]) -> list[LakeReport]:
    """Check every lake config among ``paths`` (files, or folders holding lake YAML files).

    Returns
    -------
    list of LakeReport
        One per lake config file, in order; a lake id used twice is a problem of the second.
    """
    files = find_lake_files(list(paths))
    if not files:
        report = LakeReport(lake_file=Path(str(paths[0])) if paths else Path("."))
        report.results = [failed("config", f"no lake configuration found in {[str(p) for p in paths]}", "")]
        return [report]
    reports = [_check_file(f.resolve()) for f in files]
    seen: dict[str, Path] = {}
    for r in reports:
        if r.lake_id is None:
            continue
        if r.lake_id in seen:
            r.results.insert(0, failed("lake id", f"lake id {r.lake_id!r} is also used by {seen[r.lake_id]}", ""))
        seen.setdefault(r.lake_id, r.lake_file)
    return reports
