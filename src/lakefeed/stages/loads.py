"""Every load estimator side by side for one tributary's samples and daily flow (``lakefeed loads``).

Takes a sample sheet (CSV or ``.xlsx``, described by a :class:`~lakefeed.config.SampleSheet`) and a daily
flow file; reads them (:func:`lakefeed.sources.samples.read_samples`, :func:`~lakefeed.sources.samples.read_flow`),
picks the nutrient, checks that the samples lie in the flow record
(:func:`lakefeed.extract.load_estimation.align`) and runs every estimator
(:func:`lakefeed.extract.load_estimation.compare_methods`). Returns a :class:`LoadComparison`. Must not
print anything (the CLI does).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

from lakefeed.exceptions import LakefeedWarning, SourceError

if TYPE_CHECKING:
    import pandas as pd

    from lakefeed.config import SampleSheet
    from lakefeed.exceptions import ExtractError
    from lakefeed.extract.load_estimation import LoadEstimate

__all__ = ["LoadComparison", "compare_loads"]


@dataclass(frozen=True)
class LoadComparison:
    """The estimates of one nutrient's load by every method.

    Attributes
    ----------
    nutrient, nutrients
        The nutrient estimated and every nutrient the sheet holds.
    samples
        The samples used (concentrations in mg L-1).
    flow
        Daily flow (m3 s-1) indexed by date.
    results
        Estimator name -> :class:`~lakefeed.extract.load_estimation.LoadEstimate` (loads in kg and kg d-1),
        or the :class:`~lakefeed.exceptions.ExtractError` saying why that method gave none.
    warnings
        What reading the files warned about.
    """

    nutrient: str
    nutrients: list[str]
    samples: pd.DataFrame
    flow: pd.Series
    results: dict[str, LoadEstimate | ExtractError]
    warnings: list[str] = field(default_factory=list)


def compare_loads(
    samples: Path,
    flow: Path,
    *,
    sheet: SampleSheet,
    nutrient: str | None = None,
    station: str | None = None,
    period: str = "record",
    seasonal: bool = False,
    trend: bool = False,
) -> LoadComparison:
    """Read the samples and the flow and estimate the load by every method.

    Parameters
    ----------
    samples, sheet
        The sample sheet and how to read it.
    flow
        Daily flow file (m3 s-1).
    nutrient
        The nutrient to estimate; None: the sheet must hold only one.
    station
        Station code, when the sheet holds several.
    period
        ``record`` or ``year``: the periods of the period estimators.
    seasonal, trend
        Seasonal and trend terms of the rating curve.

    Raises
    ------
    SourceError
        Several nutrients and none chosen, or none of the chosen one.
    ExtractError
        Samples outside the flow record, and other input errors of the estimators.
    """
    from lakefeed.extract.load_estimation import align, compare_methods
    from lakefeed.sources.samples import read_flow, read_samples

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", LakefeedWarning)
        table = read_samples(samples, sheet, require_concentration=nutrient is None, station=station)
        q = read_flow(flow)
    names = sorted(table["nutrient"].unique())
    if nutrient is None and len(names) > 1:
        raise SourceError(f"samples {samples}: several nutrients {names}; choose one with --nutrient")
    chosen = nutrient.lower() if nutrient else names[0]
    part = table[table["nutrient"] == chosen]
    if part.empty:
        raise SourceError(f"samples {samples}: no samples of nutrient {chosen!r}; nutrients are {names}")
    align(part, q, where=f"samples {samples}")  # input errors (e.g. samples outside the flow record) stop here
    results = compare_methods(part, q, period=period, seasonal=seasonal, trend=trend)
    return LoadComparison(chosen, names, part, q, results, [str(w.message) for w in caught])
