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
from dataclasses import replace
from typing import Any

import pandas as pd

from lakefeed.features.batch import Series, feature_block_many
from lakefeed.features.rows import FeatureBlock
from lakefeed.features.window_plan import WINDOW_DEFAULTS

__all__ = ["build_feature_rows", "feature_block"]


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
    windows: Sequence[int] = WINDOW_DEFAULTS.windows,
    stats: Mapping[str, Sequence[str]] | None = None,
    include_target_day: bool = WINDOW_DEFAULTS.include_target_day,
    max_missing_fraction: float = WINDOW_DEFAULTS.max_missing_fraction,
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
    one = Series(targets, drivers, lead=lead, observations=observations, forecast_drivers=forecast_drivers)
    [chunk] = feature_block_many(
        [one],
        windows=windows,
        stats=stats,
        include_target_day=include_target_day,
        max_missing_fraction=max_missing_fraction,
        by=by,
        value=value,
    )
    return replace(chunk.block, index=targets.index)
