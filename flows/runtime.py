"""Runtime plumbing shared by the flows: stage lookup, Prefect API, Dask task runner, progress.

Takes lake config paths and store folders; returns stage callables and task runners. Must not
hold any science: every stage is one call into :mod:`lakefeed.stages`.

Prefect's local mode (no server to start) is used for ad-hoc runs. When tasks run in Dask worker
processes, those processes must reach the same Prefect API as the flow; :func:`prefect_api` starts
Prefect's own temporary local server once and passes its address in the settings context that Prefect
ships with every task, so workers do not each try to start a server of their own.
"""

from __future__ import annotations

import contextlib
import importlib
import json
import os
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

from lakefeed.progress import Progress
from lakefeed.stages import StageResult

__all__ = [
    "STAGES",
    "STAGES_MANY",
    "available_stages",
    "dask_task_runner",
    "get_progress",
    "prefect_api",
    "run_stage",
    "run_stage_many",
    "set_progress",
]

#: Stage name -> (module, function), in the order the flows run them (features after the inputs it joins).
STAGES: dict[str, tuple[str, str]] = {
    "weather": ("lakefeed.stages.weather", "build_weather"),
    "hydrology": ("lakefeed.stages.hydrology", "build_hydrology"),
    "target": ("lakefeed.stages.target", "build_target"),
    "features": ("lakefeed.stages.features", "build_features"),
    "forecast": ("lakefeed.stages.forecast", "build_forecast"),
    "skill": ("lakefeed.stages.skill", "build_skill"),
}

#: Stages with an entry point for many lakes at once (lakes sharing its work; each lake read and written alone).
STAGES_MANY: dict[str, tuple[str, str]] = {
    "weather": ("lakefeed.stages.weather_group", "build_weather_many"),
    "hydrology": ("lakefeed.stages.hydrology_group", "build_hydrology_many"),
    "features": ("lakefeed.stages.features", "build_features_many"),
}

StageFn = Callable[..., StageResult]


def available_stages() -> tuple[dict[str, StageFn], dict[str, str]]:
    """Every stage function by name, in run order, and the stages left out with why (none: all are part of lakefeed)."""
    found = {name: getattr(importlib.import_module(module), func) for name, (module, func) in STAGES.items()}
    return found, {}


# --- progress: the CLI installs a callback; tasks running in this process use it -------------------------

_PROGRESS: list[Progress] = []


def set_progress(progress: Progress | None) -> None:
    """Install (or remove, with None) the progress callback used by tasks running in this process."""
    _PROGRESS.clear()
    if progress is not None:
        _PROGRESS.append(progress)


def get_progress() -> Progress | None:
    """The installed progress callback, or None (tasks in other processes only log)."""
    return _PROGRESS[0] if _PROGRESS else None


def run_stage(
    stage: str,
    lake_file: str,
    store_root: str,
    *,
    progress: Progress | None = None,
    since: str | None = None,
    allow_shrink: bool = False,
) -> StageResult:
    """Load the lake config and run one stage for it (the single library call a task makes).

    ``since`` (first day of the earliest changed source month) is passed to stages that take it (the
    weather stage: only the days from that month on are recomputed; the target stage: only those scenes are
    read); None runs the stage in full. ``allow_shrink``: the stage writes even when its new rows would
    lose stored dates or values (:mod:`lakefeed.stages._guard`); otherwise it refuses and fails.
    """
    from lakefeed.config import load_project
    from lakefeed.store import Store

    stages, _ = available_stages()
    project = load_project(lake_file)
    if stage not in stages:
        return StageResult(stage, project.id, skipped=True, reason=f"unknown stage {stage!r}")
    extra: dict[str, Any] = {"since": since} if since is not None else {}
    if allow_shrink:
        extra["allow_shrink"] = True
    return stages[stage](project, Store(store_root, staged=True), progress=progress, **extra)


def run_stage_many(
    stage: str,
    lake_files: dict[str, str],
    store_root: str,
    *,
    progress: Progress | None = None,
    allow_shrink: bool = False,
    since: dict[str, str] | None = None,
) -> dict[str, StageResult | Exception]:
    """Run a stage of :data:`STAGES_MANY` for many lakes in one call; lake id -> its result, or the
    exception that stopped that lake (the other lakes go on); ``allow_shrink`` as for :func:`run_stage`;
    ``since``: lake id -> first day of its earliest changed source month, for a stage that takes it (a lake
    left out is built in full)."""
    from lakefeed.config import load_project
    from lakefeed.store import Store

    module, func = STAGES_MANY[stage]
    fn = getattr(importlib.import_module(module), func)
    out: dict[str, StageResult | Exception] = {}
    projects = []
    for lake, lake_file in lake_files.items():
        try:
            projects.append(load_project(lake_file))
        except Exception as err:  # this lake's configuration: reported for it alone
            out[lake] = err
    extra: dict[str, Any] = {"allow_shrink": True} if allow_shrink else {}
    if since:
        extra["since"] = since
    out.update(fn(projects, Store(store_root, staged=True), progress=progress, isolate=True, **extra))
    return {lake: out[lake] for lake in lake_files if lake in out}


# --- Prefect API for local mode ---------------------------------------------------------------------------


@contextlib.contextmanager
def prefect_api() -> Iterator[str | None]:
    """Make sure flows and any Dask workers talk to one Prefect API; yields its URL.

    With ``PREFECT_API_URL`` set (a running server), nothing is started. Otherwise Prefect's temporary
    local server (the one its local mode starts by itself) is started here, once, and its address is put
    in the settings, which Prefect serialises with each task for the workers.
    """
    from prefect.settings import PREFECT_API_URL, temporary_settings

    current = PREFECT_API_URL.value()
    if current:
        yield current
        return
    from prefect.server.api.server import SubprocessASGIServer

    os.environ.setdefault("PREFECT_SERVER_ANALYTICS_ENABLED", "false")
    server = SubprocessASGIServer()  # the same instance Prefect's local mode uses (a singleton)
    if not server.running:
        server.start(timeout=180)
    with temporary_settings(updates={PREFECT_API_URL: server.api_url}):
        yield server.api_url


def dask_task_runner(address: str | None = None, *, n_workers: int | None = None) -> Any:
    """A prefect-dask ``DaskTaskRunner``: an existing cluster at ``address``, else a local one.

    The local cluster is sized to the machine: one single-threaded worker process per CPU core (stages
    release the GIL little in pandas code, so processes beat threads), on loopback, no dashboard.
    """
    from lakefeed.flows._dask import CleanDaskTaskRunner as DaskTaskRunner

    if address:
        return DaskTaskRunner(address=address)
    workers = n_workers or max(1, os.cpu_count() or 1)
    return DaskTaskRunner(
        cluster_class="distributed.LocalCluster",
        cluster_kwargs={
            "n_workers": workers,
            "threads_per_worker": 1,
            "processes": True,
            "host": "127.0.0.1",
            "dashboard_address": None,
        },
    )


def write_json_atomic(path: Path, data: Any) -> None:
    """Write JSON aside and move it into place (a crash leaves the previous file intact)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_text(json.dumps(data, indent=1, sort_keys=True, default=str), encoding="utf-8")
    os.replace(tmp, path)
