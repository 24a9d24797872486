"""Log-log rating-curve load estimator with retransformation-bias correction.

Model (least squares on the sample days with flow > 0)::

    ln L = a + b (ln Q - m) [+ c sin 2 pi t + d cos 2 pi t] [+ e (t - tbar)]

L daily load (kg d-1) = Q x C x 86.4, Q m3 s-1, m the mean ln Q of the samples, t decimal
years. The seasonal and trend terms are opt-in. Back-transforming exp(fit) estimates the
median, not the mean, so it is multiplied by a correction factor:

- Duan (1983) smearing: mean(exp(e_i)) over the residuals e_i;
- Ferguson (1986): exp(s^2 / 2), s^2 = residual sum of squares / (n - p).

Uncertainty: the standard error of the total load over the record comes from the delta method
on the coefficient covariance s^2 (X'X)^-1 (parameter uncertainty only; day-to-day scatter that
averages out over a year is not added). Daily ``lower``/``upper`` are 95 % prediction intervals
of a single day's load, exp(fit +- t_{0.975, n-p} sqrt(s^2 + x' Cov x)). Days with zero flow have
zero load; days without flow are missing. Pure: no file I/O.
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import pandas as pd
from scipy import stats

from lakefeed.exceptions import ExtractError
from lakefeed.extract.load_estimation._common import (
    Z95,
    LoadEstimate,
    Period,
    align,
    period_codes,
    period_sums,
    periods_frame,
    standard_warnings,
    summarise,
)
from lakefeed.extract.loads import load_factor

__all__ = ["RatingFit", "design_matrix", "fit_rating_curve", "rating_curve_load"]


def decimal_year(dates: pd.DatetimeIndex) -> np.ndarray:
    """Dates as decimal years (year + (day of year - 1) / days in year)."""
    days_in_year = np.where(dates.is_leap_year, 366.0, 365.0)
    return dates.year.to_numpy() + (dates.dayofyear.to_numpy() - 1) / days_in_year


def design_matrix(
    ln_q: np.ndarray, t: np.ndarray, *, ln_q_mean: float, t_mean: float, seasonal: bool, trend: bool
) -> np.ndarray:
    """Columns: 1, ln Q - m, [sin 2 pi t, cos 2 pi t], [t - tbar]."""
    cols = [np.ones_like(ln_q), ln_q - ln_q_mean]
    if seasonal:
        cols += [np.sin(2 * np.pi * t), np.cos(2 * np.pi * t)]
    if trend:
        cols.append(t - t_mean)
    return np.column_stack(cols)


class RatingFit:
    """A fitted rating curve: coefficients, residuals, s^2, covariance and correction factors."""

    def __init__(self, x: np.ndarray, y: np.ndarray) -> None:
        n, p = x.shape
        if n <= p:
            raise ExtractError(f"rating curve: {n} usable samples for {p} coefficients; need more than {p}")
        self.coef, *_ = np.linalg.lstsq(x, y, rcond=None)
        self.residuals = y - x @ self.coef
        self.n, self.p = n, p
        self.s2 = float(self.residuals @ self.residuals / (n - p))
        self.xtx_inv = np.linalg.inv(x.T @ x)
        self.cov = self.s2 * self.xtx_inv

    @property
    def duan(self) -> float:
        """Duan (1983) smearing factor: mean of exp(residuals)."""
        return float(np.mean(np.exp(self.residuals)))

    @property
    def ferguson(self) -> float:
        """Ferguson (1986) factor: exp(s^2 / 2)."""
        return float(np.exp(self.s2 / 2.0))

    def correction(self, kind: Literal["duan", "ferguson", "none"]) -> float:
        if kind == "duan":
            return self.duan
        if kind == "ferguson":
            return self.ferguson
        if kind == "none":
            return 1.0
        raise ExtractError(f"rating curve correction must be 'duan', 'ferguson' or 'none', got {kind!r}")


def fit_rating_curve(load: np.ndarray, flow: np.ndarray, x: np.ndarray) -> RatingFit:
    """Fit ln load on the design matrix ``x`` (rows = samples with flow > 0 and load > 0)."""
    return RatingFit(x, np.log(load))


def rating_curve_load(
    samples: pd.DataFrame,
    flow: pd.Series,
    *,
    correction: Literal["duan", "ferguson", "none"] = "duan",
    seasonal: bool = False,
    trend: bool = False,
    period: Period = "year",
    min_samples: dict[str, int] | None = None,
) -> LoadEstimate:
    """Daily loads from a log-log rating curve with Duan or Ferguson correction.

    Parameters
    ----------
    samples
        ``date``, ``concentration`` (mg L-1), optional ``censored``; one row per date.
    flow
        Daily discharge, m3 s-1, DatetimeIndex.
    correction
        ``duan`` (default), ``ferguson`` or ``none`` (biased; for comparison only).
    seasonal, trend
        Add sine/cosine of the time of year and a linear trend in years.

    Returns
    -------
    LoadEstimate: daily loads (kg d-1) with 95 % prediction intervals, the total's delta-method SE.
    """
    a = align(samples, flow)
    kf = load_factor()
    method = f"rating_curve_{correction}"
    warnings = standard_warnings(a, "rating_curve", min_samples)
    sample_load = a.conc * a.sample_flow * kf
    use = (a.sample_flow > 0) & (sample_load > 0)
    if (~use).any():
        warnings.append(f"{int((~use).sum())} sample(s) with zero flow or zero concentration left out of the fit")
    t_all = decimal_year(a.days)
    ln_q_s = np.log(a.sample_flow[use])
    m, tbar = float(ln_q_s.mean()), float(t_all[a.sample_pos[use]].mean())
    opts = {"ln_q_mean": m, "t_mean": tbar, "seasonal": seasonal, "trend": trend}
    x_s = design_matrix(ln_q_s, t_all[a.sample_pos[use]], **opts)
    fit = fit_rating_curve(sample_load[use], a.sample_flow[use], x_s)
    cf = fit.correction(correction)
    positive = a.flow > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        x_d = design_matrix(np.log(np.where(positive, a.flow, 1.0)), t_all, **opts)
    eta = x_d @ fit.coef
    median = np.where(positive, np.exp(eta), 0.0)
    daily = np.where(np.isnan(a.flow), np.nan, median * cf)
    var_fit = np.einsum("ij,jk,ik->i", x_d, fit.cov, x_d)
    tq = float(stats.t.ppf(0.975, fit.n - fit.p))
    half = tq * np.sqrt(fit.s2 + var_fit)
    lower = np.where(positive, np.exp(eta - half), 0.0)
    upper = np.where(positive, np.exp(eta + half), 0.0)
    lower[np.isnan(a.flow)] = np.nan
    upper[np.isnan(a.flow)] = np.nan
    # delta method: d(total)/d(coef) = sum_d Lhat_d x_d (the correction factor held fixed)
    codes, bounds = period_codes(a.days, period)
    nper = len(bounds)
    contrib = np.where(np.isnan(daily), 0.0, daily)[:, None] * x_d
    grad_p = np.stack([contrib[codes == p].sum(axis=0) for p in range(nper)])
    se_p = np.sqrt(np.einsum("ij,jk,ik->i", grad_p, fit.cov, grad_p))
    pk = period_sums(daily, codes, nper)[0]
    g = contrib.sum(axis=0)
    se = float(np.sqrt(g @ fit.cov @ g))
    total = float(np.sum(daily))
    details = {"a": float(fit.coef[0] - fit.coef[1] * m), "b": float(fit.coef[1]), "s2": fit.s2, "factor": cf}
    details.update({"duan": fit.duan, "ferguson": fit.ferguson, "n_fit": float(fit.n)})
    return summarise(
        a,
        daily,
        lower,
        upper,
        periods_frame(bounds, codes, a, pk, se_p, pk - Z95 * se_p, pk + Z95 * se_p),
        method=method,
        kind="daily",
        se_kg=se,
        lower_kg=total - Z95 * se,
        upper_kg=total + Z95 * se,
        uncertainty="standard error of the total by the delta method (coefficient covariance), +-1.96 SE",
        warnings=warnings,
        details=details,
    )
