"""Cross-validation folds for irregular observation dates.

Takes observation dates (one series: one lake and AOI) and returns an integer fold per date.
``blocked``: k contiguous time blocks with about equal numbers of observation dates, so a test
fold is a stretch of time and the training data lie before and after it; an optional embargo
of N days drops (fold -1) the observations of a block that lie within N days after the last
observation of the previous block, to limit leakage through autocorrelated drivers.
``random``: ordinary random folds (shuffled, balanced) - they ignore autocorrelation and
usually overstate skill; offered for comparison and labelled ``random`` in the tables.

Pure: no file I/O. Same dates in, same folds out (random folds take a seed).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

import numpy as np
import pandas as pd

from lakefeed.exceptions import FeatureError
from lakefeed.features.windows import as_dates

__all__ = ["EMBARGOED", "assign_folds", "blocked_folds", "random_folds"]

#: Fold of an observation dropped by the embargo (use it neither to train nor to test).
EMBARGOED = -1


def _days(dates: Sequence[object] | pd.DatetimeIndex) -> np.ndarray:
    return as_dates(dates).to_numpy().astype("datetime64[D]").astype(np.int64)


def blocked_folds(dates: Sequence[object] | pd.DatetimeIndex, *, k: int = 5, embargo_days: int = 0) -> np.ndarray:
    """Fold 0..k-1 per date: k contiguous blocks of about equal numbers of distinct dates.

    Observations sharing a date share a fold. With ``embargo_days`` N > 0, an observation whose
    date is at most N days after the last date of the previous block gets :data:`EMBARGOED`.
    Fewer distinct dates than k gives one block per date.
    """
    if k < 2:
        raise FeatureError(f"need at least 2 folds; got {k}")
    if embargo_days < 0:
        raise FeatureError(f"embargo must be >= 0 days; got {embargo_days}")
    days = _days(dates)
    if len(days) == 0:
        return np.zeros(0, dtype=np.int16)
    uniq, inv = np.unique(days, return_inverse=True)
    n = len(uniq)
    block = (np.arange(n) * min(k, n)) // n  # contiguous, sizes differ by at most one
    if embargo_days > 0:
        first = np.r_[True, block[1:] != block[:-1]]
        prev_last = np.full(n, np.iinfo(np.int64).min // 2)
        starts = np.flatnonzero(first)[1:]
        last_of_prev = uniq[starts - 1]
        idx = np.searchsorted(starts, np.arange(n), side="right") - 1  # block-start index per date
        has_prev = idx >= 0
        prev_last[has_prev] = last_of_prev[idx[has_prev]]
        block = np.where(uniq - prev_last <= embargo_days, EMBARGOED, block)
    return block[inv].astype(np.int16)


def random_folds(n: int, *, k: int = 5, seed: int = 0) -> np.ndarray:
    """Balanced random folds 0..k-1 for n observations (NOT time-blocked; labelled ``random``)."""
    if k < 2:
        raise FeatureError(f"need at least 2 folds; got {k}")
    rng = np.random.default_rng(seed)
    return (rng.permutation(n) % k).astype(np.int16)


def assign_folds(
    dates: Sequence[object] | pd.DatetimeIndex,
    *,
    k: int = 5,
    kind: Literal["blocked", "random"] = "blocked",
    embargo_days: int = 0,
    seed: int = 0,
) -> np.ndarray:
    """Folds per date, ``blocked`` (default) or ``random``; equal dates always share a fold."""
    if kind == "blocked":
        return blocked_folds(dates, k=k, embargo_days=embargo_days)
    if kind == "random":
        days = _days(dates)
        uniq, inv = np.unique(days, return_inverse=True)
        return random_folds(len(uniq), k=k, seed=seed)[inv]
    raise FeatureError(f"unknown fold kind {kind!r}; use 'blocked' or 'random'")
