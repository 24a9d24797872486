"""Verification scores of forecasts against observations: continuous and from the 2x2 contingency table.

Takes numpy arrays (or anything array-like) of forecast and observed chlorophyll-a (mg m-3) and returns
plain floats. Pure: no file I/O, no store, no Prefect.

Continuous scores (common practice; Wilks, *Statistical Methods in the Atmospheric Sciences*, chapter on
forecast verification, from memory): bias = mean(forecast - observed), MAE = mean |forecast - observed|,
RMSE = sqrt(mean (forecast - observed)^2), Pearson's r; on the linear scale (mg m-3) and on the natural
logarithm of both (``_log``; only pairs with both values > 0).

Contingency scores of a yes/no event (Wilks, same chapter; Jolliffe & Stephenson, *Forecast Verification*,
ch. 3; from memory), with a = hits, b = false alarms, c = misses, d = correct negatives:

- hit rate H = a / (a + c) (probability of detection);
- false-alarm ratio FAR = b / (a + b);
- critical success index CSI = a / (a + b + c) (threat score);
- Peirce skill score PSS = (ad - bc) / ((a + c)(b + d)) = H - F with F = b / (b + d);
- Heidke skill score HSS = 2(ad - bc) / ((a + c)(c + d) + (a + b)(b + d)).

A score whose denominator is zero (no event observed, none forecast) is NaN. These scores describe the
sample they were computed on: they are not a warning system (see :data:`lakefeed.verify.CAUTION`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = [
    "CONTINGENCY_METRICS",
    "CONTINUOUS_METRICS",
    "Contingency",
    "contingency",
    "continuous_scores",
]

#: Continuous metric names: linear scale (mg m-3; r dimensionless) and natural-log scale (``_log``).
CONTINUOUS_METRICS = ("bias", "mae", "rmse", "r", "bias_log", "mae_log", "rmse_log", "r_log")
#: Contingency metric names (dimensionless); stored as ``<metric>:<event>``.
CONTINGENCY_METRICS = ("hits", "false_alarms", "misses", "correct_negatives", "hit_rate", "far", "csi", "pss", "hss")


def _ratio(num: float, den: float) -> float:
    return float(num / den) if den else float("nan")


@dataclass(frozen=True)
class Contingency:
    """A 2x2 contingency table: a hits, b false alarms, c misses, d correct negatives (counts)."""

    a: int
    b: int
    c: int
    d: int

    @property
    def n(self) -> int:
        """Number of forecast-observation pairs."""
        return self.a + self.b + self.c + self.d

    @property
    def hit_rate(self) -> float:
        """H = a / (a + c): fraction of observed events that were forecast."""
        return _ratio(self.a, self.a + self.c)

    @property
    def false_alarm_rate(self) -> float:
        """F = b / (b + d): fraction of observed non-events forecast as events."""
        return _ratio(self.b, self.b + self.d)

    @property
    def far(self) -> float:
        """False-alarm ratio b / (a + b): fraction of forecast events that did not occur."""
        return _ratio(self.b, self.a + self.b)

    @property
    def csi(self) -> float:
        """Critical success index a / (a + b + c)."""
        return _ratio(self.a, self.a + self.b + self.c)

    @property
    def pss(self) -> float:
        """Peirce skill score (ad - bc) / ((a + c)(b + d))."""
        a, b, c, d = (float(v) for v in (self.a, self.b, self.c, self.d))
        return _ratio(a * d - b * c, (a + c) * (b + d))

    @property
    def hss(self) -> float:
        """Heidke skill score 2(ad - bc) / ((a + c)(c + d) + (a + b)(b + d))."""
        a, b, c, d = (float(v) for v in (self.a, self.b, self.c, self.d))
        return _ratio(2.0 * (a * d - b * c), (a + c) * (c + d) + (a + b) * (b + d))

    def scores(self) -> dict[str, float]:
        """The counts and the five scores, keyed by :data:`CONTINGENCY_METRICS`."""
        return {
            "hits": float(self.a),
            "false_alarms": float(self.b),
            "misses": float(self.c),
            "correct_negatives": float(self.d),
            "hit_rate": self.hit_rate,
            "far": self.far,
            "csi": self.csi,
            "pss": self.pss,
            "hss": self.hss,
        }


def contingency(forecast_event: np.ndarray, observed_event: np.ndarray) -> Contingency:
    """Count the 2x2 table of boolean forecast and observed events (same length)."""
    f = np.asarray(forecast_event, dtype=bool)
    o = np.asarray(observed_event, dtype=bool)
    if f.shape != o.shape:
        raise ValueError(f"forecast and observed events differ in shape: {f.shape} vs {o.shape}")
    return Contingency(a=int(np.sum(f & o)), b=int(np.sum(f & ~o)), c=int(np.sum(~f & o)), d=int(np.sum(~f & ~o)))


def _continuous(f: np.ndarray, o: np.ndarray) -> dict[str, float]:
    if f.size == 0:
        return {"bias": np.nan, "mae": np.nan, "rmse": np.nan, "r": np.nan}
    e = f - o
    r = np.nan
    if f.size >= 3 and np.std(f) > 0 and np.std(o) > 0:
        r = float(np.corrcoef(f, o)[0, 1])
    return {
        "bias": float(e.mean()),
        "mae": float(np.abs(e).mean()),
        "rmse": float(np.sqrt((e**2).mean())),
        "r": r,
    }


def continuous_scores(forecast: np.ndarray, observed: np.ndarray) -> dict[str, tuple[float, int]]:
    """Bias, MAE, RMSE and Pearson r on the linear and the natural-log scale.

    Parameters
    ----------
    forecast, observed
        Chlorophyll-a (mg m-3), same length; pairs with a missing value are left out (and, on the log
        scale, pairs with a value <= 0).

    Returns
    -------
    dict
        Metric name (:data:`CONTINUOUS_METRICS`) -> (value, number of pairs used). Bias, MAE and RMSE are in
        mg m-3 on the linear scale and in ln(mg m-3) on the log scale; r is dimensionless (NaN below 3 pairs
        or for a constant series).
    """
    f = np.asarray(forecast, dtype=float)
    o = np.asarray(observed, dtype=float)
    both = np.isfinite(f) & np.isfinite(o)
    out = {k: (v, int(both.sum())) for k, v in _continuous(f[both], o[both]).items()}
    pos = both & (f > 0) & (o > 0)
    logs = _continuous(np.log(f[pos]), np.log(o[pos]))
    out |= {f"{k}_log": (v, int(pos.sum())) for k, v in logs.items()}
    return out
