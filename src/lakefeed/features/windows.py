"""Antecedent windows of daily drivers at irregular target dates, for all drivers at once.

Takes a daily driver frame (one row per local calendar date, one column per driver, in the
drivers' own units) and target dates; returns one column per driver, statistic and window
length, named ``<driver column>__<stat>_<k>d``, in the driver's unit (``sum`` over a window of
a quantity per day is in the unit of that quantity times days, e.g. mm d-1 -> mm over the window).

How: each target's longest window is gathered exactly (a fancy-index gather of the
``k_max`` days before the target, one array of shape (k_max, targets, drivers)) and reduced by
accumulating *outward from the target day*, one day at a time for all targets and drivers, so
every shorter window is a prefix of the longest one. This is O(targets x k_max) per driver,
linear in the length of the record, and exact: a dry spell sums to exactly 0 (a cumulative sum
over the whole record would drift, see docs/architecture.md, "Pitfalls"). Missing days are NaN;
``min``/``max`` ignore them, ``sum`` adds the valid days and ``mean`` divides by their count.

Windows end the day before the target date by default (``include_target_day=False``): the
window of length k for target t covers the days t-k .. t-1; with ``include_target_day=True``
it covers t-k+1 .. t. A window with more missing days than ``max_missing_fraction * k`` gives
a missing value and a flag, never a value over fewer days.

Pure: no file I/O. Must not loop over rows in Python.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from lakefeed.exceptions import FeatureError
from lakefeed.features.window_plan import STATISTICS, WINDOW_DEFAULTS, WindowPlan

__all__ = [
    "as_dates",
    "complete_calendar",
    "day_numbers",
    "gather_windows",
    "on_or_after",
    "reduce_windows",
    "window_features",
]


def complete_calendar(drivers: pd.DataFrame, *, date_column: str | None = None) -> pd.DataFrame:
    """A complete daily calendar: one row per day from the first to the last date, gaps as NaN.

    ``drivers`` has a DatetimeIndex of local calendar dates (or a ``date_column``). Duplicate
    dates are an error (say which).
    """
    frame = drivers.set_index(date_column) if date_column else drivers
    if isinstance(frame.index, pd.DatetimeIndex) and frame.index.tz is None and len(frame.index):
        ns = frame.index.to_numpy().astype(np.int64)
        days = ns // 86_400_000_000_000
        if (ns == days * 86_400_000_000_000).all() and (np.diff(days) == 1).all():
            return frame  # already a complete calendar of midnights
    idx = as_dates(frame.index)
    if len(idx) == 0:
        return frame.set_axis(idx)
    if idx.is_monotonic_increasing and idx.is_unique and len(idx) == (idx[-1] - idx[0]).days + 1:
        return frame.set_axis(idx)  # already complete
    if idx.has_duplicates:
        dups = idx[idx.duplicated()].unique()[:3]
        raise FeatureError(f"driver table has duplicate dates, e.g. {[str(d.date()) for d in dups]}; one row per day")
    frame = frame.set_axis(idx).sort_index()
    full = pd.date_range(frame.index[0], frame.index[-1], freq="D")
    return frame.reindex(full)


def day_numbers(values: object) -> np.ndarray:
    """Calendar dates as day numbers (int64 days since 1970-01-01), as :func:`as_dates` reads them;
    datetime64 input without a time zone is converted without building a pandas index."""
    arr = values.to_numpy() if isinstance(values, (pd.Index, pd.Series)) else values
    if isinstance(arr, np.ndarray) and arr.dtype.kind == "M":
        return arr.astype("datetime64[D]").astype(np.int64)
    return as_dates(values).to_numpy().astype("datetime64[D]").astype(np.int64)


def on_or_after(days: np.ndarray, at: int) -> slice | np.ndarray:
    """Positions of the day numbers on or after day number ``at``: a slice when sorted (no copy), else indices."""
    if len(days) < 2 or (days[1:] >= days[:-1]).all():
        return slice(int(np.searchsorted(days, at, side="left")), None)
    return np.flatnonzero(days >= at)


def as_dates(values: object) -> pd.DatetimeIndex:
    """Calendar dates (midnight, no time zone) from dates, timestamps or ISO strings."""
    if isinstance(values, (pd.Index, pd.Series)) and isinstance(values.dtype, pd.DatetimeTZDtype):
        values = pd.DatetimeIndex(values).tz_localize(None)
    arr = values.to_numpy() if isinstance(values, (pd.Index, pd.Series)) else np.asarray(values)
    if arr.dtype.kind == "M":
        return pd.DatetimeIndex(arr.astype("datetime64[D]").astype("datetime64[ns]"))
    try:
        idx = pd.DatetimeIndex(pd.to_datetime(arr, format="ISO8601"))
    except (ValueError, TypeError):
        try:
            idx = pd.DatetimeIndex(pd.to_datetime(arr, format="mixed"))
        except (ValueError, TypeError) as err:
            raise FeatureError(f"cannot read dates {list(arr[:3])}...: {err}; use ISO dates (YYYY-MM-DD)") from err
    if idx.tz is not None:  # a zone-aware stamp: its local calendar date
        idx = idx.tz_localize(None)
    return idx.normalize()


def gather_windows(values: np.ndarray, end: np.ndarray, k_max: int) -> np.ndarray:
    """Gather, for each target, the ``k_max`` days before the exclusive end position ``end``.

    Parameters
    ----------
    values
        (days, drivers) float array on a complete daily calendar.
    end
        (targets,) integer positions; element ``[j, i, :]`` of the result is day ``end[i]-1-j``
        (nearest day first). Positions outside the record give NaN.
    k_max
        Longest window in days.

    Returns
    -------
    numpy.ndarray
        (k_max, targets, drivers) float64.
    """
    values = np.asarray(values, dtype=np.float64)
    n, d = values.shape
    idx = np.asarray(end, dtype=np.int64)[None, :] - 1 - np.arange(k_max, dtype=np.int64)[:, None]
    padded = np.vstack([values, np.full((1, d), np.nan)])
    idx[(idx < 0) | (idx >= n)] = n
    return padded[idx]


def reduce_windows(
    gathered: np.ndarray,
    plan: WindowPlan,
    columns: Sequence[str],
    *,
    max_missing_fraction: float | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Reduce gathered windows to the features of ``plan``.

    Accumulates outward from the target, one day at a time over all targets and drivers
    (every shorter window is a prefix of the longer ones); sums are sequential over at most
    ``k_max`` values, so a window of zeros sums to exactly 0.

    Parameters
    ----------
    gathered
        (k_max, targets, drivers) from :func:`gather_windows` (NaN = missing day).
    plan
        Windows, statistics and options; ``columns`` names the drivers along the last axis.
    max_missing_fraction
        A window with more than ``max_missing_fraction * k`` missing days is missing; None: the plan's.

    Returns
    -------
    (values, incomplete)
        (targets, features) float64 and bool arrays in ``plan.names`` order; ``incomplete``
        marks values set missing because the window had too many missing days.
    """
    if max_missing_fraction is None:
        max_missing_fraction = plan.max_missing_fraction
    _, t, d = gathered.shape
    needed = {s for ss in plan.stats.values() for s in ss}
    n_w, n_s = len(plan.windows), len(STATISTICS)
    si = {s: i for i, s in enumerate(STATISTICS)}
    # results laid out (targets, drivers, statistics, windows): reshaped, the columns are in plan order
    res = np.empty((t, d, n_s, n_w))
    reduce = _reduce_few if t <= _FEW_TARGETS else _reduce_by_day  # few targets (a refresh): whole-array calls
    counts = reduce(gathered, needed, plan.windows, res)
    ks = np.asarray(plan.windows)
    bad = ((ks - counts) > np.floor(max_missing_fraction * ks + 1e-9)) | (counts == 0)  # (t, d, windows)
    if "mean" in needed:
        with np.errstate(invalid="ignore", divide="ignore"):
            res[:, :, si["mean"], :] = res[:, :, si["sum"], :] / counts
    res[np.broadcast_to(bad[:, :, None, :], res.shape)] = np.nan
    flat = plan.layout(columns)
    values = res.reshape(t, d * n_s * n_w)
    flags = np.broadcast_to(bad[:, :, None, :], res.shape).reshape(t, d * n_s * n_w)
    if flat is None:
        return values, np.ascontiguousarray(flags)
    return values[:, flat], flags[:, flat]


