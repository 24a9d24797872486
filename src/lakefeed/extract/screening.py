"""Acceptance of AOI scene statistics and outlier screening of each AOI's series (pure pandas/numpy).

Takes the observation table (one row per AOI and scene, with the columns of
:data:`lakefeed.extract.scene_stats.STAT_COLUMNS`, ``aoi``, ``sensor``, ``time`` and ``reason``) and
returns the same rows with ``accepted``, ``reason`` and ``outlier``. Rejected rows are kept with the
reason; outliers are flagged, never deleted. Must not open files.

Acceptance (common match-up practice after Bailey & Werdell 2006, Remote Sens. Environ. 102): the valid
fraction of the AOI reaches ``min_valid_fraction`` (default 0.5), at least ``min_valid_pixels`` are
valid, and the coefficient of variation does not exceed ``max_cv``. A too-heterogeneous AOI (cv above
the limit) is rejected with its reason, so it can be found and re-admitted by the user.

Outliers: a leave-one-out Hampel filter (rolling median / MAD) on ln(median) over a centred time
window: a value is an outlier when ``|x - m| > threshold * max(1.4826 * MAD, min_scale)``, ``m`` and
``MAD`` being the median and the median absolute deviation of the OTHER accepted values of the same AOI
and sensor within ``window_days`` (at least ``min_points`` of them, else never flagged); ``min_scale``
is 0.2 in ln units by default (lakefeed's choice: real day-to-day changes of 20 % are common). By default
``m`` is the value at the point's time of a local Theil-Sen line through those other values (when they
lie on both sides), and the MAD that of their residuals from the line: a spike on a steep bloom rise or
decline is then not hidden by the trend. Sensors are screened separately because their biases differ
before harmonisation.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

__all__ = ["accept", "flag_outliers", "hampel"]

#: Scale factor turning a MAD into a standard deviation for normal data (common practice).
MAD_TO_SIGMA = 1.4826


def accept(
    obs: pd.DataFrame,
    *,
    min_valid_fraction: float = 0.5,
    min_valid_pixels: int = 5,
    max_cv: float | None = 1.0,
) -> pd.DataFrame:
    """Decide acceptance of each AOI-scene row; return a copy with ``accepted`` and ``reason``.

    A non-empty ``reason`` already present (unreadable scene, AOI outside the scene) is kept and the
    row is not accepted. Otherwise the reasons found are joined with "; ".
    """
    out = obs.copy()
    prior = out["reason"].fillna("").astype(str) if "reason" in out else pd.Series("", index=out.index)
    n = out["n_valid"].fillna(0).astype(int)
    vf = out["valid_fraction"].astype(float)
    cv = out["cv"].astype(float)
    parts = [
        np.where(n == 0, "no valid pixel (nodata, bad quality or out of range)", ""),
        np.where(
            (n > 0) & (vf < min_valid_fraction),
            "valid fraction " + vf.round(3).astype(str) + f" < {min_valid_fraction:g}",
            "",
        ),
        np.where((n > 0) & (n < min_valid_pixels), "valid pixels " + n.astype(str) + f" < {min_valid_pixels}", ""),
    ]
    if max_cv is not None:
        parts.append(np.where(cv > max_cv, "heterogeneous AOI: cv " + cv.round(3).astype(str) + f" > {max_cv:g}", ""))
    found = pd.Series(["; ".join(p for p in row if p) for row in zip(*parts, strict=True)], index=out.index)
    out["reason"] = prior.where(prior != "", found)
    out["accepted"] = out["reason"] == ""
    return out


def hampel(
    days: np.ndarray,
    values: np.ndarray,
    *,
    window_days: float,
    threshold: float,
    min_points: int = 3,
    min_scale: float = 0.0,
    trend: bool = False,
) -> np.ndarray:
    """Outlier flags of one irregular series by a leave-one-out Hampel filter (vectorised).

    For each value, ``m`` and ``MAD`` are the median and the median absolute deviation of the OTHER
    finite, not yet flagged values within the centred window; values above the threshold that are the most
    extreme of their window are flagged first, then the others are re-scored without them, until none is
    left; a value is an outlier when
    ``|x - m| > threshold * max(1.4826 * MAD, min_scale)``. Leaving the value out keeps a spike from
    widening its own yardstick, which matters on sparse satellite series.

    Parameters
    ----------
    days
        Times as float days, sorted ascending.
    values
        Values (already transformed, e.g. logarithms); NaN never flagged and ignored in windows.
    window_days
        Full width of the centred window (days).
    threshold
        Multiple of the robust standard deviation beyond which a value is an outlier.
    min_points
        Minimum number of other finite values in the window for a decision.
    min_scale
        Floor of the robust standard deviation (units of ``values``): small windows can give a tiny MAD
        by chance, which would flag ordinary variability.
    trend
        Measure deviations from a local robust straight line instead of the local median: the Theil-Sen
        line (median of pairwise slopes, median intercept; Sen 1968, J. Am. Stat. Assoc. 63) through the
        other values of the window, used only when they lie on both sides of the value (no
        extrapolation). On a steep rise or decline the plain median and MAD mix the trend into the
        yardstick and miss a spike; the line's residuals do not.
    """
    t = np.asarray(days, dtype=np.float64)
    x = np.asarray(values, dtype=np.float64)
    if t.size == 0:
        return np.zeros(0, dtype=bool)
    half = window_days / 2.0
    lo = np.searchsorted(t, t - half, side="left")
    hi = np.searchsorted(t, t + half, side="right")
    width = int((hi - lo).max())
    idx = lo[:, None] + np.arange(width)[None, :]
    others = (idx < hi[:, None]) & (idx != np.arange(t.size)[:, None])
    pos = np.where(others, np.minimum(idx, t.size - 1), 0)
    inwin = idx < hi[:, None]
    flags = np.zeros(t.size, dtype=bool)
    # Sequential: flag the values that exceed the threshold and are the most extreme within their own
    # window, drop them from the others' windows, repeat. A spike then cannot make its neighbours look
    # like outliers (swamping) nor hide a second spike (masking); each round flags at least one value.
    for _ in range(t.size):
        work = np.where(flags, np.nan, x)
        score = _scores(t, work, np.where(others, work[pos], np.nan), pos, min_points, min_scale, trend)
        score[flags] = 0.0
        local_max = score >= np.where(inwin, score[np.minimum(idx, t.size - 1)], 0.0).max(axis=1)
        new = (score > threshold) & local_max
        if not new.any():
            break
        flags |= new
    return flags


def _scores(
    t: np.ndarray, x: np.ndarray, win: np.ndarray, pos: np.ndarray, min_points: int, min_scale: float, trend: bool
) -> np.ndarray:
    """|x - m| / scale per point (0 where no decision is possible); see :func:`hampel`."""
    count = np.isfinite(win).sum(axis=1)
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # windows without other values
        med = np.nanmedian(win, axis=1)
        resid = win - med[:, None]
        if trend:
            level, resid_t = _theil_sen(t, win, pos)
            use = np.isfinite(level)
            med = np.where(use, level, med)
            resid = np.where(use[:, None], resid_t, resid)
        mad = np.nanmedian(np.abs(resid), axis=1)
        scale = np.maximum(MAD_TO_SIGMA * mad, min_scale)
        score = np.abs(x - med) / scale
    ok = (count >= min_points) & (scale > 0) & np.isfinite(score)
    return np.where(ok, score, 0.0)


def _theil_sen(t: np.ndarray, win: np.ndarray, pos: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per row of ``win`` (values of the other points, NaN = none; ``pos`` their indices into ``t``): the
    Theil-Sen line's value at the row's own time, and the residuals of the other points from it. NaN where
    the other points do not lie on both sides in time or have fewer than two distinct times."""
    n = win.shape[0]
    dt = np.where(np.isfinite(win), t[pos] - t[:, None], np.nan)  # time relative to the row's point
    both = (np.nanmin(dt, axis=1) < 0) & (np.nanmax(dt, axis=1) > 0)
    ddt = dt[:, :, None] - dt[:, None, :]
    dx = win[:, :, None] - win[:, None, :]
    upper = np.triu(np.ones((win.shape[1], win.shape[1]), dtype=bool), k=1)
    slopes = np.where(upper & (ddt != 0), dx / np.where(ddt != 0, ddt, 1.0), np.nan).reshape(n, -1)
    slope = np.nanmedian(slopes, axis=1)
    level = np.nanmedian(win - slope[:, None] * dt, axis=1)  # intercept at the row's own time
    level = np.where(both & np.isfinite(slope), level, np.nan)
    return level, win - (level[:, None] + slope[:, None] * dt)


