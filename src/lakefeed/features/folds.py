"""Cross-validation folds for irregular observation dates.

Takes observation dates (one series: one lake and AOI) and returns an integer fold per date.
``blocked``: k contiguous time blocks with about equal numbers of observation dates, so a test
fold is a stretch of time and the training data lie before and after it; an optional embargo
of N days drops (fold -1) the observations of a block that lie within N days after the last
observation of the previous block, to limit leakage through autocorrelated drivers.
``random``: ordinary random folds - they ignore autocorrelation and usually overstate skill;
offered for comparison and labelled ``random`` in the tables.

Stable under appends (incremental refreshes): blocked folds can be frozen with
:func:`fold_boundaries` (the first date of blocks 1..k-1 and the last date before each) and
re-applied with :func:`folds_from_boundaries`; dates after the last boundary go to the last
block, so appending dates never moves an existing row (a full rebuild that re-derives the
boundaries re-balances the blocks). Random folds of a date are a hash of the date and the
seed (:func:`date_hash_folds`), so they do not move either.

Pure: no file I/O. Same dates in, same folds out (random folds take a seed).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

import numpy as np
import pandas as pd

from lakefeed.exceptions import FeatureError
from lakefeed.features.windows import as_dates

__all__ = [
    "EMBARGOED",
    "assign_folds",
    "blocked_folds",
    "date_hash_folds",
    "fold_boundaries",
    "folds_from_boundaries",
    "random_folds",
]

#: Fold of an observation dropped by the embargo (use it neither to train nor to test).
EMBARGOED = -1


def _days(dates: Sequence[object] | pd.DatetimeIndex) -> np.ndarray:
    """Day numbers (days since 1970-01-01) of dates; ISO date strings (frozen boundaries) without pandas."""
    if isinstance(dates, list) and all(isinstance(d, str) and len(d) == 10 for d in dates):
        try:
            return np.array(dates, dtype="datetime64[D]").astype(np.int64)
        except ValueError:
            pass  # not plain YYYY-MM-DD: the general reader says what is wrong
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
    return folds_from_boundaries(dates, fold_boundaries(dates, k=k), embargo_days=embargo_days)


def fold_boundaries(dates: Sequence[object] | pd.DatetimeIndex, *, k: int = 5) -> list[tuple[str, str]]:
    """Frozen block boundaries of :func:`blocked_folds`: per block 1..k-1, (its first date, the last
    date of the previous block), ISO dates. k contiguous blocks of about equal numbers of distinct
    dates (sizes differ by at most one); fewer distinct dates than k gives one block per date."""
    if k < 2:
        raise FeatureError(f"need at least 2 folds; got {k}")
    uniq = np.unique(_days(dates))
    n = len(uniq)
    if n == 0:
        return []
    block = (np.arange(n) * min(k, n)) // n  # contiguous, sizes differ by at most one
    starts = np.flatnonzero(np.r_[False, block[1:] != block[:-1]])
    day = np.datetime64("1970-01-01", "D")
    return [(str(day + uniq[i]), str(day + uniq[i - 1])) for i in starts]


def folds_from_boundaries(
    dates: Sequence[object] | pd.DatetimeIndex, boundaries: Sequence[Sequence[str]], *, embargo_days: int = 0
) -> np.ndarray:
    """Fold per date from frozen boundaries (as from :func:`fold_boundaries`).

    Block j holds the dates from the j-th boundary's first date on (block 0 everything before the
    first boundary; dates after the last boundary join the last block). With ``embargo_days`` N > 0,
    a date at most N days after the last date of the previous block gets :data:`EMBARGOED`.
    """
    if embargo_days < 0:
        raise FeatureError(f"embargo must be >= 0 days; got {embargo_days}")
    days = _days(dates)
    if len(boundaries) == 0:
        return np.zeros(len(days), dtype=np.int16)
    starts = _days([b[0] for b in boundaries])
    prev_last = _days([b[1] for b in boundaries])
    block = np.searchsorted(starts, days, side="right")
    if embargo_days > 0:
        inner = block > 0
        gap = days[inner] - prev_last[block[inner] - 1]
        block[np.flatnonzero(inner)[gap <= embargo_days]] = EMBARGOED
    return block.astype(np.int16)


def date_hash_folds(dates: Sequence[object] | pd.DatetimeIndex, *, k: int = 5, seed: int = 0) -> np.ndarray:
    """RANDOM folds 0..k-1 from a hash of each date and the seed (splitmix64): not time-blocked, about
    balanced, and the same date always gets the same fold (appending dates moves nothing)."""
    if k < 2:
        raise FeatureError(f"need at least 2 folds; got {k}")
    with np.errstate(over="ignore"):
        z = _days(dates).astype(np.uint64) + np.uint64(seed) * np.uint64(0x9E3779B97F4A7C15)
        z = z + np.uint64(0x9E3779B97F4A7C15)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        z = z ^ (z >> np.uint64(31))
    return (z % np.uint64(k)).astype(np.int16)


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
    """Folds per date, ``blocked`` (default) or ``random`` (a hash of date and seed: stable under
    appends); equal dates always share a fold."""
    if kind == "blocked":
        return blocked_folds(dates, k=k, embargo_days=embargo_days)
    if kind == "random":
        return date_hash_folds(dates, k=k, seed=seed)
    raise FeatureError(f"unknown fold kind {kind!r}; use 'blocked' or 'random'")
