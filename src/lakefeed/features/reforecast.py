"""Re-forecast feature rows: the hindcast feature layout driven by archived, adjusted forecasts.

Takes the targets (accepted chlorophyll-a per AOI and date), the observed daily drivers (indexed by
local date) and daily forecast drivers (``issue_date``, ``date`` and driver columns, usually the
bias-adjusted ones of :mod:`lakefeed.extract.forecast_evaluation`). Returns, for each lead h, the
feature rows of :func:`lakefeed.features.pit.build_feature_rows` for issue date t - h (all leads computed in
one pass, :mod:`lakefeed.features.batch`): days on or
before the issue date come from the observed drivers, days after it from the forecast issued on that
date (so nothing after the issue is used, forecasts included), plus the persistence baseline at the
issue date. Same columns as the hindcast rows, plus:

- ``forecast_days``: how many of the days just before the target come from the forecast
  (h - 1, or h with ``include_target_day``); a window of length k takes min(k, forecast_days) of its
  days from the forecast;
- ``forecast_fraction``: that share of the longest window (0..1).

Driver columns the forecasts do not carry (e.g. loads) are missing after the issue date, so their
windows reaching past it are missing and flagged, never filled with observations. Must not open files.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from lakefeed.exceptions import FeatureError
from lakefeed.features.batch import Series, iter_feature_blocks
from lakefeed.features.window_plan import WINDOW_DEFAULTS

__all__ = ["forecast_days", "reforecast_rows"]


def forecast_days(lead: int, *, include_target_day: bool = WINDOW_DEFAULTS.include_target_day) -> int:
    """Days of the antecedent windows (counted back from the target) that lie after the issue date."""
    return max(0, lead - 1 + (1 if include_target_day else 0))


def reforecast_rows(
    targets: pd.DataFrame,
    drivers: pd.DataFrame,
    forecast_drivers: pd.DataFrame,
    *,
    leads: Sequence[int] = (1, 3, 5, 10),
    windows: Sequence[int] = WINDOW_DEFAULTS.windows,
    stats: Mapping[str, Sequence[str]] | None = None,
    include_target_day: bool = WINDOW_DEFAULTS.include_target_day,
    max_missing_fraction: float = WINDOW_DEFAULTS.max_missing_fraction,
    by: str | None = "aoi",
    value: str = "chla",
) -> pd.DataFrame:
    """Re-forecast feature rows for every target and lead in ``leads`` (days, > 0).

    Parameters
    ----------
    targets
        ``target_date`` (or ``date``), ``value`` (mg m-3) and the group column ``by``.
    drivers
        Observed daily drivers indexed by local date (canonical units, as for the hindcast rows).
    forecast_drivers
        ``issue_date``, ``date`` and driver columns (same names and units as ``drivers``), one row per
        issue date and valid date (one zone).
    leads, windows, stats, include_target_day, max_missing_fraction
        As in :func:`lakefeed.features.pit.build_feature_rows`.

    Returns
    -------
    pandas.DataFrame
        The hindcast columns with ``lead_days`` = h, plus ``forecast_days`` (d) and
        ``forecast_fraction`` (1); rows ordered by lead, then as ``targets``.
    """
    bad = [h for h in leads if h <= 0]
    if bad:
        raise FeatureError(f"re-forecast leads must be > 0 days; got {bad} (lead 0 is the hindcast)")
    missing = [c for c in ("issue_date", "date") if c not in forecast_drivers.columns]
    if missing:
        raise FeatureError(f"forecast drivers lack column(s) {missing}; expected issue_date, date and driver columns")
    dup = forecast_drivers.duplicated(["issue_date", "date"])
    if dup.any():
        first = forecast_drivers.loc[dup].iloc[0]
        raise FeatureError(
            f"forecast drivers have two rows for issue {first['issue_date']} and day {first['date']}; "
            "pass one zone and one adjustment at a time"
        )
    k_max = max(int(w) for w in windows)
    lead_days = sorted({int(x) for x in leads})
    # all leads in one pass: the drivers and the forecast cube are laid out once
    series = [Series(targets, drivers, lead=h, forecast_drivers=forecast_drivers) for h in lead_days]
    chunks = iter_feature_blocks(
        series,
        windows=windows,
        stats=stats,
        include_target_day=include_target_day,
        max_missing_fraction=max_missing_fraction,
        by=by,
        value=value,
    )
    frames = [c.block.to_pandas() for c in chunks]
    rows = frames[0] if len(frames) == 1 else pd.concat(frames, ignore_index=True)
    days = np.array([forecast_days(h, include_target_day=include_target_day) for h in lead_days], dtype=np.int16)
    n = np.repeat(days, len(targets))  # every lead has one row per target
    at = rows.columns.get_loc("flags")
    rows.insert(at, "forecast_days", n)
    rows.insert(at + 1, "forecast_fraction", np.minimum(n, k_max) / k_max)
    return rows
