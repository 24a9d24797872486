"""Stage ``forecast``: archived forecasts -> daily drivers per lead, bias adjustment, evaluation, re-forecast rows.

Takes a :class:`~lakefeed.config.Project` (its ``forecast`` source) and a :class:`~lakefeed.store.Store`
that already holds ``drivers_daily`` (the weather stage) and, for re-forecast rows, ``features`` and
``target_daily``. Reads the forecast archive (:mod:`lakefeed.sources.forecasts`), builds the lake's
zones and exact weights on the forecast grid (cached like the reanalysis'), de-accumulates, aggregates
to zones with the reanalysis' machinery and to local days per lead, fits and applies the quantile
mapping without look-ahead (monthly expanding refits) and writes (a refresh reads only the new or
changed issues and reuses the stored raw rows of the others: :mod:`lakefeed.stages._forecast_refresh`):

- ``forecast_drivers_daily``: keys ``zone, issue_date, lead_days, adjustment`` (``raw`` or
  ``quantile_mapping``), then ``issue_time, date``, the ``drivers_daily`` columns, ``flags`` and
  ``fitted_through`` (last reanalysis date the adjustment's fit used);
- ``bias_adjustment``: the quantile table fitted on the whole overlap (reused by later runs while the
  reanalysis has not advanced and the settings and raw forecasts are unchanged; used for forecasts issued
  after it);
- ``forecast_evaluation``: the before/after table per variable and lead (out-of-sample);
- ``features``: re-forecast rows (leads ``features.forecast_leads``) appended to the hindcast rows.

Must not hold science (that is in ``extract``/``features``).
"""

from __future__ import annotations

import hashlib
import json
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.config import Project
from lakefeed.config.sources import Accumulation, ForecastSource, WeatherSource
from lakefeed.exceptions import ExtractError
from lakefeed.extract.daily import DAILY_UNITS
from lakefeed.extract.forecast_daily import check_increments, deaccumulate_forecast, to_daily_by_lead
from lakefeed.extract.forecast_evaluation import bias_table, expanding_adjustment, leave_one_year_out, overlap_days
from lakefeed.extract.quantile_mapping import DEFAULT_KINDS, fit_quantile_mapping
from lakefeed.geometry.weights import ZoneWeights
from lakefeed.geometry.zones import zone_latitudes
from lakefeed.progress import Progress, no_progress
from lakefeed.sources.forecasts import ISSUE, LEAD, ForecastArchive, open_forecasts
from lakefeed.sources.grids import find_variable
from lakefeed.stages._features_output import KEYS as _FEATURE_KEYS
from lakefeed.stages._forecast_refresh import SIGNATURE, content_hash, raw_drivers, raw_signature
from lakefeed.stages._guard import refuse_shrink
from lakefeed.stages._provenance import config_hash
from lakefeed.stages._result import StageResult
from lakefeed.stages._rewrite_tail import write_from_first_change
from lakefeed.stages.forecast_features import reforecast_features
from lakefeed.stages.weather import hourly_drivers
from lakefeed.stages.weights_cache import get_weights, lake_zones
from lakefeed.store import Store
from lakefeed.units import convert

__all__ = ["adjust_forecasts", "build_forecast", "daily_forecasts", "fit_options", "forecast_steps"]

ADJUSTED = "quantile_mapping"
#: Fewest (forecast, reanalysis) pairs of a zone/lead-group/month group; smaller groups use the pooled months.
MIN_GROUP_VALUES = 20
_AMOUNTS = ("precipitation", "shortwave_radiation")


def fit_options(src: ForecastSource) -> dict[str, object]:
    """Keyword arguments of :func:`~lakefeed.extract.quantile_mapping.fit_quantile_mapping` from the config."""
    return {
        "quantiles": src.quantiles,
        "lead_groups": src.lead_groups,
        "season": "month",
        "month_window": src.month_window,
        "wet_day_threshold": src.wet_day_threshold_mm,
        "max_factor": src.max_factor,
        "min_values": MIN_GROUP_VALUES,
    }


def _settings_hash(src: ForecastSource, variables: list[str]) -> str:
    payload = {"options": fit_options(src), "variables": variables, "min_overlap_days": src.min_overlap_days}
    return hashlib.sha256(json.dumps(payload, sort_keys=True, default=str).encode()).hexdigest()[:16]


