"""The ``baseline_skill`` table and the scores of a user's own predictions on the same rows and folds.

Takes a frame shaped like ``features`` (and, for :func:`score_predictions`, a frame of predictions with
``aoi, target_date, lead_days, prediction``); returns long tables of scores. Pure: no file I/O, no store
(:func:`lakefeed.verify.read.skill` reads the store and calls these).

Skill scores relative to a baseline (common practice; Wilks, *Statistical Methods in the Atmospheric
Sciences*, the MSE skill score, from memory): ``skill_vs_<baseline>`` = 1 - MSE / MSE_baseline on the linear
scale and ``skill_vs_<baseline>_log`` on ln(chlorophyll-a), both on the rows where the prediction, the
baseline and the observation all exist. 1 is perfect, 0 no better than the baseline, below 0 worse.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import numpy as np
import pandas as pd

from lakefeed.exceptions import SkillError
from lakefeed.verify.baselines import BASELINES, baseline_predictions, events, fold_rows, score_table

__all__ = ["KEYS", "SKILL_COLUMNS", "SkillError", "baseline_skill", "mse_skill", "score_predictions"]

#: Keys of a prediction (and of a features row).
KEYS = ("aoi", "target_date", "lead_days")
#: Columns of ``baseline_skill`` (and, with ``model`` for ``baseline``, of :func:`score_predictions`).
SKILL_COLUMNS = ("aoi", "lead_days", "baseline", "fold", "metric", "value", "n")

_NEEDED = ("aoi", "target_date", "lead_days", "fold", "chla", "persistence_chla")


def _check_columns(frame: pd.DataFrame, needed: Iterable[str], what: str) -> None:
    missing = [c for c in needed if c not in frame.columns]
    if missing:
        raise SkillError(f"{what} lacks column(s) {missing}; it has {list(frame.columns)[:12]}")


def _scored(
    frame: pd.DataFrame,
    columns: Mapping[str, str],
    thresholds: Mapping[str, float] | Iterable[object],
    window_days: int,
) -> pd.DataFrame:
    """Long scores of the prediction columns ``columns`` (label -> column of ``frame`` or a baseline name)."""
    _check_columns(frame, _NEEDED, "the feature table")
    base = baseline_predictions(frame, window_days=window_days)
    event_list = events(thresholds)
    out = []
    for (aoi, lead), rows in frame.groupby(["aoi", "lead_days"], sort=True):
        b = base.loc[rows.index]
        obs = rows["chla"].to_numpy(dtype=float)
        for label, mask, clim in fold_rows(rows["fold"].to_numpy()):
            preds = {}
            for name, col in columns.items():
                src = b["persistence"] if col == "persistence" else b[clim] if col == "climatology" else rows[col]
                preds[name] = src.to_numpy(dtype=float)[mask]
            for name, metric, value, n in score_table(obs[mask], preds, event_list):
                out.append((aoi, int(lead), name, label, metric, value, n))
            for name in (n for n in columns if columns[n] not in BASELINES):
                for ref in BASELINES:
                    for metric, (value, n) in mse_skill(preds[name], preds[ref], obs[mask]).items():
                        out.append((aoi, int(lead), name, label, metric.replace("REF", ref), value, n))
    table = pd.DataFrame(out, columns=list(SKILL_COLUMNS))
    table["lead_days"] = table["lead_days"].astype(np.int64)
    table["n"] = table["n"].astype(np.int64)
    return table


def mse_skill(prediction: np.ndarray, reference: np.ndarray, observed: np.ndarray) -> dict[str, tuple[float, int]]:
    """1 - MSE/MSE_ref on the linear and the ln scale (keys ``skill_vs_REF``, ``skill_vs_REF_log``), with n."""
    p, r, o = (np.asarray(v, dtype=float) for v in (prediction, reference, observed))
    both = np.isfinite(p) & np.isfinite(r) & np.isfinite(o)
    pos = both & (p > 0) & (r > 0) & (o > 0)
    out = {}
    for key, rows, f in (("skill_vs_REF", both, lambda v: v), ("skill_vs_REF_log", pos, np.log)):
        mse = np.mean((f(p[rows]) - f(o[rows])) ** 2) if rows.any() else np.nan
        ref = np.mean((f(r[rows]) - f(o[rows])) ** 2) if rows.any() else np.nan
        out[key] = (float(1.0 - mse / ref) if rows.any() and ref > 0 else float("nan"), int(rows.sum()))
    return out


def baseline_skill(
    frame: pd.DataFrame, *, thresholds: Mapping[str, float] | Iterable[object] = (), window_days: int = 31
) -> pd.DataFrame:
    """The ``baseline_skill`` table: scores of persistence and climatology per AOI, lead and fold.

    Parameters
    ----------
    frame
        Rows shaped like ``features``: ``aoi``, ``target_date``, ``lead_days``, ``fold``, ``chla`` and
        ``persistence_chla`` (mg m-3); rows without ``chla`` are not scored.
    thresholds
        Configured chlorophyll-a thresholds (name -> mg m-3, or config ``Threshold`` objects); the trophic
        class boundaries are always scored (:func:`lakefeed.verify.baselines.events`).
    window_days
        Length of the climatology's circular smoothing window (days).

    Returns
    -------
    pandas.DataFrame
        :data:`SKILL_COLUMNS`; see :mod:`lakefeed.verify.baselines` for folds and metrics.
    """
    frame = frame[frame["chla"].notna()] if "chla" in frame.columns else frame
    return _scored(frame, {b: b for b in BASELINES}, thresholds, window_days)


def score_predictions(
    predictions: pd.DataFrame,
    frame: pd.DataFrame,
    *,
    thresholds: Mapping[str, float] | Iterable[object] = (),
    window_days: int = 31,
    name: str = "model",
) -> pd.DataFrame:
    """Scores of a user's predictions on the feature rows they name, beside the baselines on the same rows.

    Parameters
    ----------
    predictions
        ``aoi``, ``target_date``, ``lead_days`` and ``prediction`` (chlorophyll-a, mg m-3); one row per key,
        each key a row of ``frame``. Whether a prediction is out of sample is the caller's responsibility
        (fold ``k``: the rows of fold k; use folds as the features table gives them).
    frame
        The lake's ``features`` rows (as for :func:`baseline_skill`).
    name
        Label of the predictions in the ``baseline`` column.

    Returns
    -------
    pandas.DataFrame
        :data:`SKILL_COLUMNS`: the model's metrics, its ``skill_vs_<baseline>`` scores and the baselines'
        metrics, on the rows with a prediction.
    """
    _check_columns(predictions, (*KEYS, "prediction"), "the predictions")
    if name in BASELINES:
        raise SkillError(f"predictions cannot be named {name!r}: that is a baseline; choose another name")
    pred = predictions[[*KEYS, "prediction"]].copy()
    pred["aoi"] = pred["aoi"].astype(str)
    pred["target_date"] = pd.to_datetime(pred["target_date"]).dt.tz_localize(None).dt.normalize()
    pred["lead_days"] = pd.to_numeric(pred["lead_days"]).astype(np.int64)
    dup = pred.duplicated(list(KEYS))
    if dup.any():
        raise SkillError(
            f"{int(dup.sum())} prediction row(s) repeat a key (aoi, target_date, lead_days), e.g. "
            f"{pred.loc[dup, list(KEYS)].iloc[0].tolist()}; give one prediction per row"
        )
    rows = frame[frame["chla"].notna()].copy()
    rows["aoi"] = rows["aoi"].astype(str)
    rows["target_date"] = pd.to_datetime(rows["target_date"]).dt.normalize()
    rows["lead_days"] = rows["lead_days"].astype(np.int64)
    joined = pred.merge(rows, on=list(KEYS), how="left", indicator=True)
    lost = joined["_merge"] == "left_only"
    if lost.any():
        raise SkillError(
            f"{int(lost.sum())} prediction row(s) match no feature row with an observation, e.g. "
            f"{joined.loc[lost, list(KEYS)].iloc[0].tolist()}; predict only (aoi, target_date, lead_days) rows of "
            "the lake's features table"
        )
    joined = joined.drop(columns="_merge").rename(columns={"prediction": f"__{name}"})
    return _scored(joined, {name: f"__{name}", **{b: b for b in BASELINES}}, thresholds, window_days)