def _reduce_by_day(gathered: np.ndarray, needed: set[str], windows: Sequence[int], res: np.ndarray) -> np.ndarray:
    """Accumulate outward from the target, one day at a time over all targets and drivers; fills ``res``
    (targets, drivers, statistics, windows) and returns the valid-day counts (targets, drivers, windows)."""
    k_max, t, d = gathered.shape
    si = {s: i for i, s in enumerate(STATISTICS)}
    want = {k - 1: w for w, k in enumerate(windows)}
    n_w = len(windows)
    counts = np.empty((t, d, n_w), dtype=np.int32)
    count = np.zeros((t, d), dtype=np.int32)
    total = np.zeros((t, d)) if needed & {"sum", "mean"} else None
    low = np.full((t, d), np.nan) if "min" in needed else None
    high = np.full((t, d), np.nan) if "max" in needed else None
    for j in range(k_max):
        day = gathered[j]
        ok = ~np.isnan(day)
        count += ok
        if total is not None:
            total += np.where(ok, day, 0.0)
        if low is not None:
            np.fmin(low, day, out=low)
        if high is not None:
            np.fmax(high, day, out=high)
        if j in want:
            w = want[j]
            counts[:, :, w] = count
            if total is not None:
                res[:, :, si["sum"], w] = total
            if low is not None:
                res[:, :, si["min"], w] = low
            if high is not None:
                res[:, :, si["max"], w] = high
    return counts


