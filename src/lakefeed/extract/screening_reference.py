"""Outlier screening made total: the references for values their own sensor's window cannot examine.

Takes the observation table after acceptance (columns ``aoi``, ``sensor``, ``time``, ``median``,
``accepted``) and the fitted sensor biases (:func:`lakefeed.extract.harmonise.fit_bias`); returns per
row whether it is an outlier, whether any rule could examine it (``screened``) and how (``screening``, a
sentence). Must not open files.

The rules, in order (each row is decided by the first that can examine it; a later rule never clears a
flag):

1. the AOI's own-sensor series, leave-one-out robust trend (local Theil-Sen line) over a centred window of
   ``window_days``, widened up to ``max_window_days`` until ``min_points`` other values are in it;
2. the AOI's series of ALL harmonised sensors (values divided by their sensor's fitted bias), the same
   filter and window: a frequent sensor gives a sparse sensor's spike the neighbours it lacks;
3. the AOI's seasonal climatology from earlier years: the harmonised values (or, for a sensor left
   unadjusted, its own values) of the same AOI dated in an earlier calendar year within
   ``max_window_days / 2`` days of the value's day of year (at least ``min_points`` of them); the value is
   an outlier when ``|ln x - median| > threshold * max(1.4826 * MAD, min_scale)`` of those values;
4. otherwise the value is kept and marked ``screened = False`` with the reason.

A rule-2 run also flags values that rule 1 passed (as before: a spike of a sparse sensor may sit among
other sparse values of its own sensor).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from lakefeed.extract.harmonise import apply_bias
from lakefeed.extract.screening import MAD_TO_SIGMA, screen_outliers

__all__ = ["climatology_screen", "cross_sensor_screen", "total_screening"]


def _harmonised_sensors(fits: pd.DataFrame) -> set[str]:
    if fits.empty:
        return set()
    return set(fits.loc[fits["adjusted"].astype(bool) | (fits["sensor"] == fits["reference"]), "sensor"])


def cross_sensor_screen(
    obs: pd.DataFrame,
    fits: pd.DataFrame,
    *,
    window_days: float = 31,
    max_window_days: float | None = 91,
    threshold: float = 3.5,
) -> pd.DataFrame:
    """Screening of each AOI's series of ALL harmonised sensors (values divided by their sensor's fitted
    bias), with the per-sensor filter (:func:`lakefeed.extract.screening.screen_outliers`).

    Rows already flagged or not accepted are neither flagged nor examined; without fits (no reference
    sensor) or with fewer than two harmonised sensors nothing is; sensors left unadjusted are not
    screened here. Returns ``outlier``, ``examined`` and ``window_days`` aligned with ``obs``.
    """
    out = pd.DataFrame({"outlier": False, "examined": False, "window_days": np.nan}, index=obs.index)
    harmonised = _harmonised_sensors(fits)
    use = obs[
        obs["accepted"].astype(bool)
        & ~obs["outlier"].astype(bool)
        & (obs["median"] > 0)
        & obs["sensor"].isin(harmonised)
    ]
    if use["sensor"].nunique() < 2:
        return out
    adjusted = apply_bias(use.assign(relative_sigma=0.0), fits)["value"]
    found = screen_outliers(
        use.assign(median=adjusted),
        window_days=window_days,
        max_window_days=max_window_days,
        threshold=threshold,
        by=("aoi",),
    )
    out.loc[found.index] = found
    return out.astype({"outlier": bool, "examined": bool, "window_days": float})


def climatology_screen(
    days: np.ndarray,
    values: np.ndarray,
    groups: np.ndarray,
    todo: np.ndarray,
    reference: np.ndarray,
    *,
    half_window_days: float,
    threshold: float,
    min_points: int = 3,
    min_scale: float = 0.2,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Screen values against the seasonal climatology of earlier years of their group.

    Parameters
    ----------
    days
        Dates (``datetime64``), one per value.
    values
        Values in ln units (e.g. ln chlorophyll-a, already harmonised).
    groups
        Group label per value (e.g. AOI and harmonised sensors); references come from the same group.
    todo
        Values to screen (bool).
    reference
        Values that may serve as reference (bool; e.g. accepted, not flagged).
    half_window_days
        Largest distance in day of year (days, circular) of a reference value.
    threshold, min_points, min_scale
        As for :func:`lakefeed.extract.screening.hampel_screen` (``min_scale`` in ln units).

    Returns
    -------
    (flags, examined, n_reference)
        Bool, bool and int arrays aligned with ``values``: outlier, screened by this rule (at least
        ``min_points`` reference values of earlier years), number of reference values.
    """
    d = pd.DatetimeIndex(np.asarray(days, dtype="datetime64[ns]"))
    year = d.year.to_numpy()
    doy = d.dayofyear.to_numpy().astype(float)
    x = np.asarray(values, dtype=float)
    groups = np.asarray(groups).astype(str)
    n = x.size
    flags, examined, count = np.zeros(n, bool), np.zeros(n, bool), np.zeros(n, np.int64)
    ref = np.asarray(reference, bool) & np.isfinite(x)
    for i in np.flatnonzero(np.asarray(todo, bool) & np.isfinite(x)):
        gap = np.abs(doy - doy[i])
        near = np.minimum(gap, 365.25 - gap) <= half_window_days
        pick = ref & (groups == groups[i]) & (year < year[i]) & near
        count[i] = int(pick.sum())
        if count[i] < min_points:
            continue
        r = x[pick]
        med = float(np.median(r))
        scale = max(MAD_TO_SIGMA * float(np.median(np.abs(r - med))), min_scale)
        examined[i] = scale > 0
        flags[i] = examined[i] and abs(x[i] - med) / scale > threshold
    return flags, examined, count