def forecast_steps(
    archive: ForecastArchive,
    weights: ZoneWeights,
    *,
    source: ForecastSource | None = None,
    progress: Progress | None = None,
) -> tuple[xr.Dataset, list[str]]:
    """Per-step zonal forecast values in canonical units, dims (forecast_reference_time, forecast_period, zone).

    De-accumulates along the lead per ``source.accumulation`` (keyed by role or by the file's variable
    name), then reuses the reanalysis path (:func:`lakefeed.stages.weather.hourly_drivers`): units are
    converted to the canonical ones (an unconvertible unit is a :class:`~lakefeed.exceptions.SourceError`).
    """
    src = source or ForecastSource(paths=[])
    ds = archive.dataset
    for role in _AMOUNTS:
        name = find_variable(ds, role, mapping=src.variables, where=archive.label)
        acc = src.accumulation.get(role) or src.accumulation.get(name) or Accumulation()
        inc, bad = deaccumulate_forecast(ds[name], kind=acc.kind, name=name)
        check_increments(bad.values, ds[ISSUE].values, ds[LEAD].values, name=name)
        ds = ds.assign({name: inc})
    grid = archive.as_grid(ds)
    as_is = {role: Accumulation(kind="none") for role in _AMOUNTS}  # de-accumulated above, along the lead
    wsrc = WeatherSource(paths=[], variables=src.variables, units=src.units)
    # unit rules as for the reanalysis; no physical bounds: raw forecasts carry model biases (the sample plants
    # radiation biases above the top-of-atmosphere value) that the bias adjustment removes
    steps, clipped = hourly_drivers(
        grid, weights, source=wsrc, accumulation=as_is, progress=progress, section="forecast", value_rules=False
    )
    warnings = [f"{k}: {n} forecast value(s) of packing noise clipped to zero" for k, n in clipped.items() if n]
    shape = (ds.sizes[ISSUE], ds.sizes[LEAD], len(weights.zones))
    cube = xr.Dataset(
        {k: ((ISSUE, LEAD, "zone"), np.asarray(v.values).reshape(shape)) for k, v in steps.data_vars.items()},
        coords={ISSUE: ds[ISSUE].values, LEAD: ds[LEAD].values, "zone": list(weights.zones)},
    )
    return cube, warnings


def daily_forecasts(
    archive: ForecastArchive, project: Project, *, cache_dir: Path | None = None, progress: Progress | None = None
) -> tuple[pd.DataFrame, list[str]]:
    """Raw daily forecast drivers per zone, issue and lead (``drivers_daily`` columns and units) and warnings."""
    lake = project.lake
    grid = archive.as_grid()
    zones, _ = lake_zones(lake, grid.crs)
    weights, _ = get_weights(zones, grid, cache_dir=cache_dir, allow_partial_coverage=lake.zones.allow_partial_coverage)
    cube, warnings = forecast_steps(archive, weights, source=project.sources.forecast, progress=progress)
    flags = {z: weights.flags(z) for z in weights.zones}
    elevation = 0.0 if lake.elevation_m is None else float(lake.elevation_m)  # as the reanalysis drivers
    daily = to_daily_by_lead(
        cube, tz=lake.timezone, latitude=zone_latitudes(zones), elevation_m=elevation, zone_flags=flags
    )
    return daily, warnings


def _reference(store: Store, lake: str) -> pd.DataFrame:
    ref = store.read_table("drivers_daily", lake)
    units = ref.attrs.get("units", {})
    ref = ref.drop(columns=["lake"], errors="ignore")
    ref["date"] = pd.to_datetime(ref["date"])
    for col, unit in DAILY_UNITS.items():
        have = units.get(col)
        if col in ref.columns and have and have != unit:
            ref[col] = convert(ref[col].astype(float), have, unit)  # raises SourceError when not convertible
    return ref


