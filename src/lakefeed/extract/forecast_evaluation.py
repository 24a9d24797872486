"""Honest fitting and evaluation of the forecast bias adjustment (pure pandas/numpy/scipy).

Takes daily forecast drivers (``zone``, ``issue_date``, ``lead_days``, ``date`` and driver columns)
and the reanalysis drivers (``zone``, ``date``, same columns and units). Returns adjusted forecasts
and a before/after table. Must not read or write files.

Two honest schemes, so that no evaluated forecast is adjusted with a fit that saw its own verification:

- :func:`expanding_adjustment` (the operational one, also used for the stored adjusted drivers):
  refits at the start of every month R on the pairs whose valid date is before R (so only forecasts
  issued before R, and only reanalysis before R), and adjusts the forecasts issued from R to the next
  refit. The adjusted value of an issue dated t therefore uses no reanalysis after t (no look-ahead).
  Issues before the first refit with ``min_overlap_days`` of overlap stay unadjusted (NaN), counted.
  Issues after the last reanalysis date use one fit on the whole overlap (the table stored for reuse).
- :func:`leave_one_year_out`: for every issue year, fit on the other years' forecasts (needs two years).

:func:`bias_table` gives per variable and lead the mean bias (forecast - reanalysis, in the variable's
unit), the two-sample Kolmogorov-Smirnov statistic (scipy) and the RMSE between the 1st..99th
percentiles of forecasts and reanalysis, before and after adjustment, on the same rows.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import pandas as pd
from scipy.stats import ks_2samp

from lakefeed.exceptions import ExtractError
from lakefeed.extract.quantile_mapping import apply_quantile_mapping, fit_quantile_mapping

__all__ = [
    "ExpandingResult",
    "bias_table",
    "expanding_adjustment",
    "leave_one_year_out",
    "overlap_days",
]

PERCENTILES = np.arange(1, 100) / 100.0


def overlap_days(forecast: pd.DataFrame, reference: pd.DataFrame, variables: Sequence[str]) -> int:
    """Number of distinct valid dates on which some forecast and the reanalysis both have values."""
    ref = reference.dropna(subset=list(variables), how="all")[["zone", "date"]]
    fc = forecast.dropna(subset=list(variables), how="all")[["zone", "date"]].drop_duplicates()
    return int(fc.merge(ref, on=["zone", "date"])["date"].nunique())


def _fit(forecast: pd.DataFrame, reference: pd.DataFrame, variables: Sequence[str], options: Mapping[str, Any]):
    return fit_quantile_mapping(forecast, reference, variables=variables, **options)


@dataclass
class ExpandingResult:
    """Output of :func:`expanding_adjustment`.

    ``adjusted``: the forecasts with adjusted driver columns (NaN where no fit was possible) and a
    ``fitted_through`` column (last reanalysis date the fit used). ``tables``: refit date -> quantile
    table. ``unadjusted_issues``: issue dates left unadjusted for want of overlap.
    """

    adjusted: pd.DataFrame
    tables: dict[pd.Timestamp, pd.DataFrame] = field(default_factory=dict)
    unadjusted_issues: list[pd.Timestamp] = field(default_factory=list)
    fallback_rows: int = 0


def expanding_adjustment(
    forecast: pd.DataFrame,
    reference: pd.DataFrame,
    *,
    variables: Sequence[str],
    min_overlap_days: int,
    options: Mapping[str, Any] | None = None,
    refit: Literal["month", "year"] = "month",
    reuse: Callable[[pd.Timestamp], pd.DataFrame | None] | None = None,
) -> ExpandingResult:
    """Adjust each forecast with a fit made only on data verified before its issue.

    Parameters
    ----------
    forecast, reference
        Daily forecasts (with ``issue_date``) and reanalysis drivers (see module docstring).
    variables
        Driver columns to adjust.
    min_overlap_days
        Fewest distinct overlapping valid dates a fit needs.
    options
        Keyword arguments of :func:`~lakefeed.extract.quantile_mapping.fit_quantile_mapping`.
    refit
        Refit at the start of every ``"month"`` (default) or ``"year"``.
    reuse
        Optional lookup refit date -> stored table fitted on exactly the same data (skips the fit).
    """
    options = dict(options or {})
    issue = pd.DatetimeIndex(forecast["issue_date"])
    if refit not in ("month", "year"):
        raise ExtractError(f"refit must be 'month' or 'year'; got {refit!r}")
    starts = pd.DatetimeIndex(issue.to_period("M" if refit == "month" else "Y").start_time)
    if len(reference):
        # issues after the end of the reanalysis all use the fit on the whole overlap (the operational case)
        after_end = pd.Timestamp(pd.to_datetime(reference["date"]).max()) + pd.Timedelta(days=1)
        starts = starts.where(starts <= after_end, after_end)
    out = forecast.copy()
    for v in variables:
        out[v] = np.nan
    out["fitted_through"] = pd.NaT
    result = ExpandingResult(adjusted=out)
    fdate = pd.DatetimeIndex(forecast["date"])
    rdate = pd.DatetimeIndex(reference["date"])
    for start in starts.unique().sort_values():
        rows = np.flatnonzero(starts == start)
        past_fc = forecast.loc[fdate < start]
        past_ref = reference.loc[rdate < start]
        if overlap_days(past_fc, past_ref, variables) < min_overlap_days:
            result.unadjusted_issues.extend(pd.DatetimeIndex(issue[rows]).unique())
            continue
        table = reuse(start) if reuse is not None else None
        if table is None:
            table = _fit(past_fc, past_ref, variables, options)
        result.tables[start] = table
        adj = apply_quantile_mapping(forecast.iloc[rows], table, variables=variables)
        result.fallback_rows += int(sum(adj.attrs.get("fallback", {}).values()))
        for v in variables:
            out.iloc[rows, out.columns.get_loc(v)] = adj[v].to_numpy()
        out.iloc[rows, out.columns.get_loc("fitted_through")] = start - pd.Timedelta(days=1)
    return result


def leave_one_year_out(
    forecast: pd.DataFrame,
    reference: pd.DataFrame,
    *,
    variables: Sequence[str],
    min_overlap_days: int,
    options: Mapping[str, Any] | None = None,
) -> pd.DataFrame:
    """Adjust the forecasts of each issue year with a fit on the other issue years (cross-validation).

    Raises :class:`ExtractError` when the forecasts span fewer than two issue years.
    """
    options = dict(options or {})
    years = pd.DatetimeIndex(forecast["issue_date"]).year.to_numpy()
    if np.unique(years).size < 2:
        raise ExtractError(
            f"leave-one-year-out needs forecasts issued in at least two years; got {sorted(set(years.tolist()))}"
        )
    out = forecast.copy()
    for v in variables:
        out[v] = np.nan
    for year in np.unique(years):
        test = years == year
        train = forecast.loc[~test]
        # the held-out year's reanalysis is never part of the fit
        ref = reference.loc[pd.DatetimeIndex(reference["date"]).year != year]
        if overlap_days(train, ref, variables) < min_overlap_days:
            continue
        table = _fit(train, ref, variables, options)
        adj = apply_quantile_mapping(forecast.loc[test], table, variables=variables)
        for v in variables:
            out.loc[test, v] = adj[v].to_numpy()
    return out


def _distances(fc: np.ndarray, ref: np.ndarray) -> tuple[float, float, float]:
    ok = ~(np.isnan(fc) | np.isnan(ref))
    fc, ref = fc[ok], ref[ok]
    if fc.size < 2:
        return np.nan, np.nan, np.nan
    bias = float(np.mean(fc - ref))
    ks = float(ks_2samp(fc, ref, method="asymp").statistic)  # only the statistic is reported
    qr = float(np.sqrt(np.mean((np.quantile(fc, PERCENTILES) - np.quantile(ref, PERCENTILES)) ** 2)))
    return bias, ks, qr


def bias_table(
    raw: pd.DataFrame,
    adjusted: pd.DataFrame,
    reference: pd.DataFrame,
    *,
    variables: Sequence[str],
    units: Mapping[str, str] | None = None,
    method: str = "expanding",
) -> pd.DataFrame:
    """Before/after table per variable and lead, on the rows adjusted in both (same rows before and after).

    ``raw`` and ``adjusted`` are aligned row by row (same forecasts). Returns columns ``variable,
    lead_days, method, n, mean_bias_raw, mean_bias_adjusted, ks_raw, ks_adjusted, quantile_rmse_raw,
    quantile_rmse_adjusted, unit`` (bias and RMSE in the variable's unit; KS dimensionless).
    """
    if len(raw) != len(adjusted):
        raise ExtractError("bias table: raw and adjusted forecasts must be the same rows")
    keys = ["zone", "date"]
    ref = reference[[*keys, *variables]].rename(columns={v: f"{v}__ref" for v in variables})
    base = raw[[*keys, "lead_days"]].reset_index(drop=True)
    both = base.join(raw[list(variables)].reset_index(drop=True).add_suffix("__raw"))
    both = both.join(adjusted[list(variables)].reset_index(drop=True).add_suffix("__adj"))
    both = both.merge(ref, on=keys, how="inner")
    rows = []
    for lead, grp in both.groupby("lead_days", sort=True):
        for v in variables:
            r, a, o = (grp[f"{v}__{s}"].to_numpy(float) for s in ("raw", "adj", "ref"))
            ok = ~(np.isnan(r) | np.isnan(a) | np.isnan(o))
            b0, k0, q0 = _distances(r[ok], o[ok])
            b1, k1, q1 = _distances(a[ok], o[ok])
            rows.append(
                {
                    "variable": v,
                    "lead_days": int(lead),
                    "method": method,
                    "n": int(ok.sum()),
                    "mean_bias_raw": b0,
                    "mean_bias_adjusted": b1,
                    "ks_raw": k0,
                    "ks_adjusted": k1,
                    "quantile_rmse_raw": q0,
                    "quantile_rmse_adjusted": q1,
                    "unit": (units or {}).get(v, ""),
                }
            )
    return pd.DataFrame(rows)
