"""Load estimators for a sparsely sampled tributary station.

Takes samples of one nutrient (``date``, ``concentration`` mg L-1, optional ``censored``) and a
daily flow Series (m3 s-1); returns :class:`LoadEstimate` objects (daily loads kg d-1, period and
total loads kg, uncertainty, warnings). Pure: no file I/O.

Methods (names used by the config and by ``lakefeed loads --method``):

=========================  ===============================================  ======================
name                       what                                             uncertainty
=========================  ===============================================  ======================
``interpolation``          linearly interpolated concentration x flow       bootstrap 95 % interval
``rating_curve``           ln L = a + b ln Q, Duan (1983) smearing           delta-method SE
``rating_curve_ferguson``  the same with the Ferguson (1986) correction      delta-method SE
``beale``                  Beale's ratio estimator per calendar year         root MSE
``beale_season``           Beale stratified by season                        root MSE
``beale_flow``             Beale stratified by flow (top 20 % of days)       root MSE
``fwmc``                   flow-weighted mean concentration x total flow     bootstrap 95 % interval
``composite``              rating curve + interpolated log residuals         bootstrap 95 % interval
=========================  ===============================================  ======================

Every method warns when prediction days have flows outside the sampled range and when there are
fewer samples than ``min_samples`` (defaults in :data:`DEFAULT_MIN_SAMPLES`, common practice).
Censored values are set to half the detection limit.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import pandas as pd

from lakefeed.exceptions import ExtractError
from lakefeed.extract.load_estimation._common import (
    CENSORED_FRACTION,
    DEFAULT_MIN_SAMPLES,
    LoadEstimate,
    align,
)
from lakefeed.extract.load_estimation.composite import composite_load
from lakefeed.extract.load_estimation.rating import RatingFit, design_matrix, rating_curve_load
from lakefeed.extract.load_estimation.ratio import beale_load, beale_mean
from lakefeed.extract.load_estimation.simple import fwmc_load, interpolation_load

__all__ = [
    "CENSORED_FRACTION",
    "DEFAULT_MIN_SAMPLES",
    "METHODS",
    "LoadEstimate",
    "RatingFit",
    "align",
    "beale_load",
    "beale_mean",
    "compare_methods",
    "composite_load",
    "design_matrix",
    "estimate_load",
    "fwmc_load",
    "interpolation_load",
    "rating_curve_load",
]

_Estimator = Callable[..., LoadEstimate]

#: Method name -> (function, fixed keyword arguments).
METHODS: dict[str, tuple[_Estimator, dict[str, Any]]] = {
    "interpolation": (interpolation_load, {}),
    "rating_curve": (rating_curve_load, {"correction": "duan"}),
    "rating_curve_ferguson": (rating_curve_load, {"correction": "ferguson"}),
    "beale": (beale_load, {}),
    "beale_season": (beale_load, {"strata": "season"}),
    "beale_flow": (beale_load, {"strata": "flow"}),
    "fwmc": (fwmc_load, {}),
    "composite": (composite_load, {}),
}


def estimate_load(
    samples: pd.DataFrame,
    flow: pd.Series,
    *,
    method: str = "rating_curve",
    min_samples: Mapping[str, int] | None = None,
    **options: Any,
) -> LoadEstimate:
    """Run one estimator by name (see the module table); ``options`` go to the estimator.

    ``rating_curve`` accepts ``correction`` (``duan``/``ferguson``), ``seasonal`` and ``trend``;
    ``beale*`` accept ``finite_population``; all accept ``period`` (``year`` or ``record``).
    """
    if method not in METHODS:
        raise ExtractError(f"unknown load estimation method {method!r}; choose one of {sorted(METHODS)}")
    func, fixed = METHODS[method]
    if func is not rating_curve_load:
        options.pop("correction", None)
    if func not in (rating_curve_load, composite_load):
        options = {k: v for k, v in options.items() if k not in {"seasonal", "trend"}}
    if func is not beale_load:
        options.pop("finite_population", None)
    return func(samples, flow, **{**fixed, **options}, min_samples=dict(min_samples or {}))


def compare_methods(
    samples: pd.DataFrame,
    flow: pd.Series,
    *,
    methods: list[str] | None = None,
    min_samples: Mapping[str, int] | None = None,
    **options: Any,
) -> dict[str, LoadEstimate | ExtractError]:
    """Every method side by side: name -> estimate, or the error that method raised (e.g. too few samples)."""
    out: dict[str, LoadEstimate | ExtractError] = {}
    for name in methods or list(METHODS):
        try:
            out[name] = estimate_load(samples, flow, method=name, min_samples=min_samples, **dict(options))
        except ExtractError as err:
            out[name] = err
    return out
