"""Prefect flows over many lakes: ``refresh`` (incremental) and ``build_lake`` / ``onboard_lake`` (full backfill).

Takes lake config files or folders of them and a store folder; returns one summary dict per lake and
stores them in the ``run_summary`` table. Lakes fan out as coarse tasks (one per lake per stage; the
weather and features stages, whose reads and work lakes share, in tasks of up to ``lakes_per_task`` lakes
naming the same sources) on a Dask cluster: a local one sized to
the machine by default, or an existing one (``dask_address`` argument or ``dask_address:`` in sources.yaml).
Each lake is isolated: its failure is recorded with the reason, its later stages are not run, and the other
lakes go on. Only one run writes a store at a time (:func:`lakefeed.store.run_lock`). Must not
hold any science.

What a refresh processes: the stages whose inputs changed (content hashes by source month,
:mod:`lakefeed.flows._state`). The weather and target stages get the first day of the earliest changed
month of their source: the weather stage recomputes only the days from there on (its older part files stay
as they are), the target stage reads only the scenes from there on (it reuses the stored statistics of the
older scenes); both run in full when the change has no month (except the scene catalogue, which the target
stage checks itself), removes a month, the configuration changed, or ``full``. The features stage extends
its table from the first new date by itself. The hydrology and forecast stages rerun for the whole record
when one of their inputs changed.
"""

from __future__ import annotations

import uuid
from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pandas as pd
from prefect import flow, get_run_logger
from prefect.task_runners import ThreadPoolTaskRunner

from lakefeed.config import Project, find_lake_files, load_project
from lakefeed.exceptions import ConfigError, LakefeedError
from lakefeed.flows._state import state_path
from lakefeed.flows.record import LakeRecord
from lakefeed.flows.runtime import (
    STAGES,
    STAGES_MANY,
    dask_task_runner,
    prefect_api,
    write_json_atomic,
)
from lakefeed.flows.tasks import lakes_task, plan_task, stage_task
from lakefeed.store import Store, run_lock

__all__ = [
    "LAKES_PER_TASK",
    "SUMMARY_UNITS",
    "build_lake",
    "format_summary",
    "onboard_lake",
    "process_lakes",
    "refresh",
]

SUMMARY_UNITS = {"new_rows": "1", "rows_written": "1", "seconds": "s"}
#: Default of the most lakes in one task of a stage that shares work between lakes (STAGES_MANY).
LAKES_PER_TASK = 32


def _row_counts(store: Store, lake: str) -> dict[str, int]:
    out = {}
    for table in store.tables():
        if store.has_table(table, lake):
            out[table] = store.num_rows(table, lake)
    return out


def _error_text(err: BaseException) -> str:
    return f"{type(err).__name__}: {err}".strip()


@flow(name="process-lakes", log_prints=True)
def process_lakes(
    lakes: dict[str, str],
    store_root: str,
    *,
    full: bool = False,
    stages: list[str] | None = None,
    allow_shrink: bool = False,
    lakes_per_task: int = LAKES_PER_TASK,
    verify_hashes: bool = False,
) -> list[dict[str, Any]]:
    """Run the stages each lake needs, stage by stage across lakes; one summary dict per lake.

    ``lakes`` maps lake id to its config file; ``stages`` limits the stages (default: all that exist);
    ``allow_shrink``: stages write even when their new rows lose stored dates or values (else they fail);
    ``lakes_per_task``: most lakes sharing sources run in one task of a stage that computes lakes together
    (1: every lake in a task of its own); ``verify_hashes``: hash every source file in full (else only the files
    whose size or modification time changed since the last run).
    """
    logger = get_run_logger()
    order = [s for s in STAGES if stages is None or s in stages]
    store = Store(store_root, staged=True)
    rec = {lake: LakeRecord(lake) for lake in lakes}
    plans: dict[str, dict[str, Any]] = {}
    futures = {lake: plan_task.submit(lake, lf, store_root, order, full, verify_hashes) for lake, lf in lakes.items()}
    for lake, fut in futures.items():
        try:
            plans[lake] = fut.result()
        except Exception as err:
            rec[lake].fail(f"plan: {_error_text(err)}")
            logger.error("lake %s failed while hashing its sources: %s", lake, _error_text(err))
    for lake, plan in plans.items():
        rec[lake].changed = "; ".join(f"{k}: {','.join(v)}" for k, v in plan["changed"].items())
    before = {lake: _row_counts(store, lake) for lake in plans}
    alive = {lake for lake in plans if plans[lake]["stages"]}
    for lake in set(plans) - alive:
        rec[lake].status, rec[lake].skipped = "unchanged", ["no new or changed source months"]
    for stage in order:
        todo = [lake for lake in sorted(alive) if stage in plans[lake]["stages"]]
        for lake, outcome in _run_stage(stage, todo, lakes, store_root, plans, allow_shrink, lakes_per_task).items():
            try:
                result = outcome.result() if not isinstance(outcome, dict) else outcome
            except Exception as err:
                rec[lake].fail(f"{stage}: {_error_text(err)}")
                alive.discard(lake)
                logger.error("lake %s failed in stage %s: %s (other lakes continue)", lake, stage, _error_text(err))
                continue
            rec[lake].add(stage, result)
            plans[lake]["recorded"][stage] = sorted(result["tables"])
    for lake, plan in plans.items():  # remember what the store now reflects; unfinished stages run next time
        recorded = {s: t for s, t in plan["recorded"].items() if s in rec[lake].stages_run or s not in plan["stages"]}
        record = {"sources": plan["sources"], "stages": recorded, "files": plan.get("files", {})}
        write_json_atomic(state_path(store_root, lake), record)
    summaries = []
    for lake, r in rec.items():
        after = _row_counts(store, lake) if lake in before else {}
        new = sum(max(0, n - before.get(lake, {}).get(t, 0)) for t, n in after.items() if t in r.tables)
        summaries.append(r.summary(new))
    return summaries


