"""What changed since the last run: content hashes of each lake's sources, by kind and month.

Takes a loaded :class:`~lakefeed.config.Project` and the store root; returns fingerprints
(``{kind: {month: sha256}}``), the stages a lake needs, the first day of the earliest changed month for a
stage that processes only changed months (the weather and target stages), and reads/writes the per-lake record
``<store>/_state/source_state/lake=<id>.json``. Months come from ``YYYY-MM`` / ``YYYYMM`` in file names
(files without one count as ``all``). Must not run any stage.

The record is written at the end of a run (atomically): stages that failed or did not get to run are
left out of it, so the next run redoes them; a run killed midway leaves the previous record, so the
next run redoes all of that run's work (store writes are atomic: no half-written table is ever seen).
"""

from __future__ import annotations

import glob
import hashlib
import json
import re
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from lakefeed.config import Project
from lakefeed.exceptions import SourceError

__all__ = [
    "INCREMENTAL",
    "STAGE_INPUTS",
    "changes",
    "fingerprint",
    "plan_stages",
    "read_state",
    "shared_sources",
    "stage_since",
    "state_path",
    "table_complete",
]

_MONTH = re.compile(r"(?<!\d)(\d{4})-?(0[1-9]|1[0-2])(?:-?\d{2})?(?!\d)")

#: Source kinds each stage reads ("config" = lake YAML, sources YAML and geometry layers).
STAGE_INPUTS: dict[str, tuple[str, ...]] = {
    "weather": ("config", "weather"),
    "hydrology": ("config", "hydrology", "samples"),
    "target": ("config", "scenes"),
    "features": ("config", "weather", "hydrology", "samples", "scenes"),
    "forecast": ("config", "forecast", "weather"),
    "skill": ("config",),
}

#: Stages that can process only the changed months of one source kind (their ``since`` argument).
INCREMENTAL: dict[str, str] = {"weather": "weather", "target": "scenes", "forecast": "forecast"}

#: Source kinds whose undated file (the scene catalogue, listing the items) changes with every new month: the
#: stage checks such a change against its stored input hashes itself, so with dated changes it is no full build.
CHECKS_UNDATED: frozenset[str] = frozenset({"scenes"})


#: Per file (absolute path): [size in bytes, modification time in ns, SHA-256] known from the last run.
FileHashes = dict[str, list[Any]]


class _Hasher:
    """SHA-256 of files, reusing a known hash when a file's size and modification time are unchanged."""

    def __init__(self, known: FileHashes | None) -> None:
        self.known = known or {}
        self.seen: FileHashes = {}

    def __call__(self, path: Path) -> str:
        key = str(Path(path).absolute())
        st = Path(path).stat()
        old = self.known.get(key)
        if isinstance(old, list) and len(old) == 3 and old[:2] == [st.st_size, st.st_mtime_ns]:
            digest = str(old[2])
        else:
            h = hashlib.sha256()
            with open(path, "rb") as fh:
                for block in iter(lambda: fh.read(1 << 20), b""):
                    h.update(block)
            digest = h.hexdigest()
        self.seen[key] = [st.st_size, st.st_mtime_ns, digest]
        return digest


def _month(path: Path) -> str:
    m = _MONTH.search(path.name)
    return f"{m.group(1)}-{m.group(2)}" if m else "all"


def _expand(patterns: Iterable[str], what: str) -> list[Path]:
    files: list[Path] = []
    for pat in patterns:
        hits = sorted(glob.glob(str(pat), recursive=True))
        if not hits:
            raise SourceError(f"{what}: no file matches {pat!r}; check the path in sources.yaml or restore the files")
        files += [Path(h) for h in hits if Path(h).is_file()]
    return files


def _by_month(files: Iterable[Path], hasher: _Hasher, base: Path | None = None) -> dict[str, str]:
    groups: dict[str, list[tuple[str, str]]] = {}
    for f in files:
        name = str(f.relative_to(base)) if base is not None else f.name
        groups.setdefault(_month(f), []).append((name, hasher(f)))
    return {m: hashlib.sha256(json.dumps(sorted(v)).encode()).hexdigest() for m, v in sorted(groups.items())}


def fingerprint(
    project: Project, *, known: FileHashes | None = None, seen: FileHashes | None = None
) -> dict[str, dict[str, str]]:
    """Content hashes of every input of a lake, by source kind and month.

    ``known``: per file, [size, mtime ns, sha256] from the last run (the ``files`` of the lake's state record):
    a file whose size and modification time are unchanged is not read again (None: every file is hashed, as
    ``--verify-hashes`` asks). ``seen`` (filled in): the same record of every file hashed now.
    Raises :class:`SourceError` naming the source when a configured file is missing.
    """
    hasher = _Hasher(known)
    lake, src = project.lake, project.sources
    config_files = [project.lake_file, project.sources_file, lake.lake.path, lake.aois.path, lake.subbasins.path]
    out: dict[str, dict[str, str]] = {
        "config": {"all": hashlib.sha256("".join(hasher(Path(f)) for f in config_files).encode()).hexdigest()}
    }
    if src.weather is not None:
        out["weather"] = _by_month(_expand(src.weather.paths, "weather"), hasher)
    if src.hydrology is not None:
        hyd = [src.hydrology.path] if src.hydrology.path else list(src.hydrology.files.values())
        out["hydrology"] = _by_month(_expand(hyd, "hydrology"), hasher)
    if src.samples:
        out["samples"] = _by_month(_expand([s.path for s in src.samples], "samples"), hasher)
    if src.scenes is not None:
        if src.scenes.catalog:
            cat = _expand([src.scenes.catalog], "scenes catalog")[0]
            base = cat.parent
        else:
            base = Path(str(src.scenes.folder))
        if not base.is_dir():
            raise SourceError(f"scenes: folder {base} does not exist; check sources.yaml scenes")
        out["scenes"] = _by_month((p for p in base.rglob("*") if p.is_file()), hasher, base)
    if src.forecast is not None:
        out["forecast"] = _by_month(_expand(src.forecast.paths, "forecast"), hasher)
    if seen is not None:
        seen.update(hasher.seen)
    return out


