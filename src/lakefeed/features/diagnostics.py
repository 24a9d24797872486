"""Sampling diagnostics: can this target series carry a data-driven model at all?

Takes accepted observations (``aoi``, ``date``; irregular dates) and optionally the record
period (e.g. the driver record); returns one row per AOI with observation counts (total, per
year, per meteorological season), the gap-length distribution and the longest gap, the share
of the record's calendar months with an observation, and warnings. Pure: no file I/O.

Warnings (they inform; they do not stop anything):
- fewer than ``min_observations`` accepted observations (default 140: a rule of thumb from
  field experience with data-driven lake models; common practice, no published source);
- a season badly under-represented: fewer than ``season_share_limit`` (default 0.10, i.e.
  40 % of an even share; our choice) of the observations fall in one season.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from lakefeed.features.windows import as_dates

__all__ = ["GAP_BINS", "SEASONS", "sampling_diagnostics"]

#: Meteorological seasons by month (northern-hemisphere names; the months are what counts).
SEASONS = {"djf": (12, 1, 2), "mam": (3, 4, 5), "jja": (6, 7, 8), "son": (9, 10, 11)}
#: Gap-length classes in days (between consecutive observation dates): lower, upper inclusive.
GAP_BINS = {
    "1d": (1, 1),
    "2_5d": (2, 5),
    "6_10d": (6, 10),
    "11_30d": (11, 30),
    "31_90d": (31, 90),
    "over_90d": (91, None),
}


def _one(days: np.ndarray, start: np.datetime64 | None, end: np.datetime64 | None, min_obs: int, share: float) -> dict:
    dates = pd.DatetimeIndex(np.unique(days).astype("datetime64[ns]"))
    n = len(days)
    row: dict[str, object] = {"n_obs": n, "n_dates": len(dates)}
    row["first_date"] = dates[0] if len(dates) else pd.NaT
    row["last_date"] = dates[-1] if len(dates) else pd.NaT
    rec_start = pd.Timestamp(start) if start is not None else row["first_date"]
    rec_end = pd.Timestamp(end) if end is not None else row["last_date"]
    row["record_start"], row["record_end"] = rec_start, rec_end
    months = pd.DatetimeIndex(days.astype("datetime64[ns]")).month
    for s, ms in SEASONS.items():
        row[f"n_obs_{s}"] = int(np.isin(months, ms).sum())
    years = pd.Series(pd.DatetimeIndex(days.astype("datetime64[ns]")).year).value_counts().sort_index()
    row["obs_per_year"] = json.dumps({str(y): int(c) for y, c in years.items()})
    row["min_obs_per_year"] = int(years.min()) if len(years) else 0
    gaps = np.diff(dates.to_numpy().astype("datetime64[D]").astype(np.int64))
    row["gap_median_days"] = float(np.median(gaps)) if len(gaps) else np.nan
    row["gap_p90_days"] = float(np.percentile(gaps, 90)) if len(gaps) else np.nan
    row["gap_max_days"] = float(gaps.max()) if len(gaps) else np.nan
    if len(gaps):
        i = int(np.argmax(gaps))
        row["longest_gap_start"], row["longest_gap_end"] = dates[i], dates[i + 1]
    else:
        row["longest_gap_start"] = row["longest_gap_end"] = pd.NaT
    for name, (lo, hi) in GAP_BINS.items():
        row[f"gaps_{name}"] = int(((gaps >= lo) & ((gaps <= hi) if hi is not None else True)).sum())
    if pd.notna(rec_start) and pd.notna(rec_end):
        first_m, last_m = (rec_start.year * 12 + rec_start.month - 1), (rec_end.year * 12 + rec_end.month - 1)
        seen = np.unique(dates.year.to_numpy() * 12 + dates.month.to_numpy() - 1)  # month numbers, vectorised
        n_months = last_m - first_m + 1
        inside = int(((seen >= first_m) & (seen <= last_m)).sum())
        row["coverage_fraction"] = inside / n_months if n_months > 0 else np.nan
    else:
        row["coverage_fraction"] = 0.0
    warns = []
    row["warn_few_observations"] = n < min_obs
    if n < min_obs:
        warns.append(f"only {n} accepted observations (< {min_obs}, a rule of thumb for data-driven models)")
    shares = {s: row[f"n_obs_{s}"] / n if n else 0.0 for s in SEASONS}
    low = [s for s, v in shares.items() if v < share]
    row["warn_season_under_represented"] = bool(low)
    if low:
        warns.append(
            "season(s) "
            + ", ".join(f"{s.upper()} ({shares[s]:.0%})" for s in low)
            + f" under-represented (< {share:.0%})"
        )
    row["warnings"] = "; ".join(warns)
    return row


def sampling_diagnostics(
    observations: pd.DataFrame,
    *,
    by: str = "aoi",
    record: tuple[object, object] | None = None,
    min_observations: int = 140,
    season_share_limit: float = 0.10,
) -> pd.DataFrame:
    """One diagnostics row per group (AOI) of accepted observations.

    Parameters
    ----------
    observations
        Accepted observations with ``date`` and the group column ``by``; rows with a missing
        ``chla`` (when that column exists) are not counted.
    record
        (start, end) of the record the series should cover (e.g. the driver record); default
        the first and last observation.
    min_observations
        Warn below this number of accepted observations.
    season_share_limit
        Warn when a season holds less than this share of the observations.

    Returns
    -------
    pandas.DataFrame
        ``by``, ``n_obs``, ``n_dates``, ``first_date``, ``last_date``, ``record_start``, ``record_end``,
        ``n_obs_<season>``, ``obs_per_year`` (JSON), ``min_obs_per_year``, gap statistics in days
        (``gap_median_days``, ``gap_p90_days``, ``gap_max_days``, ``longest_gap_start``/``_end``,
        ``gaps_<class>`` counts), ``coverage_fraction`` (share of calendar months with an
        observation), ``warn_few_observations``, ``warn_season_under_represented``, ``warnings``.
    """
    obs = observations
    if "chla" in obs.columns:
        obs = obs[obs["chla"].notna()]
    start = np.datetime64(pd.Timestamp(record[0])) if record and record[0] is not None else None
    end = np.datetime64(pd.Timestamp(record[1])) if record and record[1] is not None else None
    rows = []
    days_all = as_dates(obs["date"]).to_numpy().astype("datetime64[D]")
    keys = obs[by].astype(str).to_numpy()
    for g in sorted(set(keys)):
        row = {by: g}
        row.update(_one(days_all[keys == g], start, end, min_observations, season_share_limit))
        rows.append(row)
    return pd.DataFrame(rows)