def _run_stage(
    stage: str,
    todo: list[str],
    lakes: dict[str, str],
    store_root: str,
    plans: dict[str, dict[str, Any]],
    allow_shrink: bool = False,
    lakes_per_task: int = LAKES_PER_TASK,
) -> dict[str, Any]:
    """Run a stage for the lakes ``todo``: lake -> its result dict, or a future of one. Stages that share work
    between lakes run in tasks of up to ``lakes_per_task`` lakes that read the same sources (the plan's
    ``share`` key of the stage); a lake that failed there is run again alone (a task of its own, with retries),
    so its error and retries stay its own."""
    groups: dict[str, list[str]] = {}
    for lake in todo:
        groups.setdefault(plans[lake].get("share", {}).get(stage, ""), []).append(lake)
    if stage not in STAGES_MANY or lakes_per_task < 2 or all(len(g) < 2 for g in groups.values()):
        return {lake: _one(stage, lake, lakes, store_root, plans, allow_shrink) for lake in todo}
    n = lakes_per_task
    batches = [g[i : i + n] for g in groups.values() for i in range(0, len(g), n)]
    futures = []
    for b in batches:
        since = {lk: d for lk in b if (d := plans[lk].get("since", {}).get(stage)) is not None}
        lake_files = {lk: lakes[lk] for lk in b}
        futures.append(lakes_task.submit(stage, lake_files, store_root, b[0], allow_shrink, since or None))
    out: dict[str, Any] = {}
    for batch, fut in zip(batches, futures, strict=True):
        try:
            got = fut.result()
        except Exception:  # the task itself failed (a lost worker...): each lake alone
            got = {}
        for lake in batch:
            if "result" in got.get(lake, {}):
                out[lake] = got[lake]["result"]
            else:
                out[lake] = _one(stage, lake, lakes, store_root, plans, allow_shrink)
    return out


def _one(
    stage: str, lake: str, lakes: dict[str, str], store_root: str, plans: dict[str, dict[str, Any]], allow: bool
) -> Any:
    since = plans[lake].get("since", {}).get(stage)
    return stage_task.submit(stage, lake, lakes[lake], store_root, since, allow)


def _load(configs: Sequence[str | Path]) -> tuple[dict[str, Project], list[dict[str, Any]]]:
    files = find_lake_files([Path(c) for c in configs])
    if not files:
        raise ConfigError(f"no lake configuration found in {[str(c) for c in configs]}")
    projects: dict[str, Project] = {}
    failed = []
    for f in files:
        try:
            p = load_project(f)
        except LakefeedError as err:
            failed.append({"lake": Path(f).stem.removeprefix("lake-"), "status": "failed", "error": str(err)})
            continue
        if p.id in projects:
            failed.append({"lake": p.id, "status": "failed", "error": f"{f}: lake id {p.id!r} is used twice"})
            continue
        projects[p.id] = p
    return projects, failed


