"""Feature screening: empty, constant, too sparse, redundant and suspiciously leaking columns.

Takes a frame shaped like the ``features`` table (one row per AOI, target date and lead; the target and
hundreds of numeric feature columns; a ``fold`` column) and returns one row per screened feature and
AOI, lead and fold (the long table stored as ``feature_screening``). Pure: no file I/O, no store.

Per block of rows (one AOI and lead; within it each fold's TRAINING rows - the rows of the other folds,
embargoed rows (fold -1) excluded - and, as fold ``all``, every row):

- ``missing_fraction`` over the block's target dates, ``n_distinct`` values, ``variance`` (ddof 1, in the
  feature's squared unit);
- ``rho_target``: Spearman correlation with the target; ``nearest_feature`` and ``rho_nearest``: the other
  feature with the largest |Spearman| (pairwise complete, :mod:`lakefeed.verify.correlation`);
- ``cluster``: hierarchical clustering (complete linkage) of the usable features on the distance
  1 - |rho|, cut at 1 - ``cluster_threshold`` (default 0.95), so every two features of a cluster have
  |rho| >= the threshold; its ``representative`` is the member with the fewest missing values (ties by
  name). ``vif``: variance inflation factor of each representative among the representatives (diagonal of
  the inverse Pearson correlation matrix, on the rows where all representatives are present; NaN when those
  rows are not more than the representatives);
- ``keep`` and ``reason``: ``ok`` (a representative), ``empty`` (no value), ``constant`` (one distinct value),
  ``too_sparse`` (missing fraction above ``max_missing_fraction``), ``redundant_with:<representative>``, or
  ``suspect_leak`` (leak guard: |rho_target| above ``leak_threshold``, default 0.98; a feature built by lakefeed
  cannot use data after the issue time, so such a value points at a column added by hand or a broken
  pipeline; ``message`` says so). Only ``ok`` is kept.

No information from a fold's test rows enters that fold's screening: the fold's rows are simply not in the
block.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy.cluster.hierarchy import fcluster, linkage
from scipy.spatial.distance import squareform

from lakefeed.verify.correlation import spearman_matrix, spearman_with

__all__ = ["NOT_FEATURES", "SCREENING_COLUMNS", "fold_blocks", "screen", "screen_block"]

#: Columns of the ``features`` table that are keys or bookkeeping, never screened as features.
NOT_FEATURES = (
    "lake",
    "aoi",
    "target_date",
    "issue_date",
    "lead_days",
    "fold",
    "fold_kind",
    "flags",
    "incomplete_windows",
    "outside_driver_record",
    "forecast_days",
)

#: Columns of the screening table (after the group keys ``aoi``, ``lead_days``, ``fold``).
SCREENING_COLUMNS = (
    "feature",
    "n_rows",
    "missing_fraction",
    "n_distinct",
    "variance",
    "rho_target",
    "nearest_feature",
    "rho_nearest",
    "cluster",
    "representative",
    "vif",
    "keep",
    "reason",
    "suspect_leak",
    "message",
)


def _n_distinct(x: np.ndarray) -> np.ndarray:
    s = np.sort(x, axis=0)  # NaN last
    if s.shape[0] == 0:
        return np.zeros(s.shape[1], dtype=int)
    new = (np.diff(s, axis=0) != 0) & np.isfinite(s[1:])
    return np.where(np.isfinite(s[0]), 1 + new.sum(axis=0), 0)


def _vif(x: np.ndarray) -> np.ndarray:
    """VIF of each column on the rows complete in all of them (NaN when they are too few)."""
    k = x.shape[1]
    rows = np.isfinite(x).all(axis=1)
    if k == 0 or rows.sum() <= k + 1:
        return np.full(k, np.nan)
    if k == 1:
        return np.ones(1)
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = np.corrcoef(x[rows], rowvar=False)
    if not np.isfinite(corr).all():
        return np.full(k, np.nan)
    try:
        return np.diag(np.linalg.inv(corr)).copy()
    except np.linalg.LinAlgError:  # exactly collinear representatives
        return np.full(k, np.inf)


def _clusters(rho: np.ndarray, threshold: float) -> np.ndarray:
    """Cluster numbers (1..) of complete-linkage clustering on 1 - |rho| cut at 1 - threshold."""
    n = rho.shape[0]
    if n == 1:
        return np.ones(1, dtype=int)
    d = 1.0 - np.abs(np.nan_to_num(rho, nan=0.0))
    d = np.clip((d + d.T) / 2, 0.0, 1.0)
    np.fill_diagonal(d, 0.0)
    return fcluster(linkage(squareform(d, checks=False), method="complete"), t=1.0 - threshold, criterion="distance")


def screen_block(
    values: np.ndarray,
    names: Sequence[str],
    target: np.ndarray,
    *,
    target_name: str = "chla",
    cluster_threshold: float = 0.95,
    leak_threshold: float = 0.98,
    max_missing_fraction: float = 0.5,
) -> pd.DataFrame:
    """Screen the feature columns of one block of rows (see the module docstring); one row per feature.

    ``values``: rows x features (NaN missing); ``target``: the target on the same rows (rows where it is
    missing are not used).
    """
    y = np.asarray(target, dtype=float)
    keep_rows = np.isfinite(y)
    x = np.asarray(values, dtype=float)[keep_rows]
    y = y[keep_rows]
    names = list(names)
    n, p = x.shape
    present = np.isfinite(x)
    n_present = present.sum(axis=0)
    missing = 1.0 - n_present / n if n else np.ones(p)
    distinct = _n_distinct(x)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(n_present > 0, np.nansum(x, axis=0) / np.maximum(n_present, 1), np.nan)
        variance = np.where(n_present > 1, np.nansum((x - mean) ** 2, axis=0) / np.maximum(n_present - 1, 1), np.nan)
    reason = np.full(p, "ok", dtype=object)
    reason[missing > max_missing_fraction] = "too_sparse"
    reason[distinct == 1] = "constant"
    reason[n_present == 0] = "empty"
    rho_t = spearman_with(x, y)
    leak = (reason == "ok") & (np.abs(np.nan_to_num(rho_t)) > leak_threshold)
    reason[leak] = "suspect_leak"
    message = np.full(p, "", dtype=object)
    for i in np.flatnonzero(leak):
        message[i] = (
            f"|Spearman rho| of {names[i]!r} with {target_name!r} is {abs(rho_t[i]):.3f} > {leak_threshold} over "
            f"{int(n_present[i])} rows: implausibly high for a predictor; check that it uses only data known at the "
            "issue time (on few rows a smooth seasonal driver can reach it by coincidence)"
        )
    rho = spearman_matrix(x)
    np.fill_diagonal(rho, np.nan)
    absr = np.abs(rho)
    has_nb = np.isfinite(absr).any(axis=1)
    nb = np.where(has_nb, np.argmax(np.nan_to_num(absr, nan=-1.0), axis=1), -1)
    cluster = np.full(p, -1, dtype=int)
    representative = np.zeros(p, dtype=bool)
    vif = np.full(p, np.nan)
    cand = np.flatnonzero(reason == "ok")
    if cand.size:
        labels = _clusters(rho[np.ix_(cand, cand)], cluster_threshold)
        reps = {}
        for lab in np.unique(labels):
            members = cand[labels == lab]
            reps[lab] = min(members, key=lambda i: (missing[i], names[i]))
        order = sorted(reps, key=lambda lab: names[reps[lab]])
        number = {lab: k for k, lab in enumerate(order)}
        for i, lab in zip(cand, labels, strict=True):
            cluster[i] = number[lab]
            if reps[lab] == i:
                representative[i] = True
            else:
                reason[i] = f"redundant_with:{names[reps[lab]]}"
        rep_idx = np.flatnonzero(representative)
        vif[rep_idx] = _vif(x[:, rep_idx])
    return pd.DataFrame(
        {
            "feature": names,
            "n_rows": np.full(p, n, dtype=np.int64),
            "missing_fraction": missing,
            "n_distinct": distinct.astype(np.int64),
            "variance": variance,
            "rho_target": rho_t,
            "nearest_feature": [names[j] if j >= 0 else None for j in nb],
            "rho_nearest": [rho[i, j] if j >= 0 else np.nan for i, j in enumerate(nb)],
            "cluster": cluster.astype(np.int64),
            "representative": representative,
            "vif": vif,
            "keep": reason == "ok",
            "reason": reason.astype(str),
            "suspect_leak": leak,
            "message": message.astype(str),
        }
    )


def fold_blocks(fold: np.ndarray | None) -> list[tuple[str, np.ndarray]]:
    """(label, training-row mask) per fold, then (``all``, every row).

    A fold's training rows are those of the other folds; embargoed rows (fold < 0) train no fold.
    """
    if fold is None:
        return []
    f = np.asarray(fold)
    return [(str(int(k)), (f >= 0) & (f != k)) for k in np.unique(f[f >= 0])]


def screen(
    frame: pd.DataFrame,
    target: str = "chla",
    *,
    fold_column: str | None = "fold",
    by: Sequence[str] = ("aoi", "lead_days"),
    features: Sequence[str] | None = None,
    cluster_threshold: float = 0.95,
    leak_threshold: float = 0.98,
    max_missing_fraction: float = 0.5,
) -> pd.DataFrame:
    """Screen the feature columns of a frame shaped like ``features`` (one row per feature and block).

    Not to be confused with ``lakefeed verify`` (store integrity, :mod:`lakefeed.store.verify`).

    Parameters
    ----------
    frame
        Rows of target dates with the ``target`` column and numeric feature columns.
    target
        The label column (chlorophyll-a, mg m-3).
    fold_column
        Cross-validation fold per row (-1 embargoed); each fold is screened on its training rows. None, or a
        column that is not in the frame: only fold ``all``.
    by
        Group columns screened apart (those present in the frame).
    features
        Columns to screen; default: every numeric or boolean column except :data:`NOT_FEATURES` and ``target``.
    cluster_threshold, leak_threshold, max_missing_fraction
        |Spearman| at which features share a cluster; |Spearman| with the target above which a feature is a
        ``suspect_leak``; largest missing fraction of a usable feature (all dimensionless).

    Returns
    -------
    pandas.DataFrame
        ``by`` columns, ``fold`` (fold number as text, or ``all``) and :data:`SCREENING_COLUMNS`.
    """
    if target not in frame.columns:
        raise KeyError(f"target column {target!r} is not in the frame; columns: {list(frame.columns)[:10]}...")
    if features is None:
        skip = set(NOT_FEATURES) | {target}
        features = [
            c
            for c in frame.columns
            if c not in skip and (pd.api.types.is_numeric_dtype(frame[c]) or pd.api.types.is_bool_dtype(frame[c]))
        ]
    features = list(features)
    keys = [c for c in by if c in frame.columns]
    has_fold = fold_column is not None and fold_column in frame.columns
    opts = dict(
        target_name=target,
        cluster_threshold=cluster_threshold,
        leak_threshold=leak_threshold,
        max_missing_fraction=max_missing_fraction,
    )
    out = []
    groups = frame.groupby(keys, sort=True, dropna=False) if keys else [((), frame)]
    for key, rows in groups:
        x = rows[features].to_numpy(dtype=float, na_value=np.nan)
        y = rows[target].to_numpy(dtype=float, na_value=np.nan)
        blocks = fold_blocks(rows[fold_column].to_numpy() if has_fold else None)
        for label, mask in [*blocks, ("all", np.ones(len(rows), dtype=bool))]:
            block = screen_block(x[mask], features, y[mask], **opts)
            key_t = key if isinstance(key, tuple) else (key,)
            block.insert(0, "fold", label)
            for name, value in reversed(list(zip(keys, key_t, strict=True))):
                block.insert(0, name, value)
            out.append(block)
    if not out:
        return pd.DataFrame(columns=[*keys, "fold", *SCREENING_COLUMNS])
    return pd.concat(out, ignore_index=True)