def shared_sources(project: Project) -> dict[str, str]:
    """Stage -> key of the source files it reads (lakes with equal keys can share one read of them).

    Weather: the time zone of the stamps and the matched grid files (absolute); hydrology: the model output
    file(s). A stage without such a source has no key.
    """
    src = project.sources
    out: dict[str, str] = {}
    if src.weather is not None:
        files = sorted(str(Path(f).absolute()) for f in _expand(src.weather.paths, "weather"))
        out["weather"] = json.dumps([src.weather.time_zone, *files])
    if src.hydrology is not None:
        hyd = [src.hydrology.path] if src.hydrology.path else sorted(src.hydrology.files.values())
        out["hydrology"] = json.dumps([str(Path(str(f)).absolute()) for f in hyd])
    return out


def changes(old: dict[str, dict[str, str]], new: dict[str, dict[str, str]]) -> dict[str, list[str]]:
    """Months new or changed per kind (a removed month counts as a change of ``removed:<month>``)."""
    out: dict[str, list[str]] = {}
    for kind in sorted(set(old) | set(new)):
        o, n = old.get(kind, {}), new.get(kind, {})
        changed = [m for m in n if o.get(m) != n[m]] + [f"removed:{m}" for m in o if m not in n]
        if changed:
            out[kind] = sorted(changed)
    return out


def state_path(store_root: str | Path, lake: str) -> Path:
    """Where the record of a lake's last successful inputs lives."""
    return Path(store_root) / "_state" / "source_state" / f"lake={lake}.json"


def read_state(store_root: str | Path, lake: str) -> dict[str, Any]:
    """The last record (``{"sources": {kind: {month: hash}}, "stages": {stage: [tables]}}``, and ``files``: per
    file [size, mtime ns, sha256], see :func:`fingerprint`), or an empty one."""
    path = state_path(store_root, lake)
    if not path.exists():
        return {"sources": {}, "stages": {}}
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {"sources": {}, "stages": {}}  # unreadable record: rebuild everything


def plan_stages(
    stages: Iterable[str], changed: dict[str, list[str]], *, recorded: dict[str, list[str]], has_table: Any
) -> list[str]:
    """Stages to run for one lake.

    A stage runs when one of its inputs changed, when it has no record of a successful run, or when a
    table it wrote last time is missing from the store or unfinished (``has_table``: :func:`table_complete`).
    ``features`` runs when any earlier stage runs, and ``forecast`` (which extends the feature table with
    forecast leads) when ``features`` runs; ``skill`` (screening and baseline skill of the feature table) when
    ``features`` or ``forecast`` runs.
    """
    order = list(stages)
    plan = {
        s
        for s in order
        if any(k in changed for k in STAGE_INPUTS.get(s, ("config",)))
        or s not in recorded
        or not all(has_table(t) for t in recorded[s])
    }
    if "features" in order and any(order.index(s) < order.index("features") for s in plan):
        plan.add("features")
    if "forecast" in order and "features" in plan:
        plan.add("forecast")
    if "skill" in order and plan & {"features", "forecast"}:
        plan.add("skill")
    return sorted(plan, key=order.index)


def stage_since(stage: str, changed: dict[str, list[str]], *, recorded: dict[str, list[str]]) -> str | None:
    """First day (``YYYY-MM-01``) of the earliest changed month of the source an incremental stage reads.

    None (a full build) when the stage is not incremental, has no record of a successful run, when the
    configuration changed, or when a change has no month (``all``; for the kinds in :data:`CHECKS_UNDATED`
    only when no dated month changed too) or removes a month. The stage checks the stored table itself and
    falls back to a full build when it cannot extend it.
    """
    kind = INCREMENTAL.get(stage)
    months = changed.get(kind or "", [])
    if kind is None or stage not in recorded or "config" in changed or not months:
        return None
    if any(m.startswith("removed:") for m in months) or ("all" in months and kind not in CHECKS_UNDATED):
        return None
    dated = [m for m in months if m != "all"]
    return f"{min(dated)}-01" if dated else None


def table_complete(store: Any, table: str, lake: str) -> bool:
    """True when ``table`` has a partition for ``lake`` whose last write finished (a stage that writes in two
    steps marks the state between them in the manifest metadata; a run stopped there counts as not done)."""
    from lakefeed.stages.refresh_plan import PENDING

    if not store.has_table(table, lake):
        return False
    return PENDING not in ((store.entry(table, lake) or {}).get("metadata") or {})