def flag_outliers(
    obs: pd.DataFrame,
    *,
    window_days: float = 31,
    threshold: float = 3.5,
    min_points: int = 3,
    min_scale: float = 0.2,
    trend: bool = True,
    value: str = "median",
    by: tuple[str, ...] = ("aoi", "sensor"),
) -> pd.Series:
    """Outlier flags (bool Series aligned with ``obs``) for the accepted rows, per AOI and sensor.

    The filter works on ln(``value``) (chlorophyll-a is roughly log-normal; common practice) over
    ``time``; rows not accepted are never flagged. ``min_scale`` (default 0.2 in ln units, about 20 %,
    lakefeed's choice) floors the robust standard deviation. ``trend`` (default True) measures deviations
    from a local Theil-Sen line, so a spike on a steep rise or decline is still caught. See :func:`hampel`.
    """
    flags = pd.Series(False, index=obs.index)
    ok = obs["accepted"].astype(bool) & (obs[value] > 0)
    sub = obs.loc[ok, [*by, "time", value]]
    if sub.empty:
        return flags
    t = pd.to_datetime(sub["time"], utc=True)
    sub = sub.assign(_days=(t - pd.Timestamp("1970-01-01", tz="UTC")) / pd.Timedelta(days=1))
    for _, g in sub.groupby(list(by), sort=False):
        g = g.sort_values("_days")
        f = hampel(
            g["_days"].to_numpy(),
            np.log(g[value].to_numpy(dtype=np.float64)),
            window_days=window_days,
            threshold=threshold,
            min_points=min_points,
            min_scale=min_scale,
            trend=trend,
        )
        flags.loc[g.index] = f
    return flags
