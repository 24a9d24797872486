"""Incremental refresh of feature rows: recompute only what new data can change.

Takes the feature rows of a previous build, the current targets and drivers and the first
date whose inputs may differ (``since``); returns the merged rows. A window only looks back,
so a change on day x can affect only targets dated after x: rows with a target date before
``since`` are kept, rows on or after it are recomputed from the drivers sliced to ``since``
minus the longest window (the spill-over). Folds are not assigned here (a row's fold depends
on its date only, :func:`lakefeed.features.folds.assign_folds`, so stored rows keep theirs).
Pure: no file I/O.

:func:`prefix_digest` fingerprints the part of an input up to a date, so a caller can check
that old data did not change (else: rebuild in full).
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd

from lakefeed.features.batch import Series, feature_block_many
from lakefeed.features.pit import FeatureBlock
from lakefeed.features.window_plan import WINDOW_DEFAULTS
from lakefeed.features.windows import as_dates, day_numbers, on_or_after

__all__ = ["new_feature_block", "new_feature_rows", "prefix_digest", "refresh_feature_rows", "refresh_start"]


def prefix_digest(frame: pd.DataFrame, *, date_column: str | None, through: object) -> str:
    """SHA-256 of the rows dated on or before ``through`` (content and row order; pass sorted frames).

    ``date_column=None`` uses the index as the date. Numeric and date columns are hashed as their
    raw bytes (NaN-safe, no per-row Python work), other columns as their text.
    """
    dates = as_dates(frame.index if date_column is None else frame[date_column]).to_numpy()
    end = np.datetime64(pd.Timestamp(through))
    keep: slice | np.ndarray
    if (np.diff(dates) >= np.timedelta64(0)).all():  # sorted by date: a prefix, no copy
        keep = slice(0, int(np.searchsorted(dates, end, side="right")))
    else:
        keep = np.flatnonzero(dates <= end)
    h = hashlib.sha256(",".join(map(str, frame.columns)).encode())
    h.update(np.ascontiguousarray(dates[keep]).tobytes())
    for c in frame.columns:
        v = frame[c].to_numpy()[keep]
        if v.dtype.kind in "fiubmM":
            h.update(np.ascontiguousarray(v).tobytes())
        else:
            h.update("\x1f".join(map(str, v)).encode())
    return h.hexdigest()


def refresh_start(*throughs: object) -> pd.Timestamp:
    """First date to recompute: the day after the earliest 'known through' date of the inputs."""
    return min(pd.Timestamp(t) for t in throughs) + pd.Timedelta(days=1)


def new_feature_rows(targets: pd.DataFrame, drivers: pd.DataFrame, *, since: object, **options: Any) -> pd.DataFrame:
    """Feature rows of the targets dated on or after ``since`` only.

    Uses the drivers from ``since`` minus the longest window and the lead (the spill-over) and
    all targets for the persistence baseline; the rows equal those of a full
    :func:`build_feature_rows` on the same inputs. ``options`` (``lead``, ``windows``, ``stats``,
    ...) as for :func:`~lakefeed.features.pit.feature_block`.
    """
    return new_feature_block(targets, drivers, since=since, **options).to_pandas()


def new_feature_block(
    targets: pd.DataFrame,
    drivers: pd.DataFrame,
    *,
    since: object,
    lead: int = 0,
    windows: Sequence[int] = WINDOW_DEFAULTS.windows,
    **options: object,
) -> FeatureBlock:
    """As :func:`new_feature_rows`, as a :class:`~lakefeed.features.pit.FeatureBlock` (no pandas frame
    of the rows is built; the stage converts it to Arrow directly). ``options`` as for
    :func:`~lakefeed.features.pit.feature_block`."""
    forecasts = options.pop("forecast_drivers", None)
    one = Series(targets, drivers, lead=lead, observations=targets, forecast_drivers=forecasts, since=since)  # type: ignore[arg-type]
    [chunk] = feature_block_many([one], windows=windows, **options)  # type: ignore[arg-type]
    tdays = day_numbers(targets["target_date" if "target_date" in targets.columns else "date"])
    at = int(np.datetime64(pd.Timestamp(since).date(), "D").astype(np.int64))
    return replace(chunk.block, index=targets.index[on_or_after(tdays, at)])


def refresh_feature_rows(
    existing: pd.DataFrame,
    targets: pd.DataFrame,
    drivers: pd.DataFrame,
    *,
    since: object,
    by: str | None = "aoi",
    **options: object,
) -> pd.DataFrame:
    """Previous rows before ``since`` plus rows recomputed from ``since`` on, sorted by (by, target_date).

    Parameters
    ----------
    existing
        Rows of the previous build for this lead (as returned by :func:`build_feature_rows`).
    targets
        All current targets (``date`` or ``target_date``, ``value``, ``by``); the persistence
        baseline may reach back before ``since``.
    drivers
        Current daily drivers; only ``since - max(windows) - lead - 1`` onwards is used.
    since
        First date whose inputs may differ from the previous build.
    options
        ``lead``, ``windows``, ``stats``, ... as for :func:`new_feature_rows`.
    """
    since = pd.Timestamp(since)
    fresh = new_feature_rows(targets, drivers, since=since, by=by, **options)  # type: ignore[arg-type]
    keep = np.flatnonzero(as_dates(existing["target_date"]) < since)
    if len(keep) == 0:
        merged = fresh.reset_index(drop=True)
    else:
        kept = existing.iloc[keep]
        if list(kept.columns) != list(fresh.columns):
            kept = kept.reindex(columns=fresh.columns)
        merged = pd.concat([kept, fresh], ignore_index=True)
    keys = [by, "target_date"] if by and by in merged.columns else ["target_date"]
    return _sorted(merged, keys)


def _sorted(frame: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    """Stable sort by ``keys``; no copy when already sorted."""
    cols = [frame[k].to_numpy() for k in keys]
    if len(frame) < 2 or _is_sorted(cols):
        return frame
    codes = [pd.factorize(frame[k], sort=True)[0] for k in keys]
    order = np.lexsort(codes[::-1])
    return frame.take(order).reset_index(drop=True)


def _is_sorted(cols: list[np.ndarray]) -> bool:
    """Whether rows are in lexicographic order of the columns (NaN/None-free keys)."""
    tie = np.ones(len(cols[0]) - 1, dtype=bool)  # rows equal on all earlier keys
    for c in cols:
        a, b = c[:-1], c[1:]
        if (tie & (b < a)).any():
            return False
        tie &= a == b
        if not tie.any():
            return True
    return True