def adjust_forecasts(
    raw: pd.DataFrame,
    reference: pd.DataFrame,
    src: ForecastSource,
    *,
    stored: pd.DataFrame | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame, dict[str, object]]:
    """Adjusted forecasts (no look-ahead), the whole-overlap quantile table, the evaluation table, info."""
    variables = [v for v in DEFAULT_KINDS if v in raw.columns and v in reference.columns]
    have = overlap_days(raw, reference, variables)
    if have < src.min_overlap_days:
        raise ExtractError(
            f"forecast bias adjustment: the forecasts and the reanalysis overlap on {have} day(s), fewer than "
            f"forecast.min_overlap_days = {src.min_overlap_days} in sources.yaml; extend the reanalysis or the "
            "forecast archive, or lower min_overlap_days (at least a year is advisable)"
        )
    options = fit_options(src)
    end = pd.Timestamp(reference["date"].max())
    settings = _settings_hash(src, variables)

    def reuse(start: pd.Timestamp) -> pd.DataFrame | None:
        if stored is None or stored.empty or start != end + pd.Timedelta(days=1):
            return None
        same = stored["settings"].iat[0] == settings and pd.Timestamp(stored["fitted_through"].iat[0]) == end
        return stored.drop(columns=["settings", "fitted_through", "unit"], errors="ignore") if same else None

    res = expanding_adjustment(
        raw, reference, variables=variables, min_overlap_days=src.min_overlap_days, options=options, reuse=reuse
    )
    final = reuse(end + pd.Timedelta(days=1))
    reused = final is not None
    if final is None:
        final = fit_quantile_mapping(raw, reference, variables=variables, **options)
    final = final.assign(settings=settings, fitted_through=end)
    adj = res.adjusted
    if "relative_humidity_mean" in adj:
        adj["relative_humidity_mean"] = adj["relative_humidity_mean"].clip(0.0, 100.0)
    if {"shortwave_radiation_mean", "clear_sky_radiation"} <= set(adj.columns):
        cs = adj["clear_sky_radiation"].where(adj["clear_sky_radiation"] > 0)
        adj["radiation_ratio"] = adj["shortwave_radiation_mean"] / cs
    done = adj[variables].notna().any(axis=1).to_numpy()
    evaluation = bias_table(raw[done], adj[done], reference, variables=variables, units=DAILY_UNITS)
    if pd.DatetimeIndex(raw["issue_date"]).year.nunique() >= 2:
        loyo = leave_one_year_out(
            raw, reference, variables=variables, min_overlap_days=src.min_overlap_days, options=options
        )
        ok = loyo[variables].notna().any(axis=1).to_numpy()
        evaluation = pd.concat(
            [
                evaluation,
                bias_table(
                    raw[ok], loyo[ok], reference, variables=variables, units=DAILY_UNITS, method="leave_one_year_out"
                ),
            ]
        )
    info = {
        "unadjusted_issues": len(res.unadjusted_issues),
        "fallback_rows": res.fallback_rows,
        "reused": reused,
        "overlap_days": have,
        "variables": variables,
    }
    return adj, final, evaluation.reset_index(drop=True), info