_FEW_TARGETS = 16  # measured: below this the accumulate form is faster, above it the day loop


def _reduce_few(gathered: np.ndarray, needed: set[str], windows: Sequence[int], res: np.ndarray) -> np.ndarray:
    """:func:`_reduce_by_day` as running reductions along the day axis (``cumsum`` and
    ``fmin``/``fmax.accumulate`` are sequential too: identical results); fills ``res``, returns the
    valid-day counts."""
    si = {s: i for i, s in enumerate(STATISTICS)}
    at = np.asarray(windows) - 1  # the window of k days ends k - 1 days out from the nearest day
    ok = ~np.isnan(gathered)
    counts = np.moveaxis(np.cumsum(ok, axis=0, dtype=np.int32)[at], 0, -1)  # (t, d, windows)
    if needed & {"sum", "mean"}:
        res[:, :, si["sum"], :] = np.moveaxis(np.cumsum(np.where(ok, gathered, 0.0), axis=0)[at], 0, -1)
    if "min" in needed:
        res[:, :, si["min"], :] = np.moveaxis(np.fmin.accumulate(gathered, axis=0)[at], 0, -1)
    if "max" in needed:
        res[:, :, si["max"], :] = np.moveaxis(np.fmax.accumulate(gathered, axis=0)[at], 0, -1)
    return counts


def window_features(
    drivers: pd.DataFrame,
    target_dates: Sequence[object] | pd.DatetimeIndex,
    *,
    windows: Sequence[int] = WINDOW_DEFAULTS.windows,
    stats: Mapping[str, Sequence[str]] | None = None,
    include_target_day: bool = WINDOW_DEFAULTS.include_target_day,
    max_missing_fraction: float = WINDOW_DEFAULTS.max_missing_fraction,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Antecedent-window features of daily drivers at (irregular) target dates.

    Parameters
    ----------
    drivers
        Daily drivers indexed by local calendar date; one numeric column per driver, in its
        canonical unit. Missing days may be absent rows or NaN.
    target_dates
        Target dates (any order, duplicates allowed).
    windows
        Window lengths in days (positive).
    stats
        Driver column -> statistics (``mean``, ``sum``, ``min``, ``max``); columns not named get
        :func:`default_statistics`. Only columns of ``drivers`` are used.
    include_target_day
        Whether the window ends on the target day (True) or the day before (False, default).
    max_missing_fraction
        Largest admissible fraction of missing days in a window.

    Returns
    -------
    (features, incomplete)
        Frames indexed like ``target_dates`` with columns ``<driver>__<stat>_<k>d``: values
        (driver units; sums in unit x days) and bool flags for windows with too many missing days.

    Examples
    --------
    >>> days = pd.date_range("2024-01-01", periods=5)
    >>> f, _ = window_features(pd.DataFrame({"precipitation_sum": [1.0, 2, 3, 4, 5]}, index=days),
    ...                        ["2024-01-05"], windows=[3])
    >>> float(f.iloc[0, 0])
    9.0
    """
    daily = complete_calendar(drivers.select_dtypes("number"))
    plan = WindowPlan.build(
        list(daily.columns),
        windows=windows,
        stats=stats,
        include_target_day=include_target_day,
        max_missing_fraction=max_missing_fraction,
    )
    targets = as_dates(target_dates)
    end = day_positions(daily.index, targets) + (1 if plan.include_target_day else 0)
    gathered = gather_windows(daily.to_numpy(dtype=np.float64), end, max(plan.windows))
    values, incomplete = reduce_windows(gathered, plan, list(daily.columns))
    return (
        pd.DataFrame(values, index=targets, columns=plan.names),
        pd.DataFrame(incomplete, index=targets, columns=plan.names),
    )


def day_positions(calendar: pd.DatetimeIndex, dates: pd.DatetimeIndex) -> np.ndarray:
    """Position of each date on a complete daily ``calendar`` (may be < 0 or >= len)."""
    if len(calendar) == 0:
        return np.zeros(len(dates), dtype=np.int64)
    start = calendar[0].to_datetime64().astype("datetime64[D]")
    return (dates.to_numpy().astype("datetime64[D]") - start).astype(np.int64)
