"""Stage `features`: point-in-time feature rows, folds and sampling diagnostics of one lake, or of many
lakes computed together (:func:`build_features_many`; each lake read, checked and written on its own).

Reads from the store ``target_daily`` (the accepted chlorophyll-a per AOI and date) and the
driver tables that exist: ``drivers_daily`` (the zone named by ``features.driver_zone``:
``lake``, ``catchment``, ``aoi:<id>``, or ``aoi`` for each AOI's own zone) and
``hydrology_daily`` (inflow, loads, flow-weighted concentrations); calls the pure core
(:mod:`lakefeed.features`) and writes ``features`` and ``diagnostics``.

Incremental refresh: when the previous ``features`` were built with the same configuration
from inputs whose old part is unchanged, only rows from the first new date on are recomputed
(from the drivers of the longest window's spill-over) and appended as one part file
(:meth:`lakefeed.store.Store.append_arrow`); the old rows are neither read nor rewritten.
Rows whose target date lies after the end of an input (the next refresh recomputes them) are
written as a part of their own, so that refresh rewrites only that small part. A row's fold
depends on its target date and the fold options only (calendar blocks, :mod:`lakefeed.features.folds`;
random folds a hash of the date), so an incremental table equals a clean build's; the diagnostics
state per AOI how many rows each fold lost to the embargo. Must not hold science of its own beyond
wiring.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Sequence

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from lakefeed.config import Project
from lakefeed.exceptions import FeatureError
from lakefeed.features import (
    WindowPlan,
    refresh_start,
    sampling_diagnostics,
)
from lakefeed.features.batch import Series, iter_feature_blocks
from lakefeed.progress import Progress, no_progress
from lakefeed.stages._features_inputs import (
    driver_parts,
    load_drivers,
    targets_digest,
)
from lakefeed.stages._features_job import FeatureJob, prepare_job
from lakefeed.stages._features_output import (
    KEYS,
    arrow_rows,
    fold_diagnostics,
    fold_options,
    folds,
    sorted_by_keys,
    with_stored_extras,
    write_rows,
)
from lakefeed.stages._guard import refuse_shrink
from lakefeed.stages._result import StageResult
from lakefeed.store import Store

__all__ = ["build_features", "build_features_many", "feature_units", "load_drivers"]

_DESCRIPTIONS = {
    "issue_date": "issue date = target_date - lead_days; only data dated on or before it is used",
    "chla": "chlorophyll-a on the target date (the label)",
    "persistence_chla": "last accepted chlorophyll-a dated on or before the issue date and before the target date",
    "persistence_age_days": "target_date minus the date of persistence_chla",
    "days_since_prev_obs": "issue_date minus the date of the last accepted observation known at issue",
    "doy_sin": "sin(2 pi (day of year - 1) / days in year) of the target date",
    "doy_cos": "cos(2 pi (day of year - 1) / days in year) of the target date",
    "incomplete_windows": "number of window features set missing for too many missing days",
    "outside_driver_record": "the windows end before the first or after the last driver day",
    "flags": "';'-joined: outside_driver_record, incomplete_window, no_prior_observation, forecast_drivers",
}


def _sum_unit(unit: str) -> str:
    return unit[: -len(" d-1")] if unit.endswith(" d-1") else f"{unit} d"


def feature_units(plan: WindowPlan, driver_units: dict[str, str]) -> dict[str, str]:
    """Units of window features: the driver's unit; sums of per-day rates times days (mm d-1 -> mm)."""
    out = {}
    for c, stats in plan.stats.items():
        u = driver_units.get(c)
        if u is None:
            continue
        for s in stats:
            for k in plan.windows:
                out[f"{c}__{s}_{k}d"] = _sum_unit(u) if s == "sum" else u
    return out


def _full_again(project: Project, store: Store, progress: Progress, result: StageResult, allow: bool) -> StageResult:
    """Rebuild in full (the previous table cannot be extended)."""
    out = build_features(project, store, progress=progress, full=True, allow_shrink=allow)
    out.warnings = result.warnings + out.warnings
    return out


