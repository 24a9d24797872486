"""Forecast steps -> daily drivers per zone, issue and lead (local calendar days).

Two pure steps, between which the caller applies the zonal machinery of
:mod:`lakefeed.extract.zonal` (the same exact weights as the reanalysis, built for the forecast grid):

1. :func:`deaccumulate_forecast`: per-step amounts from an accumulated forecast field with dims
   (forecast_reference_time, forecast_period, ...): ``per_step`` (total over the step ending at the
   lead; unchanged) or ``since_reset``, which for forecasts means *accumulated since the forecast
   start* (the increment ending at lead L is v(L) - v(L - step); the first lead's value is its own
   increment). The amount of the step ending at lead 0 lies before the issue and is NaN. Lazy.
2. :func:`to_daily_by_lead`: (issue, lead, zone) per-step zonal values in canonical units -> daily
   drivers with exactly the ``drivers_daily`` columns (:mod:`lakefeed.extract.daily` computes them,
   so day assignment, humidity and clear-sky radiation are identical to the reanalysis' drivers)
   plus ``issue_time`` (UTC), ``issue_date`` and ``lead_days``.

Lead numbering: lead 1 is the first *full* local day after the issue time; ``issue_date`` is the day
before it, so ``lead_days = date - issue_date`` (the point-in-time rule of
:mod:`lakefeed.features.pit`: an issue dated d knows everything on or before d). For an issue at
00 UTC and a lake east of Greenwich the issue's own local day is partial and left out; for a lake
on UTC it is lead 1. Only days wholly inside the forecast horizon are kept (a 240 h forecast issued
at 00 UTC gives leads 1-9 at UTC+1/+2, 1-10 at UTC).

Limitation: temperatures, dewpoint and wind are taken as instantaneous at their stamp (as for the
reanalysis), which suits hourly and 6-hourly archives; in a daily-step archive a daily *mean* temperature
stamped at the end of its day would land on the next day.

Must not: open files, compute dask arrays in step 1.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.exceptions import ExtractError
from lakefeed.extract.daily import DAILY_COLUMNS, to_daily

__all__ = ["FORECAST_KEYS", "deaccumulate_forecast", "first_full_day", "to_daily_by_lead"]

ISSUE = "forecast_reference_time"
LEAD = "forecast_period"
#: Key columns of daily forecast drivers (before the ``drivers_daily`` value columns).
FORECAST_KEYS = ["zone", "issue_date", "lead_days", "issue_time", "date"]
_SEP = "\x1f"


def deaccumulate_forecast(
    data: xr.DataArray, *, kind: str, tolerance: float = 0.0, name: str | None = None
) -> tuple[xr.DataArray, xr.DataArray]:
    """Per-step amounts of an accumulated forecast field (units unchanged: amount per step).

    Parameters
    ----------
    data
        Dims (forecast_reference_time, forecast_period, ...), forecast_period as timedelta.
    kind
        ``"none"`` (instantaneous or step mean: unchanged), ``"per_step"`` or ``"since_reset"``
        (accumulated since the forecast start).
    tolerance
        Negative increments down to ``-tolerance`` (packing noise, data units) are clipped to 0.

    Returns
    -------
    (increments, bad)
        Lazy increments (NaN at lead 0 for amounts) and a lazy boolean (issue, lead) array that is
        True where an increment is negative beyond ``tolerance`` (see :func:`check_increments`).
    """
    label = str(name or data.name or "?")
    if kind == "none":
        return data, xr.zeros_like(data.isel({d: 0 for d in data.dims if d not in (ISSUE, LEAD)}), dtype=bool)
    if kind not in ("per_step", "since_reset"):
        raise ExtractError(f"forecast variable {label!r}: unknown accumulation kind {kind!r}")
    lead = pd.TimedeltaIndex(data[LEAD].values)
    at_issue = xr.DataArray(lead == pd.Timedelta(0), dims=LEAD, coords={LEAD: data[LEAD]})
    if kind == "per_step":
        inc = data
    else:
        prev = data.shift({LEAD: 1})
        first = xr.DataArray(np.arange(lead.size) == 0, dims=LEAD, coords={LEAD: data[LEAD]})
        inc = xr.where(first, data, data - prev)
    inc = inc.where(~at_issue).transpose(*data.dims)
    tol = float(tolerance) + 1e-6 * abs(data)
    negative = inc < 0
    bad = (negative & (inc < -tol)).any(dim=[d for d in data.dims if d not in (ISSUE, LEAD)])
    out = xr.where(negative & ~(inc < -tol), 0.0, inc).transpose(*data.dims)
    out.attrs = dict(data.attrs)
    out.name = data.name
    return out, bad


def check_increments(bad: xr.DataArray | np.ndarray, issues: np.ndarray, leads: np.ndarray, *, name: str) -> None:
    """Raise :class:`ExtractError` naming the first (issue, lead) whose increment contradicts the kind."""
    arr = np.asarray(bad, dtype=bool)
    if arr.any():
        i, j = np.argwhere(arr)[0]
        raise ExtractError(
            f"forecast variable {name!r}: the increment ending at lead {pd.Timedelta(leads[j])} of the forecast issued "
            f"{pd.Timestamp(issues[i])} UTC is negative; check forecast.accumulation in sources.yaml "
            "('per_step' for totals per step, 'since_reset' for totals since the forecast start)"
        )


def first_full_day(issue_times: pd.DatetimeIndex, tz: str) -> pd.DatetimeIndex:
    """Local date of the first full local day starting at or after each (UTC) issue time."""
    local = pd.DatetimeIndex(issue_times).tz_localize("UTC").tz_convert(tz).tz_localize(None)
    day = local.normalize()
    return day.where(local == day, day + pd.Timedelta(days=1))


def _last_full_day(end_times: pd.DatetimeIndex, tz: str) -> pd.DatetimeIndex:
    local = pd.DatetimeIndex(end_times).tz_localize("UTC").tz_convert(tz).tz_localize(None)
    return local.normalize() - pd.Timedelta(days=1)


def to_daily_by_lead(
    steps: xr.Dataset,
    *,
    tz: str,
    latitude: Mapping[str, float],
    elevation_m: float | Mapping[str, float] = 0.0,
    zone_flags: Mapping[str, Sequence[str]] | None = None,
    block: int = 128,
) -> pd.DataFrame:
    """Daily drivers per zone, issue and lead from per-step zonal forecast values.

    Parameters
    ----------
    steps
        In-memory Dataset with dims (forecast_reference_time, forecast_period, zone) of the variables
        :func:`lakefeed.extract.daily.to_daily` needs, in its canonical units: ``air_temperature``,
        ``dewpoint`` (degC), ``wind_speed`` (m s-1), ``precipitation`` (mm per step),
        ``shortwave_radiation`` (W m-2 step mean), optionally ``valid_fraction``. Amounts are
        labelled at the end of their step (lead L covers (L - step, L]).
    tz
        IANA time zone of the lake.
    latitude, elevation_m, zone_flags
        As in :func:`lakefeed.extract.daily.to_daily` (per zone).
    block
        Issues aggregated together (memory grows with it).

    Returns
    -------
    pandas.DataFrame
        ``zone, issue_date, lead_days, issue_time, date`` and the ``drivers_daily`` value columns
        (units of :data:`lakefeed.extract.daily.DAILY_UNITS`) and ``flags``; one row per zone, issue
        and full local day inside the horizon.
    """
    for dim in (ISSUE, LEAD, "zone"):
        if dim not in steps.dims:
            raise ExtractError(f"forecast steps need dims ({ISSUE}, {LEAD}, zone); got {tuple(steps.dims)}")
    issues = pd.DatetimeIndex(steps[ISSUE].values)
    leads = pd.TimedeltaIndex(steps[LEAD].values)
    zones = [str(z) for z in steps["zone"].values]
    d1 = first_full_day(issues, tz)
    last = _last_full_day(issues + leads.max(), tz)
    frames = []
    names = list(steps.data_vars)
    data = {n: np.asarray(steps[n].transpose(ISSUE, LEAD, "zone").values, dtype=float) for n in names}
    step = leads[1] - leads[0] if len(leads) > 1 else pd.Timedelta(hours=1)
    for start in range(0, len(issues), block):
        sel = np.arange(start, min(start + block, len(issues)))
        t0 = issues[sel].min() + leads.min()
        # one regular UTC time axis for the block; each (issue, zone) pair is a pseudo-zone of to_daily
        valid = issues[sel].values.astype("datetime64[ns]")[:, None] + leads.values.astype("timedelta64[ns]")[None, :]
        offset = valid - t0.to_datetime64()
        if np.any(offset % step.to_timedelta64()):
            raise ExtractError(
                f"forecast issue times {list(issues[sel][:3])}... are not on the {step} grid of the leads; "
                "lakefeed needs issue times that are whole multiples of the lead step apart"
            )
        pos = (offset // step.to_timedelta64()).astype(np.int64)  # (issues, leads)
        nt = int(pos.max()) + 1
        time = pd.date_range(t0, periods=nt, freq=step)
        nz = len(zones)
        cols = np.arange(sel.size)[:, None, None] * nz + np.arange(nz)[None, None, :]  # (issues, 1, zones)
        arrays = {}
        for n in names:
            arr = np.full((nt, sel.size * nz), np.nan)
            shape = (sel.size, len(leads), nz)
            arr[np.broadcast_to(pos[:, :, None], shape), np.broadcast_to(cols, shape)] = data[n][sel]
            arrays[n] = (("time", "zone"), arr)
        pz_names = [f"{z}{_SEP}{i}" for i in sel for z in zones]
        hourly = xr.Dataset(arrays, coords={"time": time, "zone": pz_names})
        pz = [str(z) for z in hourly["zone"].values]
        base = [p.split(_SEP)[0] for p in pz]
        lat = {p: float(latitude[b]) for p, b in zip(pz, base, strict=True)}
        elev = (
            {p: float(elevation_m[b]) for p, b in zip(pz, base, strict=True)}
            if isinstance(elevation_m, Mapping)
            else elevation_m
        )
        flags = {p: list((zone_flags or {}).get(b, ())) for p, b in zip(pz, base, strict=True)}
        daily = to_daily(hourly, tz=tz, latitude=lat, elevation_m=elev, zone_flags=flags)
        split = daily["zone"].str.split(_SEP, n=1, expand=True)
        idx = split[1].astype(int).to_numpy()
        daily["zone"] = split[0].to_numpy()
        date = pd.DatetimeIndex(daily["date"])
        keep = (date >= d1[idx]) & (date <= last[idx])
        daily = daily.loc[keep]
        idx = idx[keep]
        issue_date = d1[idx] - pd.Timedelta(days=1)
        daily.insert(1, "issue_date", issue_date)
        daily.insert(2, "lead_days", ((date[keep] - issue_date).days).astype(np.int16))
        daily.insert(3, "issue_time", issues[idx])
        frames.append(daily)
    if not frames:
        return pd.DataFrame(columns=FORECAST_KEYS + DAILY_COLUMNS[2:])
    out = pd.concat(frames, ignore_index=True)
    out = out[FORECAST_KEYS + DAILY_COLUMNS[2:]]
    return out.sort_values(["zone", "issue_date", "lead_days"], kind="stable").reset_index(drop=True)
