"""Check the sub-basin layer as a drainage network, the way the hydrology stage will read it.

Takes the sub-basin and lake layers (as read by :func:`lakefeed.sources.vectors.read_layer`)
and the ``subbasins`` section of the lake config; returns :class:`CheckResult` lines plus the
network report and, when it can be traced, the
:class:`~lakefeed.geometry.network.Catchment`. Two steps:

1. :func:`lakefeed.checks.network.check_network` lists *every* problem at once (duplicate
   ids, dangling downstream ids, cycles, unknown direct inflows), naming the ids;
2. when that finds none, :func:`lakefeed.geometry.network.trace_catchment` (the function the
   hydrology stage uses) traces the catchment, so ``check`` and the stage agree on the rules
   (including finding the lake's id from the sub-basins touching the lake when neither
   ``lake_id`` nor ``direct_inflows`` is configured).

Must not write anything.
"""

from __future__ import annotations

import warnings

import geopandas as gpd
import numpy as np

from lakefeed.checks._result import CheckResult, failed, passed, warned
from lakefeed.checks.network import NetworkReport, check_network
from lakefeed.config import SubbasinLayer
from lakefeed.exceptions import LakefeedError, LakefeedWarning
from lakefeed.geometry.network import LAKE_NODE, Catchment, trace_configured_catchment

__all__ = ["check_subbasin_network"]

NAME = "sub-basin network"
_HINT = (
    "fix the downstream ids in the sub-basin layer; the id meaning 'the lake' goes in subbasins.lake_id, "
    "ids meaning 'drains elsewhere' in subbasins.outside_ids"
)


def _clean(v: object) -> str | None:
    """An id as the network code sees it: None for blank/NaN, '3' for 3.0."""
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return None
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v).strip()


def _trace(
    subbasins: gpd.GeoDataFrame, lake: gpd.GeoDataFrame, cfg: SubbasinLayer
) -> tuple[Catchment | None, list[CheckResult]]:
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", LakefeedWarning)
        try:
            found = trace_configured_catchment(subbasins, lake, cfg)
        except LakefeedError as err:
            return None, [failed(NAME, f"{cfg.path}: {err}", _HINT)]
    notes = [warned(NAME, str(w.message), _HINT) for w in caught if issubclass(w.category, LakefeedWarning)]
    return found, notes


def check_subbasin_network(
    subbasins: gpd.GeoDataFrame, lake: gpd.GeoDataFrame | None, cfg: SubbasinLayer
) -> tuple[list[CheckResult], NetworkReport | None, Catchment | None]:
    """Check the network; trace the catchment when the network is sane and the lake polygon is known."""
    if cfg.downstream_field not in subbasins.columns:
        fields = [c for c in subbasins.columns if c != subbasins.geometry.name]
        return (
            [
                failed(
                    NAME,
                    f"{cfg.path}: no field {cfg.downstream_field!r} (subbasins.downstream_field); fields are {fields}",
                    "set subbasins.downstream_field to the field holding each sub-basin's downstream id",
                )
            ],
            None,
            None,
        )
    catchment: Catchment | None = None
    notes: list[CheckResult] = []
    lake_id = cfg.lake_id
    inferred = ""
    if lake_id is None and not cfg.direct_inflows and lake is not None:
        catchment, notes = _trace(subbasins, lake, cfg)  # may find the lake's id from the shore
        if catchment is not None and catchment.lake_node != LAKE_NODE:
            lake_id = catchment.lake_node
            inferred = (
                f" (the lake lies in sub-basin {lake_id!r})"
                if catchment.rule == "lake_subbasin"
                else f" (lake id {lake_id!r} found from the shore)"
            )
    report = check_network(
        subbasins[cfg.id_field].map(_clean).tolist(),
        subbasins[cfg.downstream_field].map(_clean).tolist(),
        lake_id=lake_id,
        outside_ids=cfg.outside_ids,
        direct_inflows=cfg.direct_inflows,
    )
    if report.problems:
        where = f"{cfg.path} (config key 'subbasins', fields {cfg.id_field!r} -> {cfg.downstream_field!r})"
        return [failed(NAME, f"{where}: {p}", _HINT) for p in report.problems], report, None
    if lake is None:
        return [warned(NAME, "network sane, catchment not traced: the lake polygon is missing", "")], report, None
    if catchment is None:
        catchment, notes = _trace(subbasins, lake, cfg)
    if catchment is None:
        return notes, report, None
    overlap = f"; overlapping the lake: {', '.join(catchment.overlapping)}" if catchment.overlapping else ""
    line = passed(
        NAME,
        f"{report.n_subbasins} sub-basins; catchment of {catchment.n_subbasins} ({catchment.area_km2:.1f} km2); "
        f"direct inflows {', '.join(catchment.direct_inflows)} by rule {catchment.rule}{inferred}; "
        f"{len(report.outside)} drain elsewhere{overlap}",
    )
    return [line, *notes], report, catchment