def _finish(job: FeatureJob, store: Store, arrow: pa.Table) -> StageResult:
    """Folds, diagnostics and the writes of one lake's computed rows."""
    project, result, progress, since = job.project, job.result, job.progress, job.since
    lake, opts = project.lake, project.lake.features
    arrow = with_stored_extras(store, lake.id, arrow, job.prev if since is not None else None)
    if since is not None and job.prev.get("columns") != arrow.column_names:  # e.g. a driver table gained a column
        result.warnings.append("features: columns changed since the last build; rebuilt in full")
        return _full_again(project, store, progress, result, job.allow_shrink)
    if not sorted_by_keys(arrow):
        arrow = arrow.sort_by([(k, "ascending") for k in KEYS])
    arrow = arrow.set_column(arrow.column_names.index("fold"), "fold", pa.array(folds(arrow, opts), pa.int16()))
    n_outside = int(pc.sum(arrow["outside_driver_record"]).as_py() or 0)
    if n_outside and job.columns:
        where = " refreshed" if since is not None else ""
        result.warnings.append(
            f"{n_outside}{where} feature row(s) have target dates outside the driver record (kept, flagged)"
        )

    diag = sampling_diagnostics(job.targets, by="aoi", record=job.record, min_observations=opts.min_observations)
    diag = diag.merge(fold_diagnostics(job.targets, opts), on="aoi", how="left")
    for _, d in diag.iterrows():
        if d["warnings"]:
            result.warnings.append(f"AOI {d['aoi']}: {d['warnings']}")

    progress("features: writing", 2, 3)
    result.warnings += refuse_shrink(
        store,
        "features",
        lake.id,
        arrow,
        keys=KEYS,
        time_column="target_date",
        since=since,
        groups=["aoi", "lead_days"],
        others="forecast_days",
        allow_shrink=job.allow_shrink,
        why=result.reason,
    )
    units = {
        "chla": "mg m-3",
        "persistence_chla": "mg m-3",
        "persistence_age_days": "d",
        "days_since_prev_obs": "d",
        "doy_sin": "1",
        "doy_cos": "1",
        "lead_days": "d",
        "fold": "1",
        "incomplete_windows": "1",
    }
    units |= feature_units(job.plan, job.driver_units)
    descr = dict(_DESCRIPTIONS)
    descr["fold"] = (
        f"cross-validation fold: calendar blocks of {opts.fold_block_months} months (from January), block number "
        f"modulo {opts.folds}; -1: embargoed (dated within {opts.effective_embargo_days} days after a block boundary), "
        "in no fold: use it neither to train nor to test (Roberts et al. 2017, blocked cross-validation with buffers)"
        if opts.fold_kind == "blocked"
        else "RANDOM cross-validation fold (not time-blocked: ignores autocorrelation, overstates skill)"
    )
    through, record = job.through, job.record
    meta = {
        "drivers_through": str(pd.Timestamp(through[0]).date()),
        "targets_through": str(pd.Timestamp(through[1]).date()),
        "drivers_first": str(pd.Timestamp(record[0]).date()) if record[0] is not None else "",
        "drivers_digest_at_through": job.recorded_drivers_digest(through[0]),
        "targets_digest_at_through": targets_digest(job.targets, through[1]),
        "input_parts": json.dumps(driver_parts(store, lake.id)),
        "options_hash": job.options_hash,
        "driver_zone": opts.driver_zone,
        "fold_kind": opts.fold_kind,
        "fold_options": fold_options(opts),
        "tables_read": "; ".join(["target_daily", *job.read]),
    }
    write = dict(
        units=units,
        descriptions=descr,
        metadata=meta,
        inputs=job.inputs,
        config_hash=job.config_hash,
        time_column="target_date",
        sort_by=KEYS,
    )
    digest = job.recorded_drivers_digest
    write_rows(
        store,
        lake.id,
        arrow,
        since=since,
        split=refresh_start(*through),
        drivers_digest=digest,
        targets=job.targets,
        write=write,
    )
    dunits = {c: "d" for c in diag.columns if c.startswith("gap_") and c.endswith("_days")}
    dunits |= {"coverage_fraction": "1", "embargo_days": "d"}
    store.write_table(
        "diagnostics",
        lake.id,
        diag,
        units=dunits,
        inputs=job.inputs,
        config_hash=job.config_hash,
        time_column="first_date",
    )
    progress("features: done", 3, 3)
    result.tables = {"features": int((store.entry("features", lake.id) or {}).get("rows", 0)), "diagnostics": len(diag)}
    return result


