"""Sensor harmonisation and inverse-variance fusion of same-day observations (pure pandas/numpy/scipy).

Takes screened observations (columns ``aoi``, ``sensor``, ``date`` (local calendar date), ``median``,
``accepted``, ``outlier``, relative uncertainty) and returns: the matchups between each sensor and the
reference sensor, the fitted bias per sensor with its statistics, the adjusted values, and the fused
daily values. Must not open files.

Bias models (fitted on accepted, non-outlier matchups of the same AOI):

- ``ratio``: sensor = ratio x reference; ``ln ratio`` is the mean of ``ln(sensor) - ln(reference)``
  (the geometric-mean ratio), its standard error ``sd / sqrt(n)``; the ratio's standard error by the
  delta method (``ratio x se_ln``); ``r2`` is the squared correlation of the logarithms.
- ``linear``: ordinary least squares sensor = intercept + slope x reference (scipy ``linregress``);
  adjusted = (value - intercept) / slope.

Matchup screening (on by default, ``trim`` = 3.5): a pair whose log ratio ``ln(sensor) - ln(reference)``
lies more than ``trim`` robust standard deviations (1.4826 x MAD) from the median log ratio is left out
of the fit and counted in ``n_excluded``: one undetected outlier scene of either sensor would otherwise
pull the bias (common match-up practice trims outliers, Bailey & Werdell 2006, Remote Sens. Environ. 102).
With fewer than ``min_matchups`` matchups left the sensor is unadjusted and flagged in ``note``.

Fusion: for each AOI and local date, the inverse-variance weighted mean of the adjusted values with
weights ``w_i = 1 / sigma_i^2``; its 1-sigma uncertainty is ``(sum w_i)^-1/2`` (standard result for
independent errors; from memory of Taylor, An Introduction to Error Analysis, 2nd ed., ch. 7).
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import pandas as pd
from scipy import stats

__all__ = ["BIAS_COLUMNS", "apply_bias", "fit_bias", "fuse_daily", "inverse_variance_mean", "matchups"]

#: Columns of the fitted-bias table (ratio/slope/intercept dimensionless or mg m-3 for intercept).
BIAS_COLUMNS = [
    "sensor",
    "reference",
    "model",
    "n",
    "ratio",
    "ln_ratio",
    "ln_ratio_se",
    "slope",
    "intercept",
    "se",
    "intercept_se",
    "r2",
    "adjusted",
    "note",
    "n_excluded",
]


def _usable(obs: pd.DataFrame, value: str) -> pd.DataFrame:
    ok = obs["accepted"].astype(bool) & (obs[value] > 0)
    if "outlier" in obs:
        ok &= ~obs["outlier"].fillna(False).astype(bool)
    return obs.loc[ok]


def matchups(obs: pd.DataFrame, *, reference: str, window_days: int = 0, value: str = "median") -> pd.DataFrame:
    """Pairs of a sensor's and the reference sensor's values for the same AOI within ``window_days``.

    Several values of one sensor on one AOI and date are combined by their geometric mean first.
    With ``window_days`` > 0 each sensor value is paired with the nearest reference date.

    Returns
    -------
    DataFrame with ``aoi``, ``sensor``, ``date``, ``value``, ``ref_date``, ``ref_value``.
    """
    use = _usable(obs, value)
    daily = (
        use.assign(_ln=np.log(use[value].astype(float)))
        .groupby(["aoi", "sensor", "date"], as_index=False)["_ln"]
        .mean()
        .assign(value=lambda d: np.exp(d["_ln"]))
        .drop(columns="_ln")
    )
    ref = daily[daily["sensor"] == reference].rename(columns={"value": "ref_value"}).drop(columns="sensor")
    other = daily[daily["sensor"] != reference]
    cols = ["aoi", "sensor", "date", "value", "ref_date", "ref_value"]
    if ref.empty or other.empty:
        return pd.DataFrame(columns=cols)
    if window_days == 0:
        m = other.merge(ref.assign(ref_date=ref["date"]), on=["aoi", "date"], how="inner")
        return m[cols].reset_index(drop=True)
    left = other.assign(_t=pd.to_datetime(other["date"])).sort_values("_t")
    right = ref.assign(_t=pd.to_datetime(ref["date"]), ref_date=ref["date"]).drop(columns="date").sort_values("_t")
    m = pd.merge_asof(left, right, on="_t", by="aoi", tolerance=pd.Timedelta(days=window_days), direction="nearest")
    return m.dropna(subset=["ref_value"])[cols].reset_index(drop=True)


def fit_bias(
    pairs: pd.DataFrame,
    *,
    reference: str,
    sensors: list[str],
    model: Literal["ratio", "linear"] = "ratio",
    min_matchups: int = 10,
    trim: float | None = 3.5,
) -> pd.DataFrame:
    """Fit each sensor's bias against the reference sensor; one row per sensor (:data:`BIAS_COLUMNS`).

    The reference sensor gets ratio 1 (slope 1, intercept 0) and ``note`` "reference".
    """
    rows = []
    for sensor in sorted(set(sensors) | {reference}):
        row = dict.fromkeys(BIAS_COLUMNS, np.nan)
        row.update(sensor=sensor, reference=reference, model=model, adjusted=False, note="")
        if sensor == reference:
            row.update(
                n=0, ratio=1.0, ln_ratio=0.0, ln_ratio_se=0.0, slope=1.0, intercept=0.0, se=0.0, note="reference"
            )
            rows.append(row)
            continue
        p = pairs[pairs["sensor"] == sensor]
        keep = _consistent(p, trim)
        row["n_excluded"] = int((~keep).sum())
        p = p[keep]
        n = len(p)
        row["n"] = n
        if n < min_matchups:
            row["note"] = f"too few matchups with {reference} ({n} < {min_matchups}); left unadjusted"
            rows.append(row)
            continue
        x, r = p["value"].to_numpy(float), p["ref_value"].to_numpy(float)
        lx, lr = np.log(x), np.log(r)
        if model == "ratio":
            d = lx - lr
            ln_ratio, ln_se = float(d.mean()), float(d.std(ddof=1) / np.sqrt(n))
            ratio = float(np.exp(ln_ratio))
            r2 = float(np.corrcoef(lx, lr)[0, 1] ** 2) if np.std(lx) > 0 and np.std(lr) > 0 else np.nan
            row.update(ratio=ratio, ln_ratio=ln_ratio, ln_ratio_se=ln_se, se=ratio * ln_se, r2=r2)
        else:
            fit = stats.linregress(r, x)
            row.update(
                slope=float(fit.slope),
                intercept=float(fit.intercept),
                se=float(fit.stderr),
                intercept_se=float(fit.intercept_stderr),
                r2=float(fit.rvalue**2),
            )
            if not fit.slope > 0:
                row["note"] = f"fitted slope {fit.slope:.3g} is not positive; left unadjusted"
                rows.append(row)
                continue
        row["adjusted"] = True
        if row["n_excluded"]:
            row["note"] = f"{row['n_excluded']} inconsistent matchup(s) left out of the fit"
        rows.append(row)
    out = pd.DataFrame(rows, columns=BIAS_COLUMNS)
    out["n"] = out["n"].astype(int)
    out["n_excluded"] = out["n_excluded"].fillna(0).astype(int)
    out["adjusted"] = out["adjusted"].astype(bool)
    return out


def _consistent(pairs: pd.DataFrame, trim: float | None) -> np.ndarray:
    """Pairs whose log ratio lies within ``trim`` robust standard deviations of the median log ratio."""
    d = np.log(pairs["value"].to_numpy(float)) - np.log(pairs["ref_value"].to_numpy(float))
    if trim is None or d.size < 3:
        return np.ones(d.size, dtype=bool)
    med = np.median(d)
    scale = 1.4826 * np.median(np.abs(d - med))
    if not scale > 0:
        return np.ones(d.size, dtype=bool)
    return np.abs(d - med) <= trim * scale


def apply_bias(
    obs: pd.DataFrame, fits: pd.DataFrame, *, value: str = "median", relative_sigma: str = "relative_sigma"
) -> pd.DataFrame:
    """Adjusted values and their 1-sigma uncertainty (same units as ``value``).

    Returns a DataFrame aligned with ``obs`` with ``value`` (adjusted to the reference sensor where the
    sensor's fit is ``adjusted``, else unchanged) and ``sigma`` = value x sqrt(rel^2 + se_fit^2), where
    ``rel`` is the observation's relative uncertainty and ``se_fit`` the relative standard error of the
    adjustment (``ln_ratio_se`` for ratio; slope se / slope for linear).
    """
    f = fits.set_index("sensor").reindex(obs["sensor"].to_numpy())
    adjusted = f["adjusted"].eq(True).to_numpy()  # sensors without a fit: unadjusted
    x = obs[value].to_numpy(dtype=float)
    if (f["model"] == "linear").any():
        lin = (f["model"] == "linear").to_numpy() & adjusted
    else:
        lin = np.zeros(len(obs), dtype=bool)
    rat = adjusted & ~lin
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(rat, x / f["ratio"].to_numpy(float), x)
        out = np.where(lin, (x - f["intercept"].to_numpy(float)) / f["slope"].to_numpy(float), out)
        se_fit = np.where(rat, f["ln_ratio_se"].to_numpy(float), 0.0)
        se_fit = np.where(lin, f["se"].to_numpy(float) / f["slope"].to_numpy(float), se_fit)
    rel = obs[relative_sigma].to_numpy(dtype=float)
    sigma = np.abs(out) * np.sqrt(rel**2 + np.nan_to_num(se_fit) ** 2)
    return pd.DataFrame({"value": out, "sigma": sigma}, index=obs.index)


def inverse_variance_mean(values: np.ndarray, sigmas: np.ndarray) -> tuple[float, float]:
    """Inverse-variance weighted mean of independent values and its 1-sigma uncertainty."""
    w = 1.0 / np.asarray(sigmas, dtype=float) ** 2
    return float((w * np.asarray(values, dtype=float)).sum() / w.sum()), float(w.sum() ** -0.5)


def fuse_daily(obs: pd.DataFrame, *, by: tuple[str, ...] = ("aoi", "date")) -> pd.DataFrame:
    """Fuse the observations of each AOI and local date by inverse-variance weighting.

    Parameters
    ----------
    obs
        Usable observations with ``value``, ``sigma`` (> 0, same units), ``sensor`` and the ``by`` keys.

    Returns
    -------
    DataFrame with the ``by`` keys, ``chla`` (weighted mean), ``chla_uncertainty`` ((sum w)^-1/2),
    ``n_obs`` and ``sensors`` (sorted labels joined with ","), one row per group.
    """
    keys = list(by)
    good = obs[np.isfinite(obs["value"]) & np.isfinite(obs["sigma"]) & (obs["sigma"] > 0)]
    w = 1.0 / good["sigma"].to_numpy(float) ** 2
    frame = good[keys].assign(_w=w, _wx=w * good["value"].to_numpy(float), sensor=good["sensor"].astype(str))
    g = frame.groupby(keys, sort=True)
    out = g.agg(_w=("_w", "sum"), _wx=("_wx", "sum"), n_obs=("_w", "size"))
    out["sensors"] = g["sensor"].agg(lambda s: ",".join(sorted(set(s))))
    out["chla"] = out["_wx"] / out["_w"]
    out["chla_uncertainty"] = out["_w"] ** -0.5
    out = out.reset_index()
    return out[[*keys, "chla", "chla_uncertainty", "n_obs", "sensors"]]
