"""Repair of damaged store partitions: rebuild them from the sources by rerunning the stages that write them.

Takes a store, the lakes' projects and the damage :func:`lakefeed.store.verify_store` found; returns one
:class:`Repair` per damaged lake. For each lake, the damaged partitions (and an unreadable manifest entry)
are moved aside into ``<store>/_damaged/``, which no reader lists; the readable manifest entries stay, so
the features stage keeps its frozen fold boundaries. Then the stages that write those tables run in full,
in the flows' order (:data:`TABLE_STAGES`: ``features`` reruns the features stage and then the forecast
stage, which adds the re-forecast rows to ``features``). When the rebuilt partitions verify, the damaged
copies are removed; when a stage fails, the damaged partitions are put back as they were. Must not hold
science: it only calls stages.
"""

from __future__ import annotations

import importlib
import uuid
from collections.abc import Sequence
from dataclasses import dataclass, field

from lakefeed.config import Project
from lakefeed.exceptions import DamagedPartError
from lakefeed.progress import Progress, no_progress
from lakefeed.store import Store, partition_path, verify_store

__all__ = ["STAGE_FUNCTIONS", "TABLE_STAGES", "Repair", "repair_store"]

#: Stage -> (module, function, keyword arguments for a full build), in the order the flows run them.
STAGE_FUNCTIONS: dict[str, tuple[str, str, dict[str, object]]] = {
    "weather": ("lakefeed.stages.weather", "build_weather", {}),
    "hydrology": ("lakefeed.stages.hydrology", "build_hydrology", {}),
    "target": ("lakefeed.stages.target", "build_target", {}),
    "features": ("lakefeed.stages.features", "build_features", {"full": True}),
    "forecast": ("lakefeed.stages.forecast", "build_forecast", {}),
    "skill": ("lakefeed.stages.skill", "build_skill", {}),
}

#: Table -> the stages that rebuild it (``features`` holds rows of the features and the forecast stage).
TABLE_STAGES: dict[str, tuple[str, ...]] = {
    "drivers_daily": ("weather",),
    "weights": ("weather",),
    "hydrology_daily": ("hydrology",),
    "load_estimates": ("hydrology",),
    "target_obs": ("target",),
    "target_daily": ("target",),
    "sensor_bias": ("target",),
    "features": ("features", "forecast"),
    "diagnostics": ("features", "forecast"),
    "forecast_drivers_daily": ("forecast",),
    "bias_adjustment": ("forecast",),
    "forecast_evaluation": ("forecast",),
    "feature_screening": ("skill",),
    "baseline_skill": ("skill",),
}


@dataclass
class Repair:
    """What a repair did for one lake: ``status`` is ``repaired`` or ``failed`` (with the reason)."""

    lake: str
    tables: list[str]
    stages: list[str] = field(default_factory=list)
    status: str = "failed"
    message: str = ""


def _move(store: Store, src: str, dst: str) -> None:
    store.fs.makedirs(dst.rsplit("/", 1)[0], exist_ok=True)
    store.fs.mv(src, dst, recursive=True)


def _repair_lake(store: Store, project: Project, damage: list[DamagedPartError], progress: Progress) -> Repair:
    tables = sorted({e.table for e in damage})
    out = Repair(project.id, tables)
    unknown = [t for t in tables if t not in TABLE_STAGES]
    if unknown:
        out.message = (
            f"table(s) {', '.join(unknown)} cannot be rebuilt from the sources (not written by a stage, e.g. the "
            "run log); restore them from a backup or remove their partition folder and manifest entry"
        )
        return out
    wanted = {s for t in tables for s in TABLE_STAGES[t]}
    out.stages = [s for s in STAGE_FUNCTIONS if s in wanted]
    aside_root = f"{store.path}/_damaged/{uuid.uuid4().hex[:12]}"
    moved: list[tuple[str, str]] = []
    try:
        entries = [e.path for e in damage if e.path.endswith(".json")]  # unreadable manifest entries
        for i, src in enumerate([partition_path(store.path, t, project.id) for t in tables] + entries):
            if store.fs.exists(src):
                dst = f"{aside_root}/{i}/{src.rsplit('/', 1)[-1]}"
                _move(store, src, dst)
                moved.append((src, dst))
        for stage in out.stages:
            module, func, kwargs = STAGE_FUNCTIONS[stage]
            result = getattr(importlib.import_module(module), func)(project, store, progress=progress, **kwargs)
            if result.skipped and stage in {s for t in tables for s in TABLE_STAGES[t][:1]}:
                raise RuntimeError(f"stage {stage} was skipped: {result.reason}")
        left = verify_store(store, tables=tables, lakes=[project.id])
        if left:
            raise RuntimeError("; ".join(str(e) for e in left))
    except Exception as err:
        for src, dst in moved:  # the damaged partitions back as they were: the store is not worse than before
            if store.fs.exists(src):
                store.fs.rm(src, recursive=True)
            _move(store, dst, src)
        out.message = f"rebuild failed ({type(err).__name__}: {err}); the damaged files are left as they were"
        return out
    finally:
        if store.fs.exists(aside_root):
            store.fs.rm(aside_root, recursive=True)
    out.status = "repaired"
    out.message = f"rebuilt from the sources by the {', '.join(out.stages)} stage(s)"
    return out


def repair_store(
    store: Store,
    projects: Sequence[Project],
    damage: Sequence[DamagedPartError],
    *,
    progress: Progress | None = None,
) -> list[Repair]:
    """Rebuild every damaged partition from the sources; one :class:`Repair` per damaged lake.

    Parameters
    ----------
    store
        The store (the caller holds its run lock).
    projects
        Lake projects; a damaged lake without one is reported as failed (its sources are unknown).
    damage
        What :func:`lakefeed.store.verify_store` found.
    progress
        Progress callback passed to the stages.

    Returns
    -------
    list of Repair
        Per lake: the damaged tables, the stages rerun, ``repaired`` or ``failed`` with the reason.
    """
    by_lake: dict[str, list[DamagedPartError]] = {}
    for err in damage:
        by_lake.setdefault(err.lake, []).append(err)
    known = {p.id: p for p in projects}
    out = []
    for lake, errors in sorted(by_lake.items()):
        if lake not in known:
            out.append(
                Repair(
                    lake,
                    sorted({e.table for e in errors}),
                    message=f"no lake configuration given for "
                    f"lake {lake!r}; pass its YAML file to rebuild it from its sources",
                )
            )
            continue
        out.append(_repair_lake(store, known[lake], errors, progress or no_progress))
    return out