def _compute(
    jobs: list[FeatureJob], store: Store, done: Callable[[FeatureJob, pa.Table | BaseException], None]
) -> None:
    """Compute the rows of lakes that share a window plan in one pass, chunk by chunk, and hand each lake's
    rows to ``done`` as soon as they are complete (so about one chunk of rows is held at a time). A failure
    of the pass computes the lakes not yet handed on one by one, so only the lake at fault fails."""
    series: list[Series] = []
    owner: list[int] = []
    for i, job in enumerate(jobs):
        s = job.series()
        series += s
        owner += [i] * len(s)
    last = {o: k for k, o in enumerate(owner)}  # each lake's last series
    for job in jobs:
        job.progress("features: computing", 1, 3)
    plan = jobs[0].plan
    pieces: dict[int, list[pa.Table]] = {i: [] for i in last}  # rows of the lakes not yet handed on
    try:
        chunks = iter_feature_blocks(
            series,
            windows=plan.windows,
            stats=plan.stats,
            include_target_day=plan.include_target_day,
            max_missing_fraction=plan.max_missing_fraction,
        )
    except Exception as err:
        _compute_alone(jobs, store, done, err)
        return
    while True:
        try:  # only the computation is guarded: an error raised by ``done`` (isolate=False) propagates
            chunk = next(chunks, None)
            if chunk is None:
                return
            sizes = np.diff(chunk.bounds)
            kinds = [jobs[owner[chunk.first + k]].project.lake.features.fold_kind for k in range(len(sizes))]
            table = arrow_rows(chunk.block, np.repeat(np.array(kinds, dtype=object), sizes))
        except Exception as err:
            _compute_alone([jobs[i] for i in sorted(pieces)], store, done, err)
            return
        end = chunk.first + len(sizes)
        k = 0
        while k < len(sizes):  # a lake's series are consecutive: one slice per lake and chunk (none when whole)
            stop = k + 1
            while stop < len(sizes) and owner[chunk.first + stop] == owner[chunk.first + k]:
                stop += 1
            lo, hi = int(chunk.bounds[k]), int(chunk.bounds[stop])
            rows = table if (lo, hi) == (0, table.num_rows) else table.slice(lo, hi - lo)
            pieces[owner[chunk.first + k]].append(rows)
            k = stop
        for i in [i for i in sorted(pieces) if last[i] < end]:  # complete: hand the lake's rows on
            parts = pieces.pop(i)
            done(jobs[i], parts[0] if len(parts) == 1 else pa.concat_tables(parts))


def _compute_alone(
    jobs: list[FeatureJob], store: Store, done: Callable[[FeatureJob, pa.Table | BaseException], None], err: Exception
) -> None:
    """After a failed shared pass: each lake on its own (a single lake gets the error)."""
    if len(jobs) == 1:
        done(jobs[0], err)
        return
    for job in jobs:
        _compute([job], store, done)