def total_screening(
    obs: pd.DataFrame,
    fits: pd.DataFrame,
    *,
    window_days: float = 31,
    max_window_days: float = 91,
    threshold: float = 3.5,
    min_points: int = 3,
) -> pd.DataFrame:
    """Rules 1-4 (see the module docstring): the total outlier screening of the accepted observations.

    Parameters
    ----------
    obs
        Observations with ``aoi``, ``sensor``, ``time``, ``median`` (mg m-3) and ``accepted``.
    fits
        Fitted sensor biases (empty: no harmonisation, rule 2 is skipped and rule 3 uses each sensor's
        own values).
    window_days, max_window_days, threshold, min_points
        The filter's window (days), its widest widening (days), threshold (robust standard deviations) and
        minimum number of reference values.

    Returns
    -------
    pandas.DataFrame
        Aligned with ``obs``: ``outlier`` (bool, the per-sensor flags included), ``screened`` (bool:
        False for rows not accepted and for values no rule could examine) and ``screening`` (how the
        value was screened, or why not; empty for rows not accepted).
    """
    accepted = obs["accepted"].astype(bool) & (obs["median"] > 0)
    first = screen_outliers(
        obs, window_days=window_days, max_window_days=max_window_days, threshold=threshold, min_points=min_points
    )
    outlier = first["outlier"].to_numpy().copy()
    own = first["examined"].to_numpy() & accepted.to_numpy()
    text = np.where(own, _window_text("own sensor's series", first["window_days"].to_numpy(), window_days), "")
    cross = cross_sensor_screen(
        obs.assign(outlier=outlier), fits, window_days=window_days, max_window_days=max_window_days, threshold=threshold
    )
    outlier |= cross["outlier"].to_numpy()
    by_cross = ~own & cross["examined"].to_numpy()
    text = np.where(by_cross, _window_text("harmonised sensors", cross["window_days"].to_numpy(), window_days), text)
    text = np.where(
        own & cross["outlier"].to_numpy(), np.char.add(text.astype(str), "; flagged among harmonised sensors"), text
    )
    screened = own | by_cross
    harmonised = _harmonised_sensors(fits) if obs["sensor"].isin(_harmonised_sensors(fits)).any() else set()
    sensor = obs["sensor"].astype(str)
    groups = obs["aoi"].astype(str) + "|" + sensor.where(~sensor.isin(harmonised), "harmonised")
    values = obs["median"].astype(float)
    if harmonised:
        values = apply_bias(obs.assign(relative_sigma=0.0), fits)["value"]
    with np.errstate(divide="ignore", invalid="ignore"):
        ln = np.log(values.to_numpy(dtype=float))
    day = pd.to_datetime(obs["time"], utc=True).dt.tz_localize(None).to_numpy()
    todo = accepted.to_numpy() & ~screened & ~outlier
    flags, by_clim, n_ref = climatology_screen(
        day,
        ln,
        groups.to_numpy(),
        todo,
        accepted.to_numpy() & ~outlier,
        half_window_days=max_window_days / 2,
        threshold=threshold,
        min_points=min_points,
    )
    outlier |= flags
    clim_text = [
        f"seasonal climatology of earlier years ({k} values within {max_window_days / 2:g} days of the day of year)"
        for k in n_ref
    ]
    text = np.where(by_clim, clim_text, text)
    screened |= by_clim
    why = (
        f"unscreened: fewer than {min_points} other values within a {max_window_days:g}-day window (own sensor "
        f"and harmonised sensors) and fewer than {min_points} values of earlier years within "
        f"{max_window_days / 2:g} days of the day of year"
    )
    text = np.where(accepted.to_numpy() & ~screened & ~outlier, why, text)
    return pd.DataFrame(
        {"outlier": outlier, "screened": screened & accepted.to_numpy(), "screening": text.astype(object)},
        index=obs.index,
    )


def _window_text(what: str, width: np.ndarray, base: float) -> np.ndarray:
    """'<what>, 31-day window' or '<what>, window widened to 58 days' per row."""
    w = np.nan_to_num(np.asarray(width, dtype=float), nan=base)
    wide = w > base + 1e-9
    return np.where(
        wide,
        np.char.add(f"{what}, window widened to ", np.char.add(np.round(w, 1).astype(str), " days")),
        f"{what}, {base:g}-day window",
    )
