"""Point-in-time feature rows: target dates, lead times, issue dates and the persistence baseline.

Takes the accepted chlorophyll-a observations (irregular dates, per AOI), the daily drivers
(observed) and, optionally, forecast drivers; returns one row per target date and lead with
its issue date, the antecedent-window features, the persistence baseline and calendar
features. Must not open files.

Point-in-time rule. For target date t and lead h (days) the issue date is d = t - h; the issue
is made at the end of day d, so everything dated on or before d is known, nothing after it.

- Driver days after d are unknown: when a window reaches past d (only possible for h > 0)
  those days are taken from ``forecast_drivers`` issued on d if given, else they are missing
  (and the window is missing when too many of its days are).
- The persistence baseline is the last accepted observation dated on or before d and before t
  (the target itself is never a feature, also for h = 0). ``persistence_age_days`` is its age
  at the target date (t - its date); ``days_since_prev_obs`` is its age at the issue date
  (d - its date); both are equal for h = 0.
- ``doy_sin``/``doy_cos`` encode the target date's day of year (a calendar fact known ahead).

Flags (column ``flags``, ';'-joined codes): ``outside_driver_record`` (the window ends before
the first or after the last driver day), ``incomplete_window`` (a window had too many missing
days; ``incomplete_windows`` counts them), ``no_prior_observation`` (no persistence value),
``forecast_drivers`` (forecast values filled days after the issue date).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from functools import lru_cache
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from lakefeed.exceptions import FeatureError
from lakefeed.features.windows import as_dates, day_numbers

__all__ = [
    "FLAG_CODES",
    "FeatureBlock",
    "build_feature_rows",
    "calendar_features",
    "feature_block",
    "flag_strings",
    "forecast_array",
    "last_known",
    "persistence",
]

#: Codes used in the ``flags`` column of feature rows.
FLAG_CODES = ("outside_driver_record", "incomplete_window", "no_prior_observation", "forecast_drivers")


def flag_strings(codes: Mapping[str, np.ndarray]) -> np.ndarray:
    """';'-joined names of the true codes per row (vectorised through a table of combinations)."""
    names = list(codes)
    if not names:
        return np.zeros(0, dtype=object)
    combo = np.zeros(len(next(iter(codes.values()))), dtype=np.int64)
    for bit, name in enumerate(names):
        combo |= np.asarray(codes[name], dtype=np.int64) << bit
    return _flag_table(tuple(names))[combo]


@lru_cache(maxsize=32)
def _flag_table(names: tuple[str, ...]) -> np.ndarray:
    return np.array([";".join(n for b, n in enumerate(names) if c >> b & 1) for c in range(1 << len(names))], object)


def calendar_features(dates: pd.DatetimeIndex | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Day of year as a point on the unit circle: (sin, cos) of 2 pi (doy - 1) / days in that year.

    ``dates``: dates, or day numbers (int64 days since 1970-01-01)."""
    days = np.asarray(dates) if np.asarray(dates).dtype.kind == "i" else day_numbers(pd.DatetimeIndex(dates))
    year = days.astype("datetime64[D]").astype("datetime64[Y]")
    doy0 = days - year.astype("datetime64[D]").astype(np.int64)  # day of year - 1
    y = year.astype(np.int64) + 1970
    leap = (y % 4 == 0) & ((y % 100 != 0) | (y % 400 == 0))
    angle = 2.0 * np.pi * doy0 / np.where(leap, 366.0, 365.0)
    return np.sin(angle), np.cos(angle)


