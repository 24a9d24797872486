"""Shared pieces of the load estimators: inputs, result type, checks and warnings.

Takes samples (``date``, ``concentration`` mg L-1, ``censored``) for one nutrient and a daily flow
Series (m3 s-1); aligns them and returns plain numpy arrays. Pure: no file I/O.

Choices documented here (and in the ``loads`` command's help):

- censored values (below detection; the value given is the detection limit) are replaced by
  half the detection limit (common practice; simple substitution, not a censored-data fit);
- samples dated outside the flow record are an error; samples on a day without flow inside the
  record are dropped with a warning;
- a day without flow has a missing load (never zero); a total over a record with such days is
  missing too, while the mean daily load covers the days with flow;
- uncertainty intervals are 95 % (normal quantile 1.96 for standard errors, 2.5/97.5 percentiles
  for bootstrap intervals).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import pandas as pd

from lakefeed.exceptions import ExtractError

__all__ = [
    "CENSORED_FRACTION",
    "DEFAULT_MIN_SAMPLES",
    "Z95",
    "Aligned",
    "LoadEstimate",
    "align",
    "period_codes",
    "period_sums",
    "periods_frame",
    "standard_warnings",
    "summarise",
]

#: Fraction of the detection limit substituted for a censored value (half: common practice).
CENSORED_FRACTION = 0.5
#: Fewest samples per method before a warning (common practice: a rating curve needs about 30 samples for
#: the bias corrections to hold; about monthly sampling (12 a year) for interpolation and flow weighting;
#: about 20 for the ratio estimator's variance to be usable).
DEFAULT_MIN_SAMPLES: dict[str, int] = {"interpolation": 12, "rating_curve": 30, "beale": 20, "fwmc": 12}
#: Two-sided 95 % normal quantile.
Z95 = 1.959963984540054

Period = Literal["year", "record"]


@dataclass(frozen=True)
class Aligned:
    """Samples joined to the daily flow record (all arrays numpy; loads kg d-1, flow m3 s-1)."""

    days: pd.DatetimeIndex  # the flow record, continuous daily
    flow: np.ndarray  # daily flow on every day (NaN = missing)
    sample_dates: pd.DatetimeIndex
    sample_pos: np.ndarray  # position of each sample's day in ``days``
    conc: np.ndarray  # mg L-1, censored values substituted
    sample_flow: np.ndarray  # m3 s-1 on the sample days
    censored: np.ndarray
    warnings: list[str] = field(default_factory=list)

    @property
    def n(self) -> int:
        return len(self.conc)


@dataclass(frozen=True)
class LoadEstimate:
    """Outcome of one load estimator.

    ``daily`` (index date; ``load``, ``lower``, ``upper`` in kg d-1) for every day of the flow record;
    for period estimators (``kind == "period"``) it is the period estimate spread over the days in
    proportion to flow. ``periods`` has one row per period (and stratum): ``start``, ``end``, ``days``,
    ``n_samples``, ``load_kg``, ``mean_kg_d``, ``se_kg``, ``lower_kg``, ``upper_kg``.
    ``total_kg`` is the load over the whole flow record (NaN when days lack flow), ``mean_kg_d`` the
    mean daily load over days with flow, ``se_kg`` the standard error of the total (for bootstrap
    methods the 95 % interval width / 3.92), ``lower_kg``/``upper_kg`` its 95 % interval, ``uncertainty``
    how they were obtained.
    """

    method: str
    kind: Literal["daily", "period"]
    daily: pd.DataFrame
    periods: pd.DataFrame
    total_kg: float
    mean_kg_d: float
    se_kg: float
    lower_kg: float
    upper_kg: float
    uncertainty: str
    n_samples: int
    warnings: tuple[str, ...] = ()
    details: dict[str, float] = field(default_factory=dict)


def align(samples: pd.DataFrame, flow: pd.Series, *, where: str = "samples") -> Aligned:
    """Join samples (``date``, ``concentration`` mg L-1, optional ``censored``) to a daily flow Series.

    Raises
    ------
    ExtractError
        Missing columns, samples outside the flow record, negative values, no usable sample.
    """
    for col in ("date", "concentration"):
        if col not in samples.columns:
            raise ExtractError(f"{where}: no column {col!r}; columns are {list(samples.columns)}")
    if not isinstance(flow.index, pd.DatetimeIndex) or len(flow) == 0:
        raise ExtractError("flow record: needs a non-empty daily DatetimeIndex")
    days = pd.date_range(flow.index.min().normalize(), flow.index.max().normalize(), freq="D", name="date")
    q = flow.set_axis(flow.index.normalize()).groupby(level=0).mean().reindex(days).to_numpy(dtype=float)
    if np.nanmin(q, initial=0.0) < 0:
        raise ExtractError(f"flow record: negative discharge on {list(days[q < 0][:5].strftime('%Y-%m-%d'))}")
    dates = pd.DatetimeIndex(pd.to_datetime(samples["date"])).normalize()
    outside = dates[(dates < days[0]) | (dates > days[-1])]
    if len(outside):
        raise ExtractError(
            f"{where}: {len(outside)} sample date(s) outside the flow record {days[0]:%Y-%m-%d}..{days[-1]:%Y-%m-%d}: "
            f"{list(outside[:5].strftime('%Y-%m-%d'))}; extend the flow record or drop those samples"
        )
    conc = samples["concentration"].to_numpy(dtype=float)
    if np.isnan(conc).any() or (conc < 0).any():
        bad = dates[np.isnan(conc) | (conc < 0)]
        raise ExtractError(f"{where}: missing or negative concentrations on {list(bad[:5].strftime('%Y-%m-%d'))}")
    censored = (
        samples["censored"].fillna(False).to_numpy(dtype=bool)
        if "censored" in samples.columns
        else np.zeros(len(conc), bool)
    )
    if dates.duplicated().any():
        raise ExtractError(
            f"{where}: duplicate sample dates {list(dates[dates.duplicated()][:5].strftime('%Y-%m-%d'))}; "
            "average them first (lakefeed.sources.samples.read_samples does, with a warning)"
        )
    conc = np.where(censored, conc * CENSORED_FRACTION, conc)
    pos = days.get_indexer(dates)
    sq = q[pos]
    warnings: list[str] = []
    nogap = ~np.isnan(sq)
    if not nogap.all():
        warnings.append(
            f"{int((~nogap).sum())} sample(s) on days without flow dropped: "
            f"{list(dates[~nogap][:5].strftime('%Y-%m-%d'))}"
        )
    if censored.any():
        warnings.append(f"{int(censored.sum())} censored sample(s) set to {CENSORED_FRACTION:g} x detection limit")
    order = np.argsort(pos[nogap], kind="stable")
    keep = np.flatnonzero(nogap)[order]
    if len(keep) == 0:
        raise ExtractError(f"{where}: no sample falls on a day with flow; nothing to estimate from")
    return Aligned(
        days=days,
        flow=q,
        sample_dates=dates[keep],
        sample_pos=pos[keep],
        conc=conc[keep],
        sample_flow=sq[keep],
        censored=censored[keep],
        warnings=warnings,
    )


def period_codes(days: pd.DatetimeIndex, period: Period) -> tuple[np.ndarray, list[tuple[pd.Timestamp, pd.Timestamp]]]:
    """Integer period code per day and (start, end) of each period: calendar years or the whole record."""
    if period == "record":
        return np.zeros(len(days), dtype=int), [(days[0], days[-1])]
    if period != "year":
        raise ExtractError(f"period must be 'year' or 'record', got {period!r}")
    years = days.year.to_numpy()
    uniq = np.unique(years)
    codes = np.searchsorted(uniq, years)
    bounds = [(days[codes == i][0], days[codes == i][-1]) for i in range(len(uniq))]
    return codes, bounds


def standard_warnings(a: Aligned, method: str, min_samples: dict[str, int] | None) -> list[str]:
    """Too few samples for ``method``; prediction flows outside the sampled flow range."""
    out = list(a.warnings)
    family = method.split("_")[0] if method.startswith("beale") else method
    family = "rating_curve" if method.startswith("rating_curve") else family
    need = {**DEFAULT_MIN_SAMPLES, **(min_samples or {})}.get(family, 0)
    if a.n < need:
        out.append(f"only {a.n} samples; {method} needs at least {need} (config samples[].min_samples.{family})")
    lo, hi = float(np.min(a.sample_flow)), float(np.max(a.sample_flow))
    q = a.flow[~np.isnan(a.flow)]
    above, below = int((q > hi).sum()), int((q < lo).sum())
    if above:
        out.append(
            f"{above} day(s) with flow above the sampled range (max sampled {hi:.4g} m3 s-1, "
            f"highest flow {q.max():.4g} m3 s-1)"
        )
    if below:
        out.append(
            f"{below} day(s) with flow below the sampled range (min sampled {lo:.4g} m3 s-1, "
            f"lowest flow {q.min():.4g} m3 s-1)"
        )
    gaps = int(np.isnan(a.flow).sum())
    if gaps:
        out.append(f"{gaps} day(s) without flow: their loads and the record total are missing")
    return out


def summarise(
    a: Aligned,
    daily: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    periods: pd.DataFrame,
    *,
    method: str,
    kind: Literal["daily", "period"],
    se_kg: float,
    lower_kg: float,
    upper_kg: float,
    uncertainty: str,
    warnings: list[str],
    details: dict[str, float] | None = None,
) -> LoadEstimate:
    """Package a result; the total is missing when any day lacks flow."""
    gap = np.isnan(daily).any()
    total = float("nan") if gap else float(np.sum(daily))
    frame = pd.DataFrame({"load": daily, "lower": lower, "upper": upper}, index=a.days)
    nan = float("nan")
    return LoadEstimate(
        method=method,
        kind=kind,
        daily=frame,
        periods=periods,
        total_kg=total,
        mean_kg_d=float(np.nanmean(daily)) if (~np.isnan(daily)).any() else nan,
        se_kg=nan if gap else se_kg,
        lower_kg=nan if gap else lower_kg,
        upper_kg=nan if gap else upper_kg,
        uncertainty=uncertainty,
        n_samples=a.n,
        warnings=tuple(warnings),
        details=dict(details or {}),
    )


def periods_frame(
    bounds: list[tuple[pd.Timestamp, pd.Timestamp]],
    codes: np.ndarray,
    a: Aligned,
    load_kg: np.ndarray,
    se_kg: np.ndarray,
    lower_kg: np.ndarray,
    upper_kg: np.ndarray,
    *,
    stratum: list[str] | None = None,
    days: np.ndarray | None = None,
    n_samples: np.ndarray | None = None,
) -> pd.DataFrame:
    """One row per period: start, end, days, n_samples, load_kg, mean_kg_d, se_kg, lower_kg, upper_kg."""
    k = len(bounds)
    ndays = days if days is not None else np.bincount(codes, minlength=k)
    nsam = n_samples if n_samples is not None else np.bincount(codes[a.sample_pos], minlength=k)
    frame = pd.DataFrame(
        {
            "start": [b[0] for b in bounds],
            "end": [b[1] for b in bounds],
            "days": ndays,
            "n_samples": nsam,
            "load_kg": load_kg,
            "mean_kg_d": np.asarray(load_kg, float) / np.maximum(ndays, 1),
            "se_kg": se_kg,
            "lower_kg": lower_kg,
            "upper_kg": upper_kg,
        }
    )
    if stratum is not None:
        frame.insert(2, "stratum", stratum)
    return frame


def period_sums(values: np.ndarray, codes: np.ndarray, k: int) -> np.ndarray:
    """Sum per period along the last axis (NaN if any day of the period is NaN)."""
    values = np.atleast_2d(values)
    out = np.stack([values[:, codes == i].sum(axis=1) for i in range(k)], axis=-1)
    return out