def _store_root(store: str | None, projects: dict[str, Project]) -> str:
    if store:
        return str(Path(store).resolve())
    roots = {p.sources.store for p in projects.values() if p.sources.store}
    if len(roots) == 1:
        return str(Path(roots.pop()).resolve())
    raise ConfigError(
        "no store folder: pass --store DIR or set 'store:' in sources.yaml"
        + (f" (the lakes name different stores: {sorted(roots)})" if roots else "")
    )


def _task_runner(dask_address: str | None, sequential: bool, projects: dict[str, Project]) -> Any:
    if sequential:
        return ThreadPoolTaskRunner(max_workers=1)
    address = dask_address or next((p.sources.dask_address for p in projects.values() if p.sources.dask_address), None)
    return dask_task_runner(address)


def write_summary(store_root: str, summaries: list[dict[str, Any]], run_id: str, started: datetime) -> None:
    store = Store(store_root, staged=True)  # published with the run's tables
    for s in summaries:
        row = pd.DataFrame([{"run_id": run_id, "started": pd.Timestamp(started), **s}]).drop(columns=["lake"])
        for col in ("new_rows", "rows_written", "seconds"):
            row[col] = row[col] if col in row else 0
        row = row.astype({"new_rows": "int64", "rows_written": "int64", "seconds": "float64"}).fillna("")
        if store.has_table("run_summary", s["lake"]):
            old = store.read_table("run_summary", s["lake"]).drop(columns=["lake"])
            row = pd.concat([old, row], ignore_index=True)
        store.write_table("run_summary", s["lake"], row, units=SUMMARY_UNITS, time_column="started")


def format_summary(summaries: list[dict[str, Any]]) -> str:
    """Plain-text run summary, one line per lake (new rows, stages run, skipped, failed and why)."""
    lines = [f"{'lake':<20} {'status':<10} {'new rows':>9}  stages / reason"]
    for s in summaries:
        why = s.get("error") or s.get("skipped") or s.get("stages_run", "")
        if not s.get("error") and s.get("mode"):
            why = f"{why} ({s['mode']})"
        lines.append(f"{s['lake']:<20} {s['status']:<10} {s.get('new_rows', 0):>9}  {why}")
    return "\n".join(lines)


def _run(
    configs: Sequence[str | Path],
    *,
    store: str | None,
    dask_address: str | None,
    sequential: bool,
    full: bool,
    wait: float,
    what: str,
    stages: list[str] | None = None,
    allow_shrink: bool = False,
    lakes_per_task: int = LAKES_PER_TASK,
    verify_hashes: bool = False,
) -> list[dict[str, Any]]:
    started = datetime.now(UTC)
    run_id = uuid.uuid4().hex[:12]
    projects, failed = _load(configs)
    if not projects:
        raise ConfigError("no lake configuration could be loaded:\n" + "\n".join(f["error"] for f in failed))
    root = _store_root(store, projects)
    lakes = {lake: str(p.lake_file) for lake, p in projects.items()}
    # the stages write unpublished (Store(..., staged=True)); what the run wrote is published as one new
    # store generation when it ends without an exception, so readers see the whole run or none of it
    with run_lock(root, wait=wait, what=what), Store(root).publishing(), prefect_api():
        runner = _task_runner(dask_address, sequential, projects)
        summaries = process_lakes.with_options(task_runner=runner)(
            lakes,
            root,
            full=full,
            stages=stages,
            allow_shrink=allow_shrink,
            lakes_per_task=lakes_per_task,
            verify_hashes=verify_hashes,
        )
        summaries += failed
        write_summary(root, [s for s in summaries if s["lake"] in projects], run_id, started)
    print(format_summary(summaries))
    return summaries


