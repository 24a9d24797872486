"""The re-forecast rows of the ``features`` table: feature rows whose window days after the issue date are
filled with the bias-adjusted forecast drivers, one row per AOI, target date and forecast lead.

Takes: the project, the store (``features``, ``target_daily`` and the driver tables) and the adjusted
daily forecasts of the forecast stage. Gives: the features table with those rows appended (replacing the
previous re-forecast rows), its units and descriptions. Must not: write (the forecast stage writes).
Each row's fold is the fold the features stage gives its target date, so a date carries one fold
across all its leads.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from lakefeed.config import Project
from lakefeed.config.lake import FeatureOptions
from lakefeed.features.reforecast import reforecast_rows
from lakefeed.stages._features_output import fold_numbers
from lakefeed.stages._result import StageResult
from lakefeed.store import Store

__all__ = ["reforecast_features", "reforecast_folds"]

_FORECAST_COLUMNS = {
    "forecast_days": "re-forecast rows: window days after the issue date filled by forecasts (missing: hindcast row)",
    "forecast_fraction": "re-forecast rows: forecast_days / longest window (missing: hindcast row)",
}


def reforecast_features(
    project: Project, store: Store, adjusted: pd.DataFrame, result: StageResult
) -> tuple[pd.DataFrame, dict[str, str], dict[str, str], pd.DataFrame] | None:
    """Features table with the re-forecast rows appended, its units and descriptions, and the stored table
    (or None when it cannot be built yet)."""
    from lakefeed.stages.features import load_drivers

    lake, opts = project.lake, project.lake.features
    if not (store.has_table("features", lake.id) and store.has_table("target_daily", lake.id)):
        result.warnings.append("no features/target_daily table: re-forecast rows not built (run the features stage)")
        return None
    existing = store.read_table("features", lake.id)
    units = dict(existing.attrs.get("units", {}))
    descriptions = dict(existing.attrs.get("descriptions", {}))
    existing = existing.drop(columns=["lake"], errors="ignore")
    td = store.read_table("target_daily", lake.id, columns=["aoi", "date", "chla"])
    targets = td.loc[td["chla"].notna(), ["aoi", "date", "chla"]].copy()
    targets["aoi"] = targets["aoi"].astype(str)
    targets["date"] = pd.to_datetime(targets["date"]).dt.normalize()
    aois = sorted(targets["aoi"].unique())
    wanted = list(opts.drivers) if opts.drivers else None
    frames, _, _ = load_drivers(store, lake.id, zone=opts.driver_zone, aois=aois, wanted=wanted)
    stats = {c: list(s) for c, s in (opts.drivers or {}).items() if s}
    blocks = []
    for key, drivers in frames.items():
        zone = f"aoi:{key}" if key is not None else opts.driver_zone
        fc = adjusted[adjusted["zone"] == zone]
        cols = [c for c in drivers.columns if c in fc.columns]
        fc = fc[["issue_date", "date", *cols]].assign(
            issue_date=lambda f: pd.to_datetime(f["issue_date"]), date=lambda f: pd.to_datetime(f["date"])
        )
        tg = targets if key is None else targets[targets["aoi"] == key]
        blocks.append(
            reforecast_rows(
                tg,
                drivers,
                fc,
                leads=opts.forecast_leads,
                windows=opts.windows,
                stats=stats or None,
                include_target_day=opts.include_target_day,
                max_missing_fraction=opts.max_missing_fraction,
            )
        )
    rows = pd.concat(blocks, ignore_index=True)
    mine = existing["forecast_days"].notna() if "forecast_days" in existing else pd.Series(False, index=existing.index)
    hind = existing.loc[~mine.to_numpy()]
    clash = hind["lead_days"].isin(opts.forecast_leads)
    if clash.any():
        result.warnings.append(
            f"{int(clash.sum())} hindcast feature row(s) at leads {sorted(set(hind.loc[clash, 'lead_days']))} "
            "are replaced by re-forecast rows (features.leads and features.forecast_leads overlap)"
        )
        hind = hind.loc[~clash.to_numpy()]
    rows["target_date"] = pd.to_datetime(rows["target_date"])
    rows["issue_date"] = pd.to_datetime(rows["issue_date"])
    rows["fold"] = reforecast_folds(rows, opts)
    rows["fold"] = rows["fold"].astype(np.int16)
    if "fold_kind" in hind:
        rows["fold_kind"] = opts.fold_kind
    cols = [c for c in hind.columns if c in rows]
    cols += [c for c in ("forecast_days", "forecast_fraction") if c not in cols]  # a rerun finds them in hind
    out = pd.concat([hind, rows[cols]], ignore_index=True)
    out = out.sort_values(["aoi", "target_date", "lead_days"], kind="stable").reset_index(drop=True)
    units |= {"forecast_days": "d", "forecast_fraction": "1", "lead_days": "d"}
    descriptions |= {k: v for k, v in _FORECAST_COLUMNS.items() if k in out}
    return out, units, descriptions, existing


def reforecast_folds(rows: pd.DataFrame, opts: FeatureOptions) -> np.ndarray:
    """Fold of each re-forecast row: the fold the features stage gives its target date (calendar blocks or a
    hash of the date, :func:`lakefeed.features.assign_folds`), so a target date carries one fold across all
    its leads, hindcast and re-forecast."""
    return fold_numbers(pd.to_datetime(rows["target_date"]).to_numpy(), opts)