def build_forecast(
    project: Project,
    store: Store,
    *,
    progress: Progress | None = None,
    since: str | date | None = None,
    full: bool = False,
    allow_shrink: bool = False,
) -> StageResult:
    """Build ``forecast_drivers_daily``, ``bias_adjustment``, ``forecast_evaluation`` and re-forecast ``features``.

    ``allow_shrink``: write even when the new rows would shorten the stored record of a zone, lead and
    adjustment, or of an AOI's re-forecast features, or turn stored values into missing ones; otherwise that
    is a :class:`~lakefeed.exceptions.ShrinkError` and no table is written (:mod:`lakefeed.stages._guard`).

    ``since`` (first day of the earliest changed forecast month): its issues (UTC) are read again; the
    stored raw daily drivers of earlier issues whose files' hashes equal the recorded ones are reused (with
    nothing changed no grid is read; ``full``: read everything). The adjustment, evaluation and re-forecast
    rows are redone over the whole record: the tables equal a full build's (:mod:`._forecast_refresh`).

    Examples
    --------
    >>> from lakefeed.config import load_project  # doctest: +SKIP
    >>> build_forecast(load_project("config/lake-tallow.yaml"), Store("store"))  # doctest: +SKIP
    """
    p = progress or no_progress
    lake, src = project.lake, project.sources.forecast
    result = StageResult("forecast", lake.id)
    if src is None:
        result.skipped, result.reason = True, "no forecast source in sources.yaml"
        return result
    if not store.has_table("drivers_daily", lake.id):
        result.skipped, result.reason = True, "no drivers_daily table for this lake; run the weather stage first"
        return result
    p("forecast: reading archive", 0, 5)
    archive = open_forecasts(src.paths, format=src.format)
    result.warnings += [f"forecast issue gap: {g}" for g in archive.issue_gaps]
    raw, warn, inputs, result.reason = raw_drivers(
        project, store, archive, since=since, full=full, extract=daily_forecasts, progress=progress
    )
    result.warnings += warn
    p("forecast: bias adjustment", 2, 5)
    reference = _reference(store, lake.id)
    stored = None
    raw_hash = content_hash(raw)
    bias_meta = (store.entry("bias_adjustment", lake.id) or {}).get("metadata") or {}
    if store.has_table("bias_adjustment", lake.id) and bias_meta.get("raw_hash") == raw_hash:
        stored = store.read_table("bias_adjustment", lake.id).drop(columns=["lake"], errors="ignore")
    adjusted, table, evaluation, info = adjust_forecasts(raw, reference, src, stored=stored)
    if info["unadjusted_issues"]:
        result.warnings.append(
            f"{info['unadjusted_issues']} forecast issue(s) left unadjusted: fewer than "
            f"min_overlap_days = {src.min_overlap_days} days of earlier overlap to fit on"
        )
    p("forecast: writing", 3, 5)
    ref_entry = store.entry("drivers_daily", lake.id) or {}
    inputs[f"drivers_daily/lake={lake.id}"] = str(ref_entry.get("content_hash", ""))  # the adjustment's reference
    prov = {"inputs": dict(sorted(inputs.items())), "config_hash": config_hash(project)}
    both = pd.concat(
        [raw.assign(adjustment="raw", fitted_through=pd.NaT), adjusted.assign(adjustment=ADJUSTED)], ignore_index=True
    )
    keys = ["zone", "issue_date", "lead_days", "adjustment", "issue_time", "date"]
    both = both[keys + [c for c in both.columns if c not in keys]]
    for c in ("issue_date", "date", "fitted_through"):
        both[c] = pd.to_datetime(both[c]).dt.date
    units = dict(DAILY_UNITS) | {"lead_days": "d"}
    leads = np.asarray(archive.dataset[LEAD].values)
    meta = {
        "archive_hours": str(int(leads.max() / np.timedelta64(1, "h"))) if leads.dtype.kind == "m" else "",
        "settings": str(table["settings"].iat[0]),
        "overlap_days": str(info["overlap_days"]),
        "bias_table_reused": str(info["reused"]),
        "method": "empirical quantile mapping (type-7 quantiles at nodes (i + 0.5)/n, linear interpolation, "
        "constant extrapolation of the correction); refit at each month start on pairs with valid date "
        "before it (fitted_through); groups: zone x lead group x calendar month of the valid date "
        "+- month_window, pooled over months when a group has < 20 pairs",
        "fit_options": json.dumps(fit_options(src) | {"kinds": DEFAULT_KINDS}, default=str),
        "min_overlap_days": str(src.min_overlap_days),
        "raw_hash": raw_hash,
        SIGNATURE: raw_signature(project),
    }
    descr = {
        "issue_date": "the forecast's issue date: lead 1 (the first full local day after the issue time) minus 1 day",
        "lead_days": "date - issue_date (lead 1 = first full local day after the issue time)",
        "adjustment": "raw (aggregated forecast) or quantile_mapping (bias-adjusted without look-ahead)",
        "issue_time": "forecast reference time (UTC)",
        "fitted_through": "last reanalysis date used by the adjustment's fit (always before issue_date)",
    }
    guard = {"allow_shrink": allow_shrink, "why": result.reason}
    result.warnings += refuse_shrink(
        store,
        "forecast_drivers_daily",
        lake.id,
        both,
        keys=keys,
        time_column="date",
        groups=["zone", "lead_days", "adjustment"],
        **guard,
    )
    feats = reforecast_features(project, store, adjusted, result)
    if feats is not None:
        result.warnings += refuse_shrink(
            store,
            "features",
            lake.id,
            feats[0],
            keys=_FEATURE_KEYS,
            time_column="target_date",
            groups=["aoi", "lead_days"],
            **guard,
        )
    store.write_table(
        "forecast_drivers_daily",
        lake.id,
        both,
        units=units,
        metadata=meta,
        time_column="date",
        descriptions=descr,
        **prov,
    )
    tunits = {"quantile": "1", "lead_min": "d", "lead_max": "d", "factor": "1 (multiplicative) or unit (additive)"}
    through = pd.Timestamp(table["fitted_through"].iat[0]).date()
    stored_table = table.assign(fitted_through=through, unit=table["variable"].map(DAILY_UNITS))
    descr = {"hist": "forecast quantile (in the row's unit)", "ref": "reanalysis quantile (in the row's unit)"}
    store.write_table(
        "bias_adjustment",
        lake.id,
        stored_table,
        units=tunits,
        metadata=meta,
        time_column=None,
        descriptions=descr,
        **prov,
    )
    store.write_table(
        "forecast_evaluation",
        lake.id,
        evaluation,
        units={"lead_days": "d", "ks_raw": "1", "ks_adjusted": "1"},
        metadata=meta,
        time_column=None,
        **prov,
    )
    result.tables = {
        "forecast_drivers_daily": len(both),
        "bias_adjustment": len(table),
        "forecast_evaluation": len(evaluation),
    }
    p("forecast: re-forecast features", 4, 5)
    if feats is not None:  # only the rows from the first changed target date on are written
        frame, funits, fdescr, stored = feats
        write_from_first_change(
            store,
            "features",
            lake.id,
            stored,
            frame,
            keys=_FEATURE_KEYS,
            date="target_date",
            units=funits,
            descriptions=fdescr,
        )
        result.tables["features"] = len(frame)
    p("forecast: done", 5, 5)
    return result
