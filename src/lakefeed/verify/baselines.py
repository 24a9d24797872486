"""Baseline forecasts every chlorophyll-a model must beat, and their scores per AOI, lead and fold.

Takes a frame shaped like the ``features`` table (``aoi``, ``target_date``, ``lead_days``, ``fold``, ``chla``,
``persistence_chla``) and the event thresholds; returns the long table stored as ``baseline_skill``
(``aoi, lead_days, baseline, fold, metric, value, n``). Pure: no file I/O, no store.

Baselines, both known at the issue time:

- ``persistence``: the last accepted observation dated on or before the issue date (the features'
  ``persistence_chla``, built without look-ahead by :func:`lakefeed.features.persistence`);
- ``climatology``: the day-of-year mean of ln(chlorophyll-a) of the TRAINING rows, smoothed with a circular
  moving window of ``window_days`` days (sums and counts are smoothed separately, so days without
  observations borrow from their neighbours), back-transformed with exp (the geometric mean, the median
  of a log-normal; no bias correction). Day of year runs over 365 bins; 31 December of a leap year shares
  the last bin.

Folds (``fold`` column, text):

- ``0``, ``1``, ...: the fold's test rows; the climatology is fitted on the other folds (embargoed rows,
  fold -1, fit none and are scored in none);
- ``cv``: the test rows of all folds pooled, each scored with its own fold's climatology (out of sample);
- ``all``: every row with a target, embargoed ones included; the climatology is fitted on all of them (in
  sample: it describes the record, it is no out-of-sample skill).

Metrics: :data:`lakefeed.verify.scores.CONTINUOUS_METRICS` and, per event, the contingency counts and
scores named ``<metric>:<event>`` (:func:`events`). ``n`` is the number of pairs a value uses.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from lakefeed.extract.trophic import CARLSON_BOUNDARIES, OECD_BOUNDARIES, carlson_tsi
from lakefeed.verify.scores import contingency, continuous_scores

__all__ = [
    "BASELINES",
    "DAYS",
    "Event",
    "baseline_predictions",
    "climatology",
    "climatology_at",
    "day_bins",
    "events",
    "fold_rows",
    "score_table",
]

BASELINES = ("persistence", "climatology")
#: Day-of-year bins of the climatology.
DAYS = 365


@dataclass(frozen=True)
class Event:
    """A yes/no chlorophyll-a event: ``name``, the value and whether the value itself counts (``>=``)."""

    name: str
    value: float
    inclusive: bool = True
    scale: str = "chla"  # "chla" (mg m-3) or "tsi" (Carlson's index of the chlorophyll-a)

    def occurs(self, chla: np.ndarray) -> np.ndarray:
        """Boolean event per value (missing values: False)."""
        x = np.asarray(chla, dtype=float)
        if self.scale == "tsi":
            x = np.asarray(carlson_tsi(x), dtype=float)
        with np.errstate(invalid="ignore"):
            return np.where(np.isfinite(x), x >= self.value if self.inclusive else x > self.value, False)


def events(thresholds: Mapping[str, float] | Iterable[object] = ()) -> list[Event]:
    """The events scored: each configured threshold (``chla >= value``, named by the threshold), the OECD (1982)
    boundaries (``oecd>1``, ``oecd>2.5``, ``oecd>8``, ``oecd>25``: above the boundary, which belongs to the
    lower class) and Carlson's TSI class boundaries (``carlson>=40``, ``>=50``, ``>=70``: boundary in the
    upper class), as in :mod:`lakefeed.extract.trophic`."""
    items = thresholds.items() if isinstance(thresholds, Mapping) else ((t.name, t.value) for t in thresholds)  # type: ignore[attr-defined]
    out = [Event(str(name), float(value)) for name, value in items]
    out += [Event(f"oecd>{b:g}", b, inclusive=False) for b in OECD_BOUNDARIES]
    out += [Event(f"carlson>={b:g}", b, scale="tsi") for b in CARLSON_BOUNDARIES]
    return out


def day_bins(dates: pd.Series | pd.DatetimeIndex | np.ndarray) -> np.ndarray:
    """Day-of-year bin 0..364 of dates (366th day of a leap year in bin 364)."""
    doy = pd.DatetimeIndex(pd.to_datetime(np.asarray(dates))).dayofyear.to_numpy()
    return np.minimum(doy, DAYS) - 1


def climatology(dates: np.ndarray | pd.Series, chla: np.ndarray | pd.Series, *, window_days: int = 31) -> np.ndarray:
    """Smoothed day-of-year mean of ln(chlorophyll-a): 365 values (ln(mg m-3); NaN where the window is empty).

    Values <= 0 or missing are left out. ``window_days``: the circular window's length (odd; an even length is
    made odd by adding one day).
    """
    x = np.asarray(chla, dtype=float)
    ok = np.isfinite(x) & (x > 0)
    bins = day_bins(dates)[ok]
    sums = np.bincount(bins, weights=np.log(x[ok]), minlength=DAYS)
    counts = np.bincount(bins, minlength=DAYS).astype(float)
    half = max(int(window_days), 1) // 2
    kernel = np.ones(2 * half + 1)
    wrap = lambda v: np.concatenate([v[-half:], v, v[:half]]) if half else v  # noqa: E731
    s = np.convolve(wrap(sums), kernel, mode="valid")
    c = np.convolve(wrap(counts), kernel, mode="valid")
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(c > 0, s / np.where(c > 0, c, 1.0), np.nan)


def climatology_at(clim: np.ndarray, dates: np.ndarray | pd.Series) -> np.ndarray:
    """The climatology back-transformed (mg m-3: exp of the smoothed mean log) on ``dates``."""
    return np.exp(np.asarray(clim)[day_bins(dates)])


def baseline_predictions(frame: pd.DataFrame, *, window_days: int = 31) -> pd.DataFrame:
    """Per row: ``persistence``, ``climatology_cv`` (its fold's training climatology; NaN for embargoed rows)
    and ``climatology_all`` (the climatology of all rows), per AOI (mg m-3)."""
    out = pd.DataFrame(index=frame.index)
    out["persistence"] = frame["persistence_chla"].astype(float)
    out["climatology_cv"] = np.nan
    out["climatology_all"] = np.nan
    for _, rows in frame.groupby("aoi", sort=False):
        targets = rows.drop_duplicates("target_date")  # one value per date whatever the lead
        fold = targets["fold"].to_numpy()
        dates = rows["target_date"]
        out.loc[rows.index, "climatology_all"] = climatology_at(
            climatology(targets["target_date"], targets["chla"], window_days=window_days), dates
        )
        for k in np.unique(fold[fold >= 0]):
            train = (fold >= 0) & (fold != k)
            clim = climatology(targets["target_date"][train], targets["chla"][train], window_days=window_days)
            test = rows.index[rows["fold"].to_numpy() == k]
            out.loc[test, "climatology_cv"] = climatology_at(clim, frame.loc[test, "target_date"])
    return out


def score_table(
    observed: np.ndarray, predictions: Mapping[str, np.ndarray], event_list: Iterable[Event]
) -> list[tuple[str, str, float, int]]:
    """(name, metric, value, n) of each named prediction against ``observed``: continuous and event scores."""
    obs = np.asarray(observed, dtype=float)
    event_list = list(event_list)
    rows = []
    for name, pred in predictions.items():
        p = np.asarray(pred, dtype=float)
        rows += [(name, m, v, n) for m, (v, n) in continuous_scores(p, obs).items()]
        both = np.isfinite(p) & np.isfinite(obs)
        for ev in event_list:
            table = contingency(ev.occurs(p[both]), ev.occurs(obs[both]))
            rows += [(name, f"{m}:{ev.name}", v, table.n) for m, v in table.scores().items()]
    return rows


def fold_rows(fold: np.ndarray) -> list[tuple[str, np.ndarray, str]]:
    """(label, row mask, climatology column) for each fold's test rows, ``cv`` and ``all``."""
    f = np.asarray(fold)
    out = [(str(int(k)), f == k, "climatology_cv") for k in np.unique(f[f >= 0])]
    out.append(("cv", f >= 0, "climatology_cv"))
    out.append(("all", np.ones(len(f), dtype=bool), "climatology_all"))
    return out