def build_features_many(
    projects: Sequence[Project],
    store: Store,
    *,
    progress: Progress | None = None,
    full: bool = False,
    isolate: bool = True,
    lakes_per_pass: int = 64,
    allow_shrink: bool = False,
) -> dict[str, StageResult | Exception]:
    """Build ``features`` and ``diagnostics`` for many lakes, computing the lakes' rows together.

    Each lake is read, checked and written on its own, exactly as :func:`build_features` does; the rows
    of lakes with the same window plan are computed in one pass (:func:`lakefeed.features.batch.
    feature_block_many`), so a monthly refresh that adds a few rows per lake pays the fixed cost of
    computing and converting hundreds of feature columns once per pass instead of once per lake.

    Parameters
    ----------
    projects
        Lake configurations (distinct lake ids), all written to ``store``.
    progress
        Called per step for one lake; for several, once per finished lake (``features: lakes``, done, total).
    full
        As for :func:`build_features`.
    isolate
        True: a lake that fails gets its exception as its result, the other lakes go on. False: the
        first failure is raised (lakes finished before it keep their tables).
    lakes_per_pass
        Lakes read and computed together at most (bounds the memory held for a full rebuild).
    allow_shrink
        Write even when a lake's new rows would shorten an AOI's stored record or turn stored values into
        missing ones; otherwise that lake fails with a :class:`~lakefeed.exceptions.ShrinkError` and its
        tables stay as they were (:mod:`lakefeed.stages._guard`; the forecast stage's rows are not compared).

    Returns
    -------
    dict
        Lake id -> its :class:`StageResult`, or the exception that stopped it (``isolate=True``), in
        the order of ``projects``.
    """
    ids = [p.id for p in projects]
    dup = sorted({i for i in ids if ids.count(i) > 1})
    if dup:
        raise FeatureError(f"lake id(s) {dup} given more than once; each lake's configuration once")
    report = progress or no_progress
    out: dict[str, StageResult | Exception] = {}

    def lake_progress(lake: str) -> Progress:  # one lake: its steps; several: one bar counting lakes
        return report if len(projects) == 1 else no_progress

    def settle(lake: str, outcome: StageResult | Exception) -> None:
        out[lake] = outcome
        if len(projects) > 1:
            report("features: lakes", len(out), len(projects))

    def finished(job: FeatureJob, rows: pa.Table | BaseException) -> None:
        try:
            if isinstance(rows, BaseException):
                raise rows
            settle(job.project.id, _finish(job, store, rows))
        except Exception as err:
            if not isolate:
                raise
            settle(job.project.id, err)

    for at in range(0, len(projects), max(1, lakes_per_pass)):
        jobs: dict[tuple, list[FeatureJob]] = {}
        for project in projects[at : at + max(1, lakes_per_pass)]:
            try:
                job = prepare_job(project, store, progress=lake_progress(project.id), full=full)
            except Exception as err:
                if not isolate:
                    raise
                settle(project.id, err)
                continue
            if isinstance(job, StageResult):
                settle(project.id, job)
            else:
                job.allow_shrink = allow_shrink
                jobs.setdefault(job.batch_key(), []).append(job)
        for group in jobs.values():
            _compute(group, store, finished)
    return {i: out[i] for i in ids}


def build_features(
    project: Project,
    store: Store,
    *,
    progress: Progress | None = None,
    full: bool = False,
    allow_shrink: bool = False,
) -> StageResult:
    """Build ``features`` and ``diagnostics`` for one lake from the store's driver and target tables.

    Incremental when possible: with the same configuration and unchanged old inputs, only rows from
    the first new date on are recomputed and appended (one part file; the stored rows are not read).
    When the driver tables only gained part files of later dates since the last build (an appended
    month), only their last days (the longest window and lead before the first new date) are read;
    otherwise all driver rows are read and their fingerprint is compared with the last build's.
    ``full=True`` recomputes every row (folds are calendar blocks, stable as the record grows). The table
    read back equals a clean build's, folds included. All AOIs and leads of the lake are computed in one
    pass; for many lakes use :func:`build_features_many` (``allow_shrink`` as there).

    Examples
    --------
    >>> from lakefeed.config import load_project
    >>> build_features(load_project("config/lake-tallow.yaml"), Store("store"))  # doctest: +SKIP
    """
    out = build_features_many(
        [project],
        store,
        progress=progress,
        full=full,
        isolate=False,
        allow_shrink=allow_shrink,
    )[project.id]
    assert isinstance(out, StageResult)  # isolate=False raises instead
    return out