@flow(name="refresh", log_prints=True)
def refresh(
    configs: list[str],
    store: str | None = None,
    dask_address: str | None = None,
    sequential: bool = False,
    wait: float = 0.0,
    stages: list[str] | None = None,
    allow_shrink: bool = False,
    lakes_per_task: int = LAKES_PER_TASK,
    verify_hashes: bool = False,
) -> list[dict[str, Any]]:
    """Monthly refresh: for every lake in ``configs`` (files or folders), process what is new or changed.

    Parameters
    ----------
    configs
        Lake YAML files or folders holding them.
    store
        Store folder; default ``store:`` of sources.yaml.
    dask_address
        Address of an existing Dask scheduler; default ``dask_address:`` of sources.yaml, else a local
        cluster sized to the machine.
    sequential
        Run lakes one after the other in this process (no Dask).
    wait
        Seconds to wait for another run holding the store before refusing.
    stages
        Run only these stages (default: every stage that exists).
    allow_shrink
        Let a stage write although its new rows shorten a table's stored date range or turn stored values into
        missing ones (a source file removed on purpose). Without it such a stage refuses (nothing written) and
        the lake fails, with the dates and columns in its error.
    lakes_per_task
        Most lakes that read the same sources computed in one task of a stage that shares its reads (weather,
        features; the sources are read once per task); 1 runs every lake in a task of its own.
    verify_hashes
        Hash every source file in full. Otherwise a file whose size and modification time equal the ones recorded
        with its hash at the last run keeps that hash (it is not read); the others are hashed.

    Returns
    -------
    list of dict
        Per lake: status (ok, unchanged, failed), stages_run, new_rows (growth of the lake's tables),
        rows_written (rows the stages wrote, recomputed ones included), changed (source months), mode (how
        the incremental stages ran, e.g. ``weather: incremental from 2022-12-01`` or ``weather: full build
        (configuration changed)``), skipped, error, seconds. Also appended to the store's ``run_summary`` table.
    """
    return _run(
        configs,
        store=store,
        dask_address=dask_address,
        sequential=sequential,
        full=False,
        wait=wait,
        what="refresh",
        stages=stages,
        allow_shrink=allow_shrink,
        lakes_per_task=lakes_per_task,
        verify_hashes=verify_hashes,
    )


@flow(name="build-lake", log_prints=True)
def build_lake(
    configs: list[str],
    store: str | None = None,
    dask_address: str | None = None,
    sequential: bool = False,
    wait: float = 0.0,
    report: bool = True,
    stages: list[str] | None = None,
    allow_shrink: bool = False,
    lakes_per_task: int = LAKES_PER_TASK,
) -> list[dict[str, Any]]:
    """Full build of lakes: validate, backfill the whole record (all stages), write each lake's report.

    Geometry (zones, catchment) and exact grid-cell weights are derived by the weather stage and cached
    in the store; the run records its source hashes, so the next :func:`refresh` is incremental.
    Lakes whose checks fail are not built (reported as failed with the problems). ``allow_shrink`` as for
    :func:`refresh` (a rebuild over a store that holds more than the sources give now); ``lakes_per_task`` as
    for :func:`refresh`.
    """
    from lakefeed.checks import check_project

    projects, rejected = _load(configs)
    good = []
    for lake, p in projects.items():
        problems = [f"{r.name}: {r.message}" for r in check_project(p) if r.status == "problem"]
        if problems:
            get_run_logger().error("lake %s: checks failed: %s", lake, "; ".join(problems))
            rejected.append({"lake": lake, "status": "failed", "error": "checks failed: " + "; ".join(problems)})
        else:
            good.append(str(p.lake_file))
    if not good:
        print(format_summary(rejected))
        raise ConfigError(
            "no lake passed the checks; fix these and see `lakefeed check`",
            [f"{r['lake']}: {r['error']}" for r in rejected],
        )
    summaries = _run(
        good,
        store=store,
        dask_address=dask_address,
        sequential=sequential,
        full=True,
        wait=wait,
        what="build",
        stages=stages,
        allow_shrink=allow_shrink,
        lakes_per_task=lakes_per_task,
    )
    summaries += rejected
    if report:
        from lakefeed.report import write_report

        root = _store_root(store, projects)
        for s in summaries:
            if s["lake"] in projects and (s["status"] != "failed" or s.get("stages_run")):
                path = write_report(projects[s["lake"]], Store(root), Path(root) / "reports" / f"{s['lake']}.html")
                print(f"report for {s['lake']}: {path}")
    return summaries


@flow(name="onboard-lake", log_prints=True)
def onboard_lake(
    lake_file: str, store: str | None = None, dask_address: str | None = None, sequential: bool = False
) -> list[dict[str, Any]]:
    """First full build of one new lake (validate, geometry and weights, whole record, report)."""
    return build_lake([lake_file], store=store, dask_address=dask_address, sequential=sequential)
