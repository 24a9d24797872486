"""Stage ``skill``: feature screening and baseline skill of one lake, after the features (and forecast) stage.

Reads the lake's ``features`` table from the store (hindcast rows and, when the forecast stage ran, its
re-forecast leads), calls the pure :mod:`lakefeed.verify` and writes two small tables, rewritten whole:

- ``feature_screening`` (``aoi, lead_days, fold, feature`` ...): :func:`lakefeed.verify.screen` per AOI and
  lead, on each fold's training rows and on all rows (fold ``all``);
- ``baseline_skill`` (``aoi, lead_days, baseline, fold, metric, value, n``): persistence and climatology
  scored per AOI, lead and fold (:func:`lakefeed.verify.baseline_skill`).

The flows run it after ``forecast`` whenever ``features`` ran; ``lakefeed features`` runs it after the
features (and the re-forecast rows). When the feature table's content and the options are those of the
stored tables, nothing is recomputed. Must not hold science (that is in :mod:`lakefeed.verify`).
"""

from __future__ import annotations

import hashlib
import json

from lakefeed.config import Project
from lakefeed.progress import Progress, no_progress
from lakefeed.stages._result import StageResult
from lakefeed.store import Store
from lakefeed.verify import CAUTION, baseline_skill, screen

__all__ = ["TABLES", "build_skill"]

#: Tables this stage writes.
TABLES = ("feature_screening", "baseline_skill")

_SCREEN_DESCR = {
    "fold": "cross-validation fold whose TRAINING rows were screened (the other folds, no embargoed row); "
    "all: every row",
    "feature": "feature column of the features table",
    "n_rows": "rows (target dates) screened",
    "missing_fraction": "fraction of the screened target dates without a value",
    "n_distinct": "number of distinct values",
    "variance": "variance of the values (ddof 1), in the feature's unit squared",
    "rho_target": "Spearman correlation with chla (pairwise complete)",
    "nearest_feature": "the other feature with the largest |Spearman| correlation",
    "rho_nearest": "Spearman correlation with nearest_feature",
    "cluster": "cluster of usable features (complete linkage on 1-|rho|, cut at 1-cluster_threshold); -1: not usable",
    "representative": "the cluster member kept (fewest missing values, ties by name)",
    "vif": "variance inflation factor among the representatives (rows where all are present)",
    "keep": "true for representatives (reason ok)",
    "reason": "ok, empty, constant, too_sparse, redundant_with:<representative> or suspect_leak",
    "suspect_leak": "|rho_target| above skill.leak_threshold: check the feature uses only data known at issue time",
    "message": "why a feature is a suspect_leak",
}
_SKILL_DESCR = {
    "baseline": "persistence (last observation known at the issue time) or climatology (smoothed day-of-year "
    "geometric mean of the training rows)",
    "fold": "k: fold k's test rows (climatology fitted on the other folds); cv: all folds' test rows pooled; all: "
    "every row (climatology fitted on all rows, in sample)",
    "metric": "bias, mae, rmse (mg m-3), r; *_log on ln(mg m-3); <score>:<event> from the 2x2 contingency table "
    "(hits, false_alarms, misses, correct_negatives, hit_rate, far, csi, pss, hss)",
    "value": "the score (unit by metric: mg m-3 for bias/mae/rmse, ln(mg m-3) for *_log, else dimensionless)",
    "n": "number of forecast-observation pairs used",
}


def _options_hash(project: Project) -> str:
    lake = project.lake
    payload = {
        "skill": lake.skill.model_dump(mode="json"),
        "thresholds": [t.model_dump(mode="json") for t in lake.thresholds],
    }
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()


def _up_to_date(store: Store, lake: str, inputs: dict[str, str], options: str) -> bool:
    for table in TABLES:
        entry = store.entry(table, lake)
        if not entry or entry.get("inputs") != inputs or entry.get("config_hash") != options:
            return False
        if not store.has_table(table, lake):
            return False
    return True


def build_skill(project: Project, store: Store, *, progress: Progress | None = None, **_: object) -> StageResult:
    """Write ``feature_screening`` and ``baseline_skill`` for one lake from its stored ``features``.

    Extra keyword arguments of the flows (``since``, ``allow_shrink``) are accepted and unused: both tables
    are recomputed whole from the feature table (they hold statistics, not a record that could shrink).

    Examples
    --------
    >>> from lakefeed.config import load_project
    >>> build_skill(load_project("config/lake-tallow.yaml"), Store("store"))  # doctest: +SKIP
    """
    p = progress or no_progress
    lake, opts = project.lake, project.lake.skill
    result = StageResult(stage="skill", lake=lake.id)
    if not store.has_table("features", lake.id):
        result.skipped, result.reason = True, "no features table for this lake; run the features stage first"
        return result
    entry = store.entry("features", lake.id) or {}
    inputs = {f"features/lake={lake.id}": str(entry.get("content_hash") or "")}
    options = _options_hash(project)
    if inputs[f"features/lake={lake.id}"] and _up_to_date(store, lake.id, inputs, options):
        result.tables = {t: int((store.entry(t, lake.id) or {}).get("rows", 0)) for t in TABLES}
        result.reason = "up to date"
        p("skill: up to date", 3, 3)
        return result
    p("skill: reading features", 0, 3)
    frame = store.read_table("features", lake.id)
    frame = frame[frame["chla"].notna()]
    p("skill: screening", 1, 3)
    screening = screen(
        frame,
        "chla",
        cluster_threshold=opts.cluster_threshold,
        leak_threshold=opts.leak_threshold,
        max_missing_fraction=opts.max_missing_fraction,
    )
    p("skill: baselines", 2, 3)
    scores = baseline_skill(frame, thresholds=lake.thresholds, window_days=opts.climatology_window_days)
    leaks = screening[screening["suspect_leak"] & (screening["fold"] == "all")]
    for _, row in leaks.drop_duplicates("feature").iterrows():
        result.warnings.append(f"feature screening: {row['message']}")
    meta = {"caution": CAUTION, "options": json.dumps(opts.model_dump(mode="json"), sort_keys=True)}
    store.write_table(
        "feature_screening",
        lake.id,
        screening,
        units={"lead_days": "d", "n_rows": "1"},
        descriptions=_SCREEN_DESCR,
        metadata=meta,
        inputs=inputs,
        config_hash=options,
        sort_by=["aoi", "lead_days", "fold", "feature"],
    )
    store.write_table(
        "baseline_skill",
        lake.id,
        scores,
        units={"lead_days": "d", "n": "1"},
        descriptions=_SKILL_DESCR,
        metadata=meta,
        inputs=inputs,
        config_hash=options,
        sort_by=["aoi", "lead_days", "baseline", "fold", "metric"],
    )
    p("skill: done", 3, 3)
    result.tables = {"feature_screening": len(screening), "baseline_skill": len(scores)}
    return result
