"""Interpolation and flow-weighted-mean load estimators with bootstrap intervals.

- ``interpolation``: concentration interpolated linearly in time between sample days (held
  constant before the first and after the last sample, with a warning) times the daily flow.
- ``fwmc``: flow-weighted mean concentration of the samples of each period,
  sum(C_i Q_i) / sum(Q_i), times the period's total flow.

Uncertainty: a bootstrap over the samples (resampled with replacement, ``n_boot`` times, fixed
seed) gives 95 % percentile intervals of the daily loads, the period loads and the total; the
reported standard error is the width of that interval / (2 x 1.96), not the bootstrap standard
deviation, which a few near-degenerate resamples (e.g. of a handful of samples) can inflate
many-fold. Takes numpy/pandas, returns
:class:`~lakefeed.extract.load_estimation._common.LoadEstimate`. Pure: no file I/O.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from lakefeed.extract.load_estimation._common import (
    Z95,
    Aligned,
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

__all__ = ["bootstrap_indices", "fwmc_load", "interpolation_load", "summarise_bootstrap"]


def bootstrap_indices(n: int, n_boot: int, seed: int) -> np.ndarray:
    """Sample indices of ``n_boot`` bootstrap resamples of ``n`` samples, shape (n_boot, n), each row sorted."""
    rng = np.random.default_rng(seed)
    return np.sort(rng.integers(0, n, size=(n_boot, n)), axis=1)


def _intervals(boot: np.ndarray, axis: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """95 % percentile interval (lower, upper) and the standard error it implies, (upper - lower) / (2 x 1.96).

    Replicates that are NaN (a resample that could not be fitted) are left out.
    """
    with warnings.catch_warnings():  # days without flow are all-NaN columns: their interval is missing
        warnings.simplefilter("ignore", RuntimeWarning)
        lo, hi = np.nanpercentile(boot, [2.5, 97.5], axis=axis)
        return lo, hi, (hi - lo) / (2 * Z95)


def summarise_bootstrap(
    a: Aligned,
    daily: np.ndarray,
    boot: np.ndarray,
    period: Period,
    *,
    method: str,
    kind: str,
    n_boot: int,
    warnings: list[str],
    details: dict[str, float] | None = None,
) -> LoadEstimate:
    """A :class:`LoadEstimate` from daily loads (kg d-1) and their bootstrap replicates (B x days).

    Daily, per-period and whole-record 95 % percentile intervals and standard errors all come
    from the same replicates; shared by every bootstrap-based estimator.
    """
    lo_d, hi_d, _ = _intervals(boot)
    codes, bounds = period_codes(a.days, period)
    pk = period_sums(daily, codes, len(bounds))[0]
    plo, phi, pse = _intervals(period_sums(boot, codes, len(bounds)))
    lo, hi, se = _intervals(boot.sum(axis=1))
    extra = {"details": details} if details is not None else {}
    return summarise(
        a,
        daily,
        lo_d,
        hi_d,
        periods_frame(bounds, codes, a, pk, pse, plo, phi),
        method=method,
        kind=kind,
        se_kg=float(se),
        lower_kg=float(lo),
        upper_kg=float(hi),
        uncertainty=f"bootstrap over samples ({n_boot} resamples), 95 % percentile interval",
        warnings=warnings,
        **extra,
    )


def interpolation_load(
    samples: pd.DataFrame,
    flow: pd.Series,
    *,
    period: Period = "year",
    min_samples: dict[str, int] | None = None,
    n_boot: int = 500,
    seed: int = 0,
) -> LoadEstimate:
    """Daily load = linearly interpolated concentration x daily flow.

    Parameters
    ----------
    samples
        ``date``, ``concentration`` (mg L-1), optional ``censored``; one row per date.
    flow
        Daily discharge, m3 s-1, DatetimeIndex.
    period
        Rows of the period table: calendar ``year`` or the whole ``record``.

    Returns
    -------
    LoadEstimate with daily loads in kg d-1 and bootstrap 95 % intervals.
    """
    a = align(samples, flow)
    k = load_factor()
    t = np.arange(len(a.days), dtype=float)
    xp = a.sample_pos.astype(float)
    conc = np.interp(t, xp, a.conc)
    daily = conc * a.flow * k
    warnings = standard_warnings(a, "interpolation", min_samples)
    before, after = int(a.sample_pos[0]), int(len(a.days) - 1 - a.sample_pos[-1])
    held = [f"{before} day(s) before the first sample"] if before else []
    held += [f"{after} day(s) after the last sample"] if after else []
    if held:
        warnings.append(f"concentration held constant for {' and '.join(held)}")
    idx = bootstrap_indices(a.n, n_boot, seed)
    boot_conc = np.stack([np.interp(t, xp[i], a.conc[i]) for i in idx])  # loop over replicates, not days
    boot = boot_conc * a.flow * k
    return summarise_bootstrap(
        a, daily, boot, period, method="interpolation", kind="daily", n_boot=n_boot, warnings=warnings
    )


def fwmc_load(
    samples: pd.DataFrame,
    flow: pd.Series,
    *,
    period: Period = "year",
    min_samples: dict[str, int] | None = None,
    n_boot: int = 500,
    seed: int = 0,
) -> LoadEstimate:
    """Period load = flow-weighted mean sample concentration x the period's total flow.

    The daily series spreads each period's load in proportion to daily flow (Q_d x FWMC x 86.4).
    A period without samples takes the whole record's flow-weighted mean concentration (warned).

    Returns
    -------
    LoadEstimate (kind ``period``), loads in kg, daily in kg d-1, bootstrap 95 % intervals.
    """
    a = align(samples, flow)
    kf = load_factor()
    codes, bounds = period_codes(a.days, period)
    nper = len(bounds)
    scode = codes[a.sample_pos]
    warnings = standard_warnings(a, "fwmc", min_samples)

    def fwmc_per_period(conc: np.ndarray, q: np.ndarray, sc: np.ndarray) -> np.ndarray:
        """(B, n) arrays -> (B, nper) flow-weighted means; periods without samples use the record's."""
        cq = np.stack([np.where(sc == p, conc * q, 0.0).sum(axis=-1) for p in range(nper)], axis=-1)
        qq = np.stack([np.where(sc == p, q, 0.0).sum(axis=-1) for p in range(nper)], axis=-1)
        whole = (conc * q).sum(axis=-1, keepdims=True) / q.sum(axis=-1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(qq > 0, cq / qq, whole)

    empty = [f"{bounds[p][0]:%Y-%m-%d}..{bounds[p][1]:%Y-%m-%d}" for p in range(nper) if not (scode == p).any()]
    if empty:
        warnings.append(f"no samples in period(s) {empty}: the record's flow-weighted mean concentration is used")
    fw = fwmc_per_period(a.conc[None, :], a.sample_flow[None, :], scode[None, :])[0]
    daily = a.flow * fw[codes] * kf
    idx = bootstrap_indices(a.n, n_boot, seed)
    bfw = fwmc_per_period(a.conc[idx], a.sample_flow[idx], scode[idx])  # (B, nper)
    boot = a.flow[None, :] * bfw[:, codes] * kf
    return summarise_bootstrap(
        a,
        daily,
        boot,
        period,
        method="fwmc",
        kind="period",
        n_boot=n_boot,
        warnings=warnings,
        details={f"fwmc_mg_l_{bounds[p][0]:%Y}": float(fw[p]) for p in range(nper)},
    )
