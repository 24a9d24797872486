"""Prefect tasks: coarse (one per lake per stage, or per group of lakes for a stage they share), each a
single call into the library.

Takes lake config paths and the store root (plain strings, so tasks serialise to Dask workers and
their parameters never include open handles); returns plain dicts. Retries only transient I/O errors,
with exponential backoff; a missing file or a bad value fails at once with its reason. Prefect's
result caching is off (``NO_CACHE``): what to redo is decided from content hashes by the refresh
flow itself (:mod:`lakefeed.flows._state`), and outputs are written atomically by the store, so a
recomputed task (a lost Dask worker) only rewrites the same table.
"""

from __future__ import annotations

import contextlib
import errno
from dataclasses import asdict
from typing import Any

from prefect import get_run_logger, task
from prefect.cache_policies import NO_CACHE
from prefect.tasks import exponential_backoff

from lakefeed.flows._state import (
    changes,
    fingerprint,
    plan_stages,
    read_state,
    shared_sources,
    stage_since,
    table_complete,
)
from lakefeed.flows.runtime import get_progress, run_stage, run_stage_many

__all__ = ["is_transient", "lakes_task", "plan_task", "stage_task"]

_PERMANENT_ERRNO = {errno.ENOENT, errno.EACCES, errno.EPERM, errno.EISDIR, errno.ENOTDIR, errno.EINVAL}


def is_transient(exc: BaseException | None) -> bool:
    """True for errors worth retrying: I/O errors other than missing/forbidden files, timeouts, lost connections."""
    seen = 0
    while exc is not None and seen < 10:
        if isinstance(exc, TimeoutError | ConnectionError):
            return True
        if isinstance(exc, OSError) and exc.errno not in _PERMANENT_ERRNO and not isinstance(exc, FileNotFoundError):
            return True
        exc = exc.__cause__ or exc.__context__
        seen += 1
    return False


def _retry_transient(task: Any, task_run: Any, state: Any) -> bool:
    try:
        exc = state.result(raise_on_failure=False)
    except Exception as err:  # the state may hold an error that cannot be re-raised
        exc = err
    return isinstance(exc, BaseException) and is_transient(exc)


def _logging_progress(lake: str, stage: str) -> Any:
    logger = get_run_logger()
    last: dict[str, int] = {}

    def progress(description: str, done: int, total: int) -> None:
        pct = int(100 * done / total) if total else 100
        if pct // 25 > last.get(description, -1) // 25 or done == total:
            last[description] = pct
            logger.info("lake %s, %s: %s %d/%d", lake, stage, description, done, total)

    return progress


@contextlib.contextmanager
def _cluster_client() -> Any:
    """Inside a Dask worker, send the stage's dask collections to the whole cluster."""
    try:
        from distributed import get_worker

        get_worker()
    except (ImportError, ValueError):
        yield None
        return
    from prefect_dask import get_dask_client

    with get_dask_client() as client:
        yield client


@task(
    name="stage",
    task_run_name="{stage}:{lake}",
    retries=2,
    retry_delay_seconds=exponential_backoff(backoff_factor=2),
    retry_jitter_factor=0.5,
    retry_condition_fn=_retry_transient,
    cache_policy=NO_CACHE,
)
def stage_task(
    stage: str, lake: str, lake_file: str, store_root: str, since: str | None = None, allow_shrink: bool = False
) -> dict[str, Any]:
    """Run one stage for one lake (``since``, ``allow_shrink``: see :func:`run_stage`); returns the
    :class:`StageResult` as a dict."""
    progress = get_progress() or _logging_progress(lake, stage)
    with _cluster_client():
        result = run_stage(stage, lake_file, store_root, progress=progress, since=since, allow_shrink=allow_shrink)
    done = result.reason if result.skipped else f"{result.tables} {result.reason}".strip()
    get_run_logger().info("lake %s, %s: %s", lake, stage, done)
    return asdict(result)


@task(name="stage-lakes", task_run_name="{stage}:{first_lake}+", cache_policy=NO_CACHE)
def lakes_task(
    stage: str,
    lakes: dict[str, str],
    store_root: str,
    first_lake: str = "",
    allow_shrink: bool = False,
    since: dict[str, str] | None = None,
) -> dict[str, dict[str, Any]]:
    """Run one stage for several lakes in one call (the stage shares work between them; see
    :data:`lakefeed.flows.runtime.STAGES_MANY`). Lake id -> ``{"result": StageResult as a dict}`` or
    ``{"error": text, "transient": bool}``; the flow reruns the failed lakes one by one (with retries), so
    a lake's failure stays its own. Not retried itself: its lakes' errors are reported, not raised. ``since``:
    lake id -> first day of its earliest changed source month (an incremental stage; absent: in full)."""
    logger = get_run_logger()
    progress = get_progress() or (lambda text, done, total: None)
    with _cluster_client():
        results = run_stage_many(stage, lakes, store_root, progress=progress, allow_shrink=allow_shrink, since=since)
    out: dict[str, dict[str, Any]] = {}
    for lake, r in results.items():
        if isinstance(r, Exception):
            out[lake] = {"error": f"{type(r).__name__}: {r}", "transient": is_transient(r)}
            logger.warning("lake %s, %s: %s (rerun alone)", lake, stage, out[lake]["error"])
        else:
            out[lake] = {"result": asdict(r)}
            done = r.reason if r.skipped else f"{r.tables} {r.reason}".strip()
            logger.info("lake %s, %s: %s", lake, stage, done)
    return out


@task(
    name="plan",
    task_run_name="plan:{lake}",
    retries=2,
    retry_delay_seconds=exponential_backoff(backoff_factor=2),
    retry_condition_fn=_retry_transient,
    cache_policy=NO_CACHE,
)
def plan_task(
    lake: str, lake_file: str, store_root: str, stages: list[str], full: bool = False, verify_hashes: bool = False
) -> dict[str, Any]:
    """Hash the lake's sources; decide which stages must run (all of them when ``full``) and from which day.

    ``since`` maps an incremental stage to the first day of its earliest changed source month (absent: in full);
    ``share`` maps a stage to the key of the sources it reads (lakes with the same key share their reads);
    ``files``: per source file [size, mtime ns, sha256], kept in the state record: the next run hashes only the
    files whose size or modification time changed, or every file with ``verify_hashes``.
    """
    from lakefeed.config import load_project
    from lakefeed.store import Store

    project = load_project(lake_file)
    store = Store(store_root, staged=True)
    state = read_state(store_root, lake)
    files: dict[str, list[Any]] = {}
    known = None if verify_hashes or not isinstance(state.get("files"), dict) else state["files"]
    new = fingerprint(project, known=known, seen=files)
    old = {"sources": {}, "stages": {}} if full else state
    changed = changes(old.get("sources", {}), new)
    recorded = old.get("stages", {}) if isinstance(old.get("stages"), dict) else {}
    plan = plan_stages(stages, changed, recorded=recorded, has_table=lambda t: table_complete(store, t, lake))
    since = {s: d for s in plan if (d := stage_since(s, changed, recorded=recorded)) is not None}
    get_run_logger().info(
        "lake %s: changed %s; stages to run: %s%s",
        lake,
        changed or "nothing",
        plan or "none",
        "".join(f"; {s} from {d}" for s, d in since.items()),
    )
    share = shared_sources(project)
    return {
        "lake": lake,
        "sources": new,
        "changed": changed,
        "stages": plan,
        "recorded": recorded,
        "since": since,
        "share": share,
        "files": files,
    }
