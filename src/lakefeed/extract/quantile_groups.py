"""How quantile mapping groups values: quantile nodes, lead-time groups and seasons (pure numpy/pandas).

Takes lead days, dates and the grouping settings; returns the probability nodes, the ``(lead_min,
lead_max)`` group of each lead, and each date's season label (for fitting: every season whose window
holds the date). Used by :mod:`lakefeed.extract.quantile_mapping`. Must not open files.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

import numpy as np
import pandas as pd

from lakefeed.exceptions import ExtractError

__all__ = ["Season", "lead_group_of", "quantile_nodes", "season_copies", "season_of"]

Season = Literal["month", "doy", "none"]


def quantile_nodes(n: int) -> np.ndarray:
    """Equally spaced probability nodes ``(i + 0.5) / n``, i = 0..n-1 (as xsdba's ``equally_spaced_nodes``)."""
    if n < 2:
        raise ExtractError(f"quantile mapping needs at least 2 quantile nodes; got {n}")
    return (np.arange(n) + 0.5) / n


def lead_group_of(leads: Sequence[int] | np.ndarray, lead_groups: Sequence[Sequence[int]] | None) -> np.ndarray:
    """Map lead days to ``(lead_min, lead_max)`` of their group (each lead its own group when none).

    Returns an (n, 2) integer array; leads in no configured group get their own one-lead group.
    """
    leads = np.asarray(leads, dtype=int)
    out = np.stack([leads, leads], axis=1)
    for group in lead_groups or []:
        lo, hi = min(group), max(group)
        inside = np.isin(leads, list(group))
        out[inside] = (lo, hi)
    return out


def season_copies(
    dates: pd.Series, season: Season, month_window: int, doy_window: int, doy_step: int
) -> tuple[np.ndarray, np.ndarray]:
    """Row positions and season labels: each row goes to every season whose window contains it."""
    n = len(dates)
    idx = np.arange(n)
    if season == "none":
        return idx, np.zeros(n, dtype=int)
    if season == "month":
        month = pd.DatetimeIndex(dates).month.to_numpy()
        offs = np.arange(-month_window, month_window + 1)
        labels = ((month[None, :] - 1 + offs[:, None]) % 12) + 1
        return np.tile(idx, len(offs)), labels.ravel()
    doy = pd.DatetimeIndex(dates).dayofyear.to_numpy()
    anchors = np.arange(1, 367, doy_step)
    dist = np.abs(doy[None, :] - anchors[:, None])
    dist = np.minimum(dist, 366 - dist)
    a, r = np.nonzero(dist <= doy_window)
    return r, anchors[a]


def season_of(dates: pd.Series, season: Season, anchors: np.ndarray) -> np.ndarray:
    """Season label of each date: 0 (none), the calendar month, or the nearest day-of-year anchor (cyclic)."""
    if season == "none" or (season == "doy" and anchors.size == 0):
        return np.zeros(len(dates), dtype=int)
    if season == "month":
        return pd.DatetimeIndex(dates).month.to_numpy()
    doy = pd.DatetimeIndex(dates).dayofyear.to_numpy()
    dist = np.abs(doy[:, None] - anchors[None, :])
    dist = np.minimum(dist, 366 - dist)
    return anchors[np.argmin(dist, axis=1)]
