"""Empirical quantile mapping of daily forecast drivers onto the reanalysis (pure pandas/numpy).

Takes long daily frames (forecasts: ``zone``, ``lead_days``, ``date`` and driver columns; reference
reanalysis: ``zone``, ``date`` and the same driver columns, same units) and returns a quantile table
(one row per variable, zone, lead group, season and quantile node: the ``bias_adjustment`` table)
or adjusted forecasts. Must not read or write files and must not look at reference values other
than the ones it is given (the caller chooses the fitting period: that is how no-look-ahead holds).

Method (Deque 2007): for a forecast value x with non-exceedance probability p = F_hist(x) in the
forecasts of the fitting period, the adjusted value is x + [Q_ref(p) - Q_hist(p)] (additive: temperatures)
or x * Q_ref(p) / Q_hist(p) (multiplicative: precipitation, radiation, wind). As in xsdba's
EmpiricalQuantileMapping the correction is tabulated at the quantile nodes and interpolated linearly
in x between the forecast quantiles; beyond the fitted range the outermost correction is kept
(constant extrapolation of the factor, never of the value). Multiplicative factors are capped at
``max_factor``. Precipitation uses a wet-day threshold: reference values below it are dry (0), and when
the forecasts have more dry days than the reference (P0_hist > P0_ref) the frequency adaptation of
Themessl et al. (2012) gives a share (P0_hist - P0_ref) / P0_hist of the dry forecast days a wet value
drawn from the reference distribution between P0_ref and P0_hist. Which dry days become wet is decided
by the forecast's own sub-threshold value where it ranks days, else by a reproducible pseudo-random
number derived from the row's zone, date and lead (so a row's result never depends on other rows).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Literal

import numpy as np
import pandas as pd

from lakefeed.exceptions import ExtractError
from lakefeed.extract.quantile_groups import Season, lead_group_of, quantile_nodes, season_copies, season_of

__all__ = [
    "DEFAULT_KINDS",
    "WET_DAY_VARIABLES",
    "apply_quantile_mapping",
    "fit_quantile_mapping",
    "lead_group_of",
    "quantile_nodes",
]

#: Kind of correction per daily driver column: "+" additive, "*" multiplicative.
DEFAULT_KINDS: dict[str, Literal["+", "*"]] = {
    "air_temperature_mean": "+",
    "air_temperature_min": "+",
    "air_temperature_max": "+",
    "dewpoint_mean": "+",
    "precipitation_sum": "*",
    "shortwave_radiation_mean": "*",
    "wind_speed_mean": "*",
    "vapour_pressure_mean": "*",
    "relative_humidity_mean": "+",
}
#: Columns that get the wet-day threshold and frequency adaptation.
WET_DAY_VARIABLES: tuple[str, ...] = ("precipitation_sum",)

KEYS = ["variable", "zone", "lead_min", "lead_max", "season"]
_TABLE_NUMBERS = ("quantile", "hist", "ref", "factor", "wet_threshold", "dry_fraction_hist", "dry_fraction_ref")


def _pairs(forecast: pd.DataFrame, reference: pd.DataFrame, variables: Sequence[str]) -> pd.DataFrame:
    missing = [v for v in variables if v not in forecast.columns or v not in reference.columns]
    if missing:
        raise ExtractError(
            f"quantile mapping: driver column(s) {missing} missing in the forecasts or the reference; "
            "both need the same daily driver columns"
        )
    ref = reference[["zone", "date", *variables]].rename(columns={v: f"{v}__ref" for v in variables})
    fc = forecast[["zone", "lead_days", "date", *variables]]
    return fc.merge(ref, on=["zone", "date"], how="inner")


def fit_quantile_mapping(
    forecast: pd.DataFrame,
    reference: pd.DataFrame,
    *,
    variables: Sequence[str] | None = None,
    kinds: Mapping[str, str] | None = None,
    quantiles: int | np.ndarray = 50,
    lead_groups: Sequence[Sequence[int]] | None = None,
    season: Season = "month",
    month_window: int = 1,
    doy_window: int = 15,
    doy_step: int = 5,
    wet_day_threshold: float = 0.1,
    wet_variables: Sequence[str] = WET_DAY_VARIABLES,
    max_factor: float = 5.0,
    min_values: int = 20,
    pooled: bool = True,
) -> pd.DataFrame:
    """Fit empirical quantile mapping per variable, zone, lead group and season.

    Parameters
    ----------
    forecast
        Daily forecast drivers: ``zone``, ``lead_days``, ``date`` (valid local date) and driver columns.
    reference
        Daily reanalysis drivers: ``zone``, ``date`` and the same driver columns in the same units.
        Only the dates present in both are used (ref and hist share one time axis).
    variables
        Driver columns to fit (default: the columns of :data:`DEFAULT_KINDS` present in both frames).
    kinds
        ``"+"`` or ``"*"`` per variable (default :data:`DEFAULT_KINDS`).
    quantiles
        Number of equally spaced nodes (see :func:`quantile_nodes`) or explicit probabilities in (0, 1).
    lead_groups
        Lists of lead days fitted together; leads in no group are fitted on their own.
    season
        ``"month"`` (calendar month of the valid date, widened by ``month_window`` months either side),
        ``"doy"`` (moving window of +-``doy_window`` days around anchors every ``doy_step`` days) or
        ``"none"``.
    wet_day_threshold
        Wet-day threshold in the unit of the wet variables (mm d-1 for ``precipitation_sum``).
    max_factor
        Upper cap of multiplicative factors (dimensionless).
    min_values
        Groups with fewer pairs are not fitted (apply falls back to the pooled all-season group).
    pooled
        Also fit an all-season group (``season`` = 0) per variable, zone and lead group.

    Returns
    -------
    pandas.DataFrame
        One row per node: ``variable, zone, lead_min, lead_max, season, quantile, hist, ref, factor,
        kind, n_values, dry_fraction_hist, dry_fraction_ref, wet_threshold, max_factor, season_kind``.
        ``hist``/``ref`` are the forecast and reference quantiles (unit of the variable); ``factor`` is
        ``ref - hist`` or the capped ``ref / hist`` (NaN on dry forecast nodes).
    """
    kinds = dict(DEFAULT_KINDS, **(kinds or {}))
    if variables is None:
        variables = [v for v in DEFAULT_KINDS if v in forecast.columns and v in reference.columns]
    bad = [v for v in variables if kinds.get(v) not in ("+", "*")]
    if bad:
        raise ExtractError(f"quantile mapping: no kind ('+' or '*') known for {bad}; pass kinds={{name: '+'}}")
    nodes = quantile_nodes(quantiles) if np.isscalar(quantiles) else np.asarray(quantiles, dtype=float)
    if nodes.ndim != 1 or np.any((nodes < 0) | (nodes > 1)) or np.any(np.diff(nodes) <= 0):
        raise ExtractError(f"quantile nodes must increase strictly within [0, 1]; got {nodes}")
    pairs = _pairs(forecast, reference, variables)
    groups = lead_group_of(pairs["lead_days"].to_numpy(), lead_groups)
    pairs = pairs.assign(lead_min=groups[:, 0], lead_max=groups[:, 1])
    rows, labels = season_copies(pairs["date"], season, month_window, doy_window, doy_step)
    expanded = pairs.iloc[rows].assign(season=labels)
    if pooled and season != "none":
        expanded = pd.concat([expanded, pairs.assign(season=0)], ignore_index=True)
    tables = []
    for var in variables:
        tables.append(
            _fit_one(
                expanded,
                var,
                kinds[var],
                nodes,
                threshold=wet_day_threshold if var in wet_variables else None,
                max_factor=max_factor,
                min_values=min_values,
            )
        )
    table = pd.concat(tables, ignore_index=True) if tables else pd.DataFrame(columns=[*KEYS, "quantile"])
    table["season_kind"] = season
    return table


def _group_quantiles(values: np.ndarray, group: np.ndarray, n: np.ndarray, nodes: np.ndarray) -> np.ndarray:
    """Type-7 (linear) quantiles of ``values`` per group code (0..len(n)-1): (groups, nodes)."""
    order = np.lexsort((values, group))
    srt = values[order]
    start = np.concatenate([[0], np.cumsum(n)[:-1]])
    pos = nodes[None, :] * (n[:, None] - 1)
    lo = np.floor(pos).astype(np.int64)
    frac = pos - lo
    hi = np.minimum(lo + 1, n[:, None] - 1)
    a, b = srt[start[:, None] + lo], srt[start[:, None] + hi]
    return a + (b - a) * frac


def _fit_one(
    frame: pd.DataFrame,
    var: str,
    kind: str,
    nodes: np.ndarray,
    *,
    threshold: float | None,
    max_factor: float,
    min_values: int,
) -> pd.DataFrame:
    keys = ["zone", "lead_min", "lead_max", "season"]
    sub = frame[[*keys, var, f"{var}__ref"]].dropna()
    grouped = sub.groupby(keys, sort=True)
    code = grouped.ngroup().to_numpy()
    counts = grouped.size()
    keep = (counts >= min_values).to_numpy()
    if not keep.any():
        return pd.DataFrame(columns=["variable", *keys, "quantile", "hist", "ref", "factor"])
    # renumber the kept groups 0..k-1 and drop the others
    new = np.full(keep.size, -1)
    new[keep] = np.arange(keep.sum())
    code = new[code]
    use = code >= 0
    code = code[use]
    hist = sub[var].to_numpy(float)[use]
    ref = sub[f"{var}__ref"].to_numpy(float)[use]
    if threshold is not None:
        ref = np.where(ref < threshold, 0.0, ref)
    n = counts.to_numpy()[keep]
    hq = _group_quantiles(hist, code, n, nodes)
    rq = _group_quantiles(ref, code, n, nodes)
    if threshold is not None:
        p0h = np.bincount(code, weights=(hist < threshold).astype(float)) / n
        p0r = np.bincount(code, weights=(ref < threshold).astype(float)) / n
    else:
        p0h = p0r = np.full(n.size, np.nan)
    if kind == "+":
        factor = rq - hq
    else:
        floor = threshold if threshold is not None else 0.0
        with np.errstate(divide="ignore", invalid="ignore"):
            factor = np.where((hq > 0) & (hq >= floor), rq / hq, np.nan)
        factor = np.minimum(factor, max_factor)
    nq = nodes.size
    key_frame = counts.reset_index(name="n_values").loc[keep].reset_index(drop=True)
    out = key_frame.loc[np.repeat(np.arange(len(key_frame)), nq)].reset_index(drop=True)
    out.insert(0, "variable", var)
    out.insert(len(keys) + 1, "quantile", np.tile(nodes, len(key_frame)))
    out.insert(len(keys) + 2, "hist", hq.ravel())
    out.insert(len(keys) + 3, "ref", rq.ravel())
    out["dry_fraction_hist"] = np.repeat(p0h, nq)
    out["dry_fraction_ref"] = np.repeat(p0r, nq)
    out["factor"] = factor.ravel()
    out["kind"] = kind
    out["wet_threshold"] = np.nan if threshold is None else threshold
    out["max_factor"] = max_factor
    return out


def _row_uniform(zone: np.ndarray, date: pd.Series, lead: np.ndarray) -> np.ndarray:
    """Reproducible pseudo-random numbers in [0, 1) from (zone, date, lead) alone (splitmix64 hash)."""
    zcode = pd.util.hash_array(np.asarray(zone, dtype=object)).astype(np.uint64)
    day = pd.DatetimeIndex(date).asi8.astype(np.uint64)
    x = zcode ^ (day * np.uint64(0x9E3779B97F4A7C15)) ^ (np.asarray(lead, dtype=np.uint64) << np.uint64(40))
    with np.errstate(over="ignore"):
        x = (x ^ (x >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        x = (x ^ (x >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        x = x ^ (x >> np.uint64(31))
    return (x >> np.uint64(11)).astype(np.float64) / float(2**53)


def _adjust_group(x: np.ndarray, u: np.ndarray, tab: Mapping[str, np.ndarray], kind: str) -> np.ndarray:
    """Adjust the values ``x`` of one group with its quantile table columns (sorted by quantile)."""
    p, hq, rq, af = tab["quantile"], tab["hist"], tab["ref"], tab["factor"]
    thr = tab["wet_threshold"][0]
    out = np.full_like(x, np.nan)
    ok = ~np.isnan(x)
    if kind == "+":
        out[ok] = x[ok] + np.interp(x[ok], hq, af)
        return out
    wet_knot = ~np.isnan(af)
    if not wet_knot.any():  # the fitted forecasts were never wet: nothing to map onto
        out[ok] = x[ok]
        return out
    if np.isnan(thr):
        out[ok] = x[ok] * np.interp(x[ok], hq[wet_knot], af[wet_knot])
        return out
    wet = ok & (x >= thr)
    out[wet] = x[wet] * np.interp(x[wet], hq[wet_knot], af[wet_knot])
    dry = ok & ~wet
    p0h, p0r = tab["dry_fraction_hist"][0], tab["dry_fraction_ref"][0]
    out[dry] = 0.0
    if p0h > p0r and dry.any():
        # Themessl et al. (2012): rank the dry forecast day within the forecasts' dry share ...
        dknot = ~wet_knot
        if dknot.any():
            lowest = hq[dknot].min()
            rank = np.interp(x[dry], np.concatenate([[lowest], hq[dknot]]), np.concatenate([[0.0], p[dknot]]))
            # ... where sub-threshold values tie with the lowest knot (e.g. exact zeros) use the row's uniform
            above = p[dknot][hq[dknot] > lowest]
            tied_top = above.min() if above.size else p0h  # upper end of the probability the tie occupies
            rank = np.where(x[dry] <= lowest, u[dry] * tied_top, rank)
        else:
            rank = u[dry] * p0h
        uu = np.minimum(rank, p0h)
        value = np.interp(uu, p, rq)
        out[dry] = np.where(uu > p0r, np.maximum(value, thr), 0.0)
    return out


def apply_quantile_mapping(
    forecast: pd.DataFrame,
    table: pd.DataFrame,
    *,
    variables: Sequence[str] | None = None,
) -> pd.DataFrame:
    """Adjust daily forecast drivers with a fitted quantile table.

    Parameters
    ----------
    forecast
        ``zone``, ``lead_days``, ``date`` and driver columns (units as at fitting).
    table
        Output of :func:`fit_quantile_mapping` (or the stored ``bias_adjustment`` rows of one fit).
    variables
        Columns to adjust (default: every variable of the table present in ``forecast``).

    Returns
    -------
    pandas.DataFrame
        A copy of ``forecast`` with adjusted driver columns; per variable, ``frame.attrs['fallback']``
        counts the rows that used the pooled all-season group and ``frame.attrs['unadjusted']`` the rows
        left NaN because no group was fitted. Each row goes to the group of its zone, lead and the
        season of its (valid) date: its calendar month, or the nearest day-of-year anchor of the table.
    """
    out = forecast.copy()
    if table.empty:
        raise ExtractError("quantile table is empty: nothing was fitted (too few overlapping values?)")
    season: Season = table["season_kind"].iat[0]
    variables = [v for v in (variables or table["variable"].unique()) if v in forecast.columns]
    idx = table[["lead_min", "lead_max"]].drop_duplicates().to_numpy()
    leads = forecast["lead_days"].to_numpy(int)
    lead_min, lead_max = leads.copy(), leads.copy()
    for lo, hi in idx:
        inside = (leads >= lo) & (leads <= hi)
        lead_min[inside], lead_max[inside] = lo, hi
    keyframe = pd.DataFrame(
        {
            "zone": forecast["zone"].to_numpy(),
            "lead_min": lead_min,
            "lead_max": lead_max,
            "season": season_of(forecast["date"], season, np.sort(table.loc[table["season"] > 0, "season"].unique())),
        }
    )
    u = _row_uniform(forecast["zone"].to_numpy(), forecast["date"], leads)
    fallback, unadjusted = {}, {}
    group_keys = ["zone", "lead_min", "lead_max", "season"]
    for var in variables:
        tv = table[table["variable"] == var].sort_values([*group_keys, "quantile"], kind="stable")
        cols = {c: tv[c].to_numpy(float) for c in _TABLE_NUMBERS}
        where = tv.groupby(group_keys, sort=False).indices
        kind = str(tv["kind"].iat[0]) if len(tv) else "+"
        fitted = tv[group_keys].drop_duplicates().assign(_fit=True)
        keys = keyframe.merge(fitted, on=group_keys, how="left")
        use_pooled = keys["_fit"].isna().to_numpy() & (season != "none")
        keys.loc[use_pooled, "season"] = 0
        fallback[var] = int(use_pooled.sum())
        x = forecast[var].to_numpy(float)
        result = np.full_like(x, np.nan)
        done = np.zeros(len(x), dtype=bool)
        for key, pos in keys.groupby(group_keys, sort=False).indices.items():
            rows = where.get(key)
            if rows is None:
                continue
            tab = {c: v[rows] for c, v in cols.items()}
            result[pos] = _adjust_group(x[pos], u[pos], tab, kind)
            done[pos] = True
        unadjusted[var] = int((~done & ~np.isnan(x)).sum())
        out[var] = result
    out.attrs["fallback"] = fallback
    out.attrs["unadjusted"] = unadjusted
    return out