def persistence(
    observations: pd.DataFrame,
    target_dates: pd.DatetimeIndex,
    issue_dates: pd.DatetimeIndex,
    groups: np.ndarray | None = None,
    *,
    value: str = "chla",
    by: str | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Last accepted observation on or before the issue date and before the target date.

    Parameters
    ----------
    observations
        Accepted observations with ``date``, ``value`` (mg m-3 for chlorophyll-a) and, when
        ``by`` is given, the group column (e.g. ``aoi``).
    target_dates, issue_dates
        One per row.
    groups
        Group label per row (needed when ``by`` is given).

    Returns
    -------
    (values, dates)
        Value (NaN when none) and date (NaT when none) of the baseline observation, per row.
    """
    vals, days = last_known(
        observations,
        target_dates.to_numpy().astype("datetime64[D]").astype(np.int64),
        issue_dates.to_numpy().astype("datetime64[D]").astype(np.int64),
        groups,
        value=value,
        by=by,
    )
    found = ~np.isnan(vals)
    return vals, np.where(found, days.astype("datetime64[D]").astype("datetime64[ns]"), np.datetime64("NaT", "ns"))


def last_known(
    observations: pd.DataFrame,
    tdays: np.ndarray,
    idays: np.ndarray,
    groups: np.ndarray | None,
    *,
    value: str,
    by: str | None,
) -> tuple[np.ndarray, np.ndarray]:
    """(value, day number) of the last observation on or before the issue day and before the target day.

    ``tdays``/``idays``: target and issue day numbers per row; ``groups``: the row's ``by`` label."""
    ovals = observations[value].to_numpy(dtype=float)
    keep = ~np.isnan(ovals)
    ovals = ovals[keep]
    dcol = "date" if "date" in observations.columns else "target_date"
    odays = day_numbers(observations[dcol])[keep]
    cutoff = np.minimum(idays, tdays - 1)
    span = 1 << 32
    if by is not None:
        # groups compared as text (1 and "1" are one group); only the distinct labels are converted
        ocodes, olabels = pd.factorize(observations[by].to_numpy(dtype=object)[keep])
        code_of: dict[str, int] = {}
        for label in olabels.tolist():
            code_of.setdefault(str(label), len(code_of))
        to_text = np.array([code_of[str(label)] for label in olabels.tolist()], dtype=np.int64)
        ogrp = to_text[ocodes] if len(ocodes) else np.zeros(0, dtype=np.int64)
        rcodes, rlabels = pd.factorize(np.asarray(groups, dtype=object))
        rmap = np.array([code_of.get(str(label), -1) for label in rlabels.tolist()], dtype=np.int64)
        rgrp = rmap[rcodes] if len(rcodes) else np.zeros(0, dtype=np.int64)  # -1: no observations
        okey, rkey = ogrp * span + odays, rgrp * span + cutoff
    else:
        okey, rkey = odays, cutoff
        ogrp = np.zeros(len(odays), dtype=np.int64)
        rgrp = np.zeros(len(cutoff), dtype=np.int64)
    order = np.argsort(okey, kind="stable")
    okey, ogrp, ovals, odays = okey[order], ogrp[order], ovals[order], odays[order]
    pos = np.searchsorted(okey, rkey, side="right") - 1
    ok = pos >= 0
    ok[ok] &= ogrp[pos[ok]] == rgrp[ok]
    vals = np.where(ok, ovals[np.clip(pos, 0, None)] if len(ovals) else np.nan, np.nan)
    days = np.where(ok, odays[np.clip(pos, 0, None)] if len(odays) else 0, 0).astype(np.int64)
    return vals, days


def forecast_array(
    forecast_drivers: pd.DataFrame, columns: Sequence[str], issue_dates: pd.DatetimeIndex, max_offset: int
) -> np.ndarray:
    """Forecast drivers as (rows, max_offset + 1, drivers): element [i, o] is day issue_i + o.

    ``forecast_drivers`` has ``issue_date``, ``date`` and the driver columns (daily values in
    the same units as the observed drivers). Missing combinations are NaN.
    """
    missing = [c for c in ("issue_date", "date") if c not in forecast_drivers.columns]
    if missing:
        raise FeatureError(f"forecast drivers lack column(s) {missing}; expected issue_date, date and driver columns")
    fc = forecast_drivers
    idays = as_dates(fc["issue_date"]).to_numpy().astype("datetime64[D]").astype(np.int64)
    off = as_dates(fc["date"]).to_numpy().astype("datetime64[D]").astype(np.int64) - idays
    keep = (off >= 0) & (off <= max_offset)
    uniq, inv = np.unique(idays[keep], return_inverse=True)
    cube = np.full((len(uniq), max_offset + 1, len(columns)), np.nan)
    vals = np.column_stack([fc[c].to_numpy(float)[keep] if c in fc else np.full(keep.sum(), np.nan) for c in columns])
    cube[inv, off[keep]] = vals.reshape(-1, len(columns))
    rows = issue_dates.to_numpy().astype("datetime64[D]").astype(np.int64)
    at = np.searchsorted(uniq, rows)
    found = (at < len(uniq)) & (uniq[np.clip(at, 0, max(len(uniq) - 1, 0))] == rows if len(uniq) else False)
    out = np.full((len(rows), max_offset + 1, len(columns)), np.nan)
    out[found] = cube[at[found]]
    return out


@dataclass(frozen=True)
class FeatureBlock:
    """Feature rows as columns: ``head`` (keys, dates, label, baseline, calendar), the window features
    (one float64 block, ``names`` in plan order) and ``tail`` (flag columns), in output column order.
    Converts to pandas (:meth:`to_pandas`) or Arrow (:meth:`to_arrow`) without per-column copies of
    the float block."""

    head: dict[str, np.ndarray]
    values: np.ndarray
    names: list[str]
    tail: dict[str, np.ndarray]
    index: pd.Index | None = None

    def __len__(self) -> int:
        return int(self.values.shape[0])

    def to_pandas(self) -> pd.DataFrame:
        """One frame: head columns, features, tail columns (index as the targets')."""
        idx = self.index if self.index is not None else pd.RangeIndex(len(self))
        parts = [
            pd.DataFrame(self.head, index=idx),
            pd.DataFrame(self.values, columns=self.names, index=idx),
            pd.DataFrame(self.tail, index=idx),
        ]
        return pd.concat(parts, axis=1)

    def to_arrow(self, extra: Mapping[str, tuple[str, np.ndarray]] | None = None) -> pa.Table:
        """Arrow table in the same column order (NaN -> null, as ``pa.Table.from_pandas``);
        ``extra`` inserts columns after a named one: ``{new: (after, values)}``."""
        n = len(self)
        flat = pa.array(np.asarray(self.values, dtype=np.float64).ravel(order="F"), pa.float64(), from_pandas=True)
        cols: list[tuple[str, pa.Array]] = [(k, _arrow_col(v)) for k, v in self.head.items()]
        cols += [(c, flat.slice(i * n, n)) for i, c in enumerate(self.names)]
        cols += [(k, _arrow_col(v)) for k, v in self.tail.items()]
        for new, (after, v) in (extra or {}).items():
            at = [c for c, _ in cols].index(after) + 1
            cols.insert(at, (new, _arrow_col(v)))
        return pa.Table.from_arrays([a for _, a in cols], names=[c for c, _ in cols])


def _arrow_col(values: np.ndarray) -> pa.Array:
    v = np.asarray(values)
    if v.dtype.kind == "f":
        return pa.array(v, from_pandas=True)
    if v.dtype.kind == "O":
        return pa.array(v.tolist(), pa.string())
    return pa.array(v)


def build_feature_rows(targets: pd.DataFrame, drivers: pd.DataFrame, **options: Any) -> pd.DataFrame:
    """Feature rows for target observations at one lead time, using only data known at issue.

    Parameters and options (``lead``, ``windows``, ``stats``, ...) as for :func:`feature_block`.

    Returns
    -------
    pandas.DataFrame
        ``[by], target_date, lead_days, issue_date, chla, persistence_chla,
        persistence_age_days, days_since_prev_obs, doy_sin, doy_cos, <features>,
        incomplete_windows, outside_driver_record, flags``, in the order of ``targets``.
    """
    return feature_block(targets, drivers, **options).to_pandas()


def feature_block(
    targets: pd.DataFrame,
    drivers: pd.DataFrame,
    *,
    lead: int = 0,
    windows: Sequence[int] = (1, 3, 5, 7, 10, 15, 30),
    stats: Mapping[str, Sequence[str]] | None = None,
    include_target_day: bool = False,
    max_missing_fraction: float = 0.2,
    forecast_drivers: pd.DataFrame | None = None,
    observations: pd.DataFrame | None = None,
    by: str | None = "aoi",
    value: str = "chla",
) -> FeatureBlock:
    """Feature rows for target observations at one lead time, as columns (see :class:`FeatureBlock`).

    Parameters
    ----------
    targets
        One row per target: ``target_date`` (or ``date``), ``value`` (chlorophyll-a, mg m-3)
        and the group column ``by`` (e.g. ``aoi``) when given.
    drivers
        Observed daily drivers indexed by local date (one column per driver, canonical units).
    lead
        Lead time h in days (>= 0); issue date = target date - h.
    windows, stats, include_target_day, max_missing_fraction
        As in :func:`lakefeed.features.windows.window_features`.
    forecast_drivers
        Optional forecasts: ``issue_date``, ``date`` and driver columns (same names and units
        as ``drivers``); they fill the days after the issue date. Without them those days are
        missing.
    observations
        Accepted observations for the persistence baseline (``date`` or ``target_date``,
        ``value``, ``by``); default the targets themselves.

    Returns
    -------
    FeatureBlock
        The columns of :func:`build_feature_rows`, in the order of ``targets``.
    """
    from lakefeed.features.batch import Series, feature_block_many  # the engine; it builds on this module

    one = Series(targets, drivers, lead=lead, observations=observations, forecast_drivers=forecast_drivers)
    [chunk] = feature_block_many(
        [one], windows=windows, stats=stats, include_target_day=include_target_day,
        max_missing_fraction=max_missing_fraction, by=by, value=value,
    )  # fmt: skip
    return replace(chunk.block, index=targets.index)
