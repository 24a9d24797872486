"""Cross-validation folds for irregular observation dates.

Takes observation dates (one series: one lake and AOI) and returns an integer fold per date.

``blocked``: calendar-anchored time blocks of ``block_months`` months (default 6: January-June and
July-December), numbered from year 0, and fold = block number modulo k. A test fold is then a set
of whole half-years spread over the record, the training data lie before and after each of them,
and a date's fold depends on the date and the options alone: it never changes as the record grows,
so an incremental refresh and a clean build give every row the same fold. The embargo (``embargo_days``
N > 0) takes out (fold :data:`EMBARGOED`, in no fold: neither for training nor for testing) the
observations dated within the first N days of each block, i.e. at most N days after the last day of
the previous block, which always belongs to another fold. With N at least the longest antecedent
window, no test row's windows reach into a training block before it and no training row's windows
reach into the test block before it; autocorrelated targets on the two sides of a boundary are at least
N days apart. This is blocked cross-validation with a buffer between blocks as in Roberts et al. (2017,
Ecography 40: 913-929; from memory).

``random``: ordinary random folds - they ignore autocorrelation and usually overstate skill;
offered for comparison and labelled ``random`` in the tables. A date's random fold is a hash of
the date and the seed (:func:`date_hash_folds`), so it does not move either.

Pure: no file I/O. Same dates in, same folds out.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Literal

import numpy as np
import pandas as pd

from lakefeed.exceptions import FeatureError
from lakefeed.features.windows import as_dates

__all__ = [
    "EMBARGOED",
    "assign_folds",
    "block_numbers",
    "blocked_folds",
    "date_hash_folds",
    "fold_counts",
    "random_folds",
]

#: Fold of an observation dropped by the embargo (use it neither to train nor to test).
EMBARGOED = -1


def _days(dates: Sequence[object] | pd.DatetimeIndex | np.ndarray) -> np.ndarray:
    """Day numbers (days since 1970-01-01) of dates."""
    return as_dates(dates).to_numpy().astype("datetime64[D]").astype(np.int64)


def _check(k: int, block_months: int = 1, embargo_days: int = 0) -> None:
    if k < 2:
        raise FeatureError(f"need at least 2 folds; got {k}")
    if block_months < 1:
        raise FeatureError(f"fold blocks must be at least 1 month long; got {block_months}")
    if embargo_days < 0:
        raise FeatureError(f"embargo must be >= 0 days; got {embargo_days}")


def block_numbers(
    dates: Sequence[object] | pd.DatetimeIndex | np.ndarray, *, block_months: int = 6
) -> tuple[np.ndarray, np.ndarray]:
    """Calendar block of each date and the day number (days since 1970-01-01) of its block's first day.

    Block ``b`` holds the months ``b * block_months .. (b + 1) * block_months - 1`` counted from January of
    year 0 (``12 * year + month - 1``), so blocks of a divisor of 12 months start in January every year.
    """
    _check(2, block_months)
    days = _days(dates)
    month = days.astype("datetime64[D]").astype("datetime64[M]").astype(np.int64) + 1970 * 12  # months since year 0
    block = month // block_months
    first = (block * block_months - 1970 * 12).astype("datetime64[M]").astype("datetime64[D]").astype(np.int64)
    return block, first


def blocked_folds(
    dates: Sequence[object] | pd.DatetimeIndex | np.ndarray, *, k: int = 5, block_months: int = 6, embargo_days: int = 0
) -> np.ndarray:
    """Fold 0..k-1 per date: its calendar block number modulo k (see the module docstring).

    With ``embargo_days`` N > 0, a date within the first N days of its block gets :data:`EMBARGOED`.
    Observations sharing a date share a fold; a date's fold does not depend on the other dates.

    Examples
    --------
    >>> blocked_folds(["2024-01-01", "2024-06-30", "2024-07-01", "2024-07-31", "2025-01-20"], k=5,
    ...               embargo_days=30).tolist()
    [-1, 3, -1, 4, -1]
    """
    _check(k, block_months, embargo_days)
    block, first = block_numbers(dates, block_months=block_months)
    fold = (block % k).astype(np.int16)
    if embargo_days > 0:
        fold[_days(dates) - first < embargo_days] = EMBARGOED
    return fold


Dates = Sequence[object] | pd.DatetimeIndex | np.ndarray


def date_hash_folds(dates: Dates, *, k: int = 5, seed: int = 0) -> np.ndarray:
    """RANDOM folds 0..k-1 from a hash of each date and the seed (splitmix64): not time-blocked, about
    balanced, and the same date always gets the same fold (appending dates moves nothing)."""
    _check(k)
    with np.errstate(over="ignore"):
        z = _days(dates).astype(np.uint64) + np.uint64(seed) * np.uint64(0x9E3779B97F4A7C15)
        z = z + np.uint64(0x9E3779B97F4A7C15)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        z = z ^ (z >> np.uint64(31))
    return (z % np.uint64(k)).astype(np.int16)


def random_folds(n: int, *, k: int = 5, seed: int = 0) -> np.ndarray:
    """Balanced random folds 0..k-1 for n observations (NOT time-blocked; labelled ``random``)."""
    _check(k)
    rng = np.random.default_rng(seed)
    return (rng.permutation(n) % k).astype(np.int16)


def assign_folds(
    dates: Sequence[object] | pd.DatetimeIndex | np.ndarray,
    *,
    k: int = 5,
    kind: Literal["blocked", "random"] = "blocked",
    block_months: int = 6,
    embargo_days: int = 0,
    seed: int = 0,
) -> np.ndarray:
    """Folds per date, ``blocked`` (default; calendar blocks, :func:`blocked_folds`) or ``random`` (a hash of
    date and seed; no embargo); a date's fold never depends on the other dates."""
    if kind == "blocked":
        return blocked_folds(dates, k=k, block_months=block_months, embargo_days=embargo_days)
    if kind == "random":
        return date_hash_folds(dates, k=k, seed=seed)
    raise FeatureError(f"unknown fold kind {kind!r}; use 'blocked' or 'random'")


def fold_counts(
    dates: Sequence[object] | pd.DatetimeIndex | np.ndarray,
    *,
    k: int = 5,
    block_months: int = 6,
    embargo_days: int = 0,
    rows_per_date: int = 1,
) -> tuple[str, str]:
    """Rows kept and rows lost to the embargo per blocked fold, as JSON objects ``{"0": n, ..., "k-1": n}``.

    ``rows_per_date``: feature rows per observation date (e.g. the number of lead times). A lost row is
    counted in the fold its block has (the fold it would have tested in).
    """
    _check(k, block_months, embargo_days)
    block, _ = block_numbers(dates, block_months=block_months)
    would = block % k
    lost = blocked_folds(dates, k=k, block_months=block_months, embargo_days=embargo_days) == EMBARGOED
    kept_n = np.bincount(would[~lost], minlength=k) * rows_per_date
    lost_n = np.bincount(would[lost], minlength=k) * rows_per_date
    return (
        json.dumps({str(f): int(kept_n[f]) for f in range(k)}),
        json.dumps({str(f): int(lost_n[f]) for f in range(k)}),
    )
