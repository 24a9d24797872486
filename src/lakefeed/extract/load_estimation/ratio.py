"""Beale's bias-corrected ratio estimator of the mean daily load, with its mean square error.

For each period (calendar year or the whole record) and, optionally, each stratum (season or
flow class), with n sample days (daily load l_i = Q_i C_i 86.4 kg d-1, flow q_i), N days and mean
daily flow Qbar::

    mu  = Qbar (lbar / qbar) [1 + theta S_lq / (lbar qbar)] / [1 + theta S_qq / qbar^2]
    MSE = Qbar^2 (lbar/qbar)^2 { theta   [S_ll/lbar^2 + S_qq/qbar^2 - 2 S_lq/(lbar qbar)]
                               + theta^2 [2 S_qq^2/qbar^4 - 4 S_qq S_lq/(qbar^3 lbar)
                                          + S_lq^2/(lbar^2 qbar^2) + S_ll S_qq/(lbar^2 qbar^2)] }

S the sample (co)variances (divisor n - 1). ``theta = 1/n`` by default (infinite population);
``finite_population=True`` uses theta = 1/n - 1/N. The load of a cell is mu x N (kg), its standard
error N sqrt(MSE); cells add up, variances too. A cell with fewer than ``min_cell`` samples takes
the ratio of its whole period (or of the record), with a warning. The daily series spreads each
cell's load in proportion to daily flow. Pure: no file I/O.
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import pandas as pd

from lakefeed.exceptions import ExtractError
from lakefeed.extract.load_estimation._common import (
    Z95,
    LoadEstimate,
    Period,
    align,
    period_codes,
    periods_frame,
    standard_warnings,
    summarise,
)
from lakefeed.extract.loads import load_factor

__all__ = ["beale_load", "beale_mean"]

#: Meteorological seasons by month (DJF, MAM, JJA, SON).
SEASON_OF_MONTH = np.array(["", "DJF", "DJF", "MAM", "MAM", "MAM", "JJA", "JJA", "JJA", "SON", "SON", "SON", "DJF"])


def beale_mean(
    load: np.ndarray, flow: np.ndarray, mean_flow: float, *, n_days: int | None = None, finite_population: bool = False
) -> tuple[float, float]:
    """Beale's estimate of the mean daily load and its mean square error (module docstring).

    Parameters
    ----------
    load, flow
        Daily load (kg d-1) and flow (m3 s-1) on the n sampled days (n >= 2).
    mean_flow
        Mean daily flow over all days of the period, m3 s-1.
    n_days
        Days in the period (needed for ``finite_population``).

    Returns
    -------
    (mean daily load kg d-1, MSE in (kg d-1)^2)
    """
    load, flow = np.asarray(load, float), np.asarray(flow, float)
    n = len(load)
    if n < 2:
        raise ExtractError(f"Beale's estimator needs at least 2 samples, got {n}")
    lbar, qbar = load.mean(), flow.mean()
    if qbar <= 0 or lbar <= 0:
        return float(mean_flow * (lbar / qbar) if qbar > 0 else 0.0), float("nan")
    s_lq = np.cov(load, flow, ddof=1)[0, 1]
    s_qq, s_ll = flow.var(ddof=1), load.var(ddof=1)
    theta = 1.0 / n
    if finite_population:
        if n_days is None:
            raise ExtractError("finite_population needs n_days")
        theta = 1.0 / n - 1.0 / n_days
    mu = mean_flow * (lbar / qbar) * (1 + theta * s_lq / (lbar * qbar)) / (1 + theta * s_qq / qbar**2)
    first = s_ll / lbar**2 + s_qq / qbar**2 - 2 * s_lq / (lbar * qbar)
    second = (
        2 * s_qq**2 / qbar**4
        - 4 * s_qq * s_lq / (qbar**3 * lbar)
        + s_lq**2 / (lbar**2 * qbar**2)
        + s_ll * s_qq / (lbar**2 * qbar**2)
    )
    mse = mean_flow**2 * (lbar / qbar) ** 2 * (theta * first + theta**2 * second)
    return float(mu), float(max(mse, 0.0))  # the second-order approximation can dip below 0 when l is exactly ~ q


def _strata(
    days: pd.DatetimeIndex, flow: np.ndarray, codes: np.ndarray, strata: str | None, split: float
) -> np.ndarray:
    """Stratum label per day."""
    if strata is None:
        return np.full(len(days), "all", dtype=object)
    if strata == "season":
        return SEASON_OF_MONTH[days.month.to_numpy()].astype(object)
    if strata == "flow":
        labels = np.full(len(days), "low", dtype=object)
        for p in np.unique(codes):
            sel = codes == p
            thr = np.nanquantile(flow[sel], split)
            labels[sel & (flow > thr)] = "high"
        return labels
    raise ExtractError(f"strata must be None, 'season' or 'flow', got {strata!r}")


def beale_load(
    samples: pd.DataFrame,
    flow: pd.Series,
    *,
    period: Period = "year",
    strata: Literal["season", "flow"] | None = None,
    flow_split: float = 0.8,
    finite_population: bool = False,
    min_cell: int = 3,
    min_samples: dict[str, int] | None = None,
) -> LoadEstimate:
    """Period loads by Beale's ratio estimator, optionally stratified by season or flow class.

    Parameters
    ----------
    samples, flow
        Samples (``date``, ``concentration`` mg L-1, ``censored``) and daily flow (m3 s-1).
    period
        ``year`` (one estimate per calendar year) or ``record``.
    strata
        None, ``season`` (DJF/MAM/JJA/SON) or ``flow`` (days above the ``flow_split`` quantile of the
        period's daily flow are "high", the rest "low").
    finite_population
        Use theta = 1/n - 1/N instead of 1/n.

    Returns
    -------
    LoadEstimate (kind ``period``): one row per period and stratum; SE = sqrt of the summed MSEs.
    """
    a = align(samples, flow)
    kf = load_factor()
    method = "beale" if strata is None else f"beale_{strata}"
    warnings = standard_warnings(a, "beale", min_samples)
    codes, bounds = period_codes(a.days, period)
    labels = _strata(a.days, a.flow, codes, strata, flow_split)
    sload = a.conc * a.sample_flow * kf
    scode, slab = codes[a.sample_pos], labels[a.sample_pos]
    record_mu, record_mse = beale_mean(sload, a.sample_flow, float(np.nanmean(a.flow))) if a.n >= 2 else (0, 0)
    record_ratio = record_mu / float(np.nanmean(a.flow))
    rows: list[dict] = []
    daily = np.full(len(a.days), np.nan)
    for p, (start, end) in enumerate(bounds):
        for lab in sorted(set(labels[codes == p])):
            cell = (codes == p) & (labels == lab)
            scell = (scode == p) & (slab == lab)
            q_cell = a.flow[cell]
            valid = ~np.isnan(q_cell)
            n_days, qbar_all = int(cell.sum()), float(np.nanmean(q_cell)) if valid.any() else np.nan
            if scell.sum() >= min_cell:
                mu, mse = beale_mean(
                    sload[scell], a.sample_flow[scell], qbar_all, n_days=n_days, finite_population=finite_population
                )
            else:
                fallback = (scode == p) if (scode == p).sum() >= min_cell else None
                if fallback is not None:
                    pq = a.flow[codes == p]
                    mu_p, mse_p = beale_mean(sload[fallback], a.sample_flow[fallback], float(np.nanmean(pq)))
                    ratio, rel = mu_p / float(np.nanmean(pq)), mse_p / max(mu_p, 1e-300) ** 2
                    src = "its period"
                else:
                    ratio, rel, src = record_ratio, record_mse / max(record_mu, 1e-300) ** 2, "the whole record"
                mu, mse = qbar_all * ratio, rel * (qbar_all * ratio) ** 2
                warnings.append(
                    f"{start:%Y-%m-%d}..{end:%Y-%m-%d} stratum {lab!r}: {int(scell.sum())} sample(s) < {min_cell}; "
                    f"the ratio of {src} is used"
                )
            load_kg = mu * n_days if valid.all() else np.nan
            se_kg = np.sqrt(mse) * n_days
            # spread over the days in proportion to flow: l_d = Q_d mu / Qbar
            daily[cell] = a.flow[cell] * (mu / qbar_all if qbar_all > 0 else 0.0)
            rows.append(
                {
                    "start": start,
                    "end": end,
                    "stratum": lab,
                    "days": n_days,
                    "n": int(scell.sum()),
                    "load": load_kg,
                    "se": se_kg,
                }
            )
    load = np.array([r["load"] for r in rows], float)
    se = np.array([r["se"] for r in rows], float)
    periods = periods_frame(
        [(r["start"], r["end"]) for r in rows],
        codes,
        a,
        load,
        se,
        load - Z95 * se,
        load + Z95 * se,
        stratum=[r["stratum"] for r in rows] if strata is not None else None,
        days=np.array([r["days"] for r in rows]),
        n_samples=np.array([r["n"] for r in rows]),
    )
    total_se = float(np.sqrt(np.nansum(se**2)))
    total = float(np.sum(load))
    rel = np.where(daily > 0, total_se / total if total > 0 else 0.0, 0.0)
    return summarise(
        a,
        daily,
        daily * (1 - Z95 * rel),
        daily * (1 + Z95 * rel),
        periods,
        method=method,
        kind="period",
        se_kg=total_se,
        lower_kg=total - Z95 * total_se,
        upper_kg=total + Z95 * total_se,
        uncertainty="root mean square error of Beale's estimator (theta = "
        + ("1/n - 1/N" if finite_population else "1/n")
        + "), +-1.96 SE",
        warnings=warnings,
    )
