"""Lake inflow and nutrient loads from per-sub-basin model outputs.

Takes wide daily frames (index = date, columns = sub-basin ids): discharge in m3 s-1 and
concentrations in mg L-1 (as :func:`lakefeed.sources.hydrology.read_hydrology` returns them),
and the inflow sub-basins. Returns one wide daily frame: lake inflow, lake loads per nutrient
(kg d-1), flow-weighted mean concentrations (mg L-1), per-inflow discharge and loads, and flags.

Which sub-basins make the inflow:

- ``discharge_kind="routed"`` (each sub-basin's discharge includes everything upstream): the
  inflow is the sum over the direct inflows;
- ``"local"`` (runoff generated in each sub-basin alone): the sum over the whole catchment.

The flow at a tributary station on sub-basin S (:func:`station_members`, :func:`summed_flow`) is S's
discharge when it is ``routed``; with ``local`` runoff it is routed here: S's runoff plus that of every
sub-basin upstream of S in the drainage network (the caller passes those ids, e.g.
:meth:`lakefeed.geometry.network.Catchment.upstream_of`). Runoff is summed day by day without
routing delay (the model's daily values are taken to reach the station within the day).

Load = discharge x concentration, converted to kg d-1 with the factor pint derives for
m3 s-1 x mg L-1 (86.4); nothing is hard-coded. Gaps propagate: a day on which any member's
discharge or concentration is missing has a missing lake value (never zero) and a flag
``gap_discharge`` / ``gap_<nutrient>`` naming the members. Pure: no file I/O.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Literal

import numpy as np
import pandas as pd

from lakefeed.exceptions import ExtractError
from lakefeed.geometry.network import Catchment
from lakefeed.units import CANONICAL, factor

__all__ = ["inflow_loads", "inflow_members", "load_factor", "model_subbasins", "station_members", "summed_flow"]


def load_factor(
    discharge_unit: str = "m3 s-1", concentration_unit: str = "mg L-1", load_unit: str = CANONICAL["load"]
) -> float:
    """Factor turning discharge x concentration into a load, derived by pint (86.4 for m3 s-1 x mg L-1 -> kg d-1)."""
    return factor(f"({discharge_unit}) * ({concentration_unit})", load_unit)


def inflow_members(
    direct_inflows: Sequence[str],
    catchment_ids: Sequence[str],
    *,
    discharge_kind: Literal["routed", "local"] = "routed",
) -> list[str]:
    """Sub-basins whose discharge (and loads) add up to the lake inflow, in order.

    ``routed``: the direct inflows; ``local``: every sub-basin of the catchment.
    """
    if _kind(discharge_kind) == "routed":
        return [str(s) for s in direct_inflows]
    return [str(s) for s in catchment_ids]


def _kind(discharge_kind: str) -> str:
    if discharge_kind not in ("routed", "local"):
        raise ExtractError(f"discharge_kind must be 'routed' or 'local', got {discharge_kind!r}")
    return discharge_kind


def station_members(
    subbasin: str,
    upstream: Sequence[str],
    *,
    discharge_kind: Literal["routed", "local"] = "routed",
) -> list[str]:
    """Sub-basins whose discharge adds up to the flow at a station on ``subbasin``, the station's first.

    Parameters
    ----------
    subbasin
        The sub-basin the station lies on (at its outlet).
    upstream
        Every sub-basin upstream of it in the drainage network (not only the neighbours).
    discharge_kind
        ``routed``: the station's own sub-basin only (its discharge includes everything upstream);
        ``local``: the sub-basin and everything upstream (each sub-basin's own runoff).
    """
    if _kind(discharge_kind) == "routed":
        return [str(subbasin)]
    return [str(subbasin), *sorted({str(u) for u in upstream} - {str(subbasin)})]


def model_subbasins(
    catchment: Catchment, stations: Mapping[str, str], *, discharge_kind: Literal["routed", "local"] = "routed"
) -> tuple[list[str], dict[str, list[str]]]:
    """The lake inflow's members and each station's flow members (station id -> sub-basin ids).

    ``stations`` maps a station id to the sub-basin it lies on. Together they are every sub-basin
    whose model series the hydrology stage reads (and ``lakefeed check`` demands).
    """
    members = inflow_members(catchment.direct_inflows, catchment.subbasin_ids, discharge_kind=discharge_kind)
    flows = {
        st: station_members(sub, catchment.upstream_of(sub), discharge_kind=discharge_kind)
        for st, sub in stations.items()
    }
    return members, flows


def summed_flow(discharge: pd.DataFrame, members: Sequence[str], *, name: str = "discharge") -> pd.Series:
    """Day-by-day sum of the members' discharge, m3 s-1; a day on which any member is missing is missing.

    Raises
    ------
    ExtractError
        A member without a discharge series.
    """
    members = [str(m) for m in members]
    missing = [m for m in members if m not in discharge.columns]
    if missing or not members:
        raise ExtractError(
            f"discharge: sub-basin(s) {missing or members} of {name} have no series; columns are "
            f"{list(discharge.columns)}"
        )
    q = discharge[members].astype(float)
    return q.sum(axis=1, min_count=len(members), skipna=False).where(q.notna().all(axis=1)).rename(name)


def _join(parts: list[np.ndarray], sep: str) -> np.ndarray:
    """Element-wise join of string arrays, skipping empty strings (a loop over parts, not rows)."""
    out = np.asarray(parts[0], dtype=object)
    for p in parts[1:]:
        p = np.asarray(p, dtype=object)
        both = (out != "") & (p != "")
        out = np.where(both, out + sep + p, out + p)
    return out


def _gap_flags(mask: pd.DataFrame, label: str) -> np.ndarray:
    """Per day, ``label(id1,id2)`` naming the members with a missing value, else ''."""
    names = _join([np.where(mask[c].to_numpy(), str(c), "") for c in mask.columns], ",")
    return np.where(names != "", label + "(" + names + ")", "").astype(object)


def inflow_loads(
    discharge: pd.DataFrame,
    concentrations: Mapping[str, pd.DataFrame],
    *,
    members: Sequence[str],
    per_inflow: bool = True,
) -> pd.DataFrame:
    """Daily lake inflow, loads and flow-weighted mean concentrations.

    Parameters
    ----------
    discharge
        Daily discharge per sub-basin, m3 s-1 (index = date, columns = sub-basin ids).
    concentrations
        Nutrient name (``tn``, ``tp``, ...) -> daily concentration per sub-basin, mg L-1.
    members
        Sub-basins whose values add up to the inflow (:func:`inflow_members`).
    per_inflow
        Also return ``inflow_<id>_discharge`` and ``<nutrient>_load_<id>`` columns.

    Returns
    -------
    DataFrame indexed by date with ``inflow_discharge`` (m3 s-1), ``<nutrient>_load`` (kg d-1),
    ``<nutrient>_fwmc`` (mg L-1, the inflow's flow-weighted mean concentration = load / (discharge x 86.4)),
    optional per-inflow columns, and ``flags`` (';'-joined; '' when complete).

    Raises
    ------
    ExtractError
        A member missing from the discharge or a concentration frame.
    """
    members = [str(m) for m in members]
    if not members:
        raise ExtractError("no inflow sub-basins: the catchment has no direct inflows")
    for name, frame in {"discharge": discharge, **concentrations}.items():
        missing = [m for m in members if m not in frame.columns]
        if missing:
            raise ExtractError(
                f"{name}: inflow sub-basin(s) {missing} have no series; columns are {list(frame.columns)}"
            )
    index = discharge.index
    q = discharge[members].astype(float)
    k = load_factor()
    out = pd.DataFrame(index=index)
    out["inflow_discharge"] = q.sum(axis=1, min_count=len(members), skipna=False)
    flags = [_gap_flags(q.isna(), "gap_discharge")]
    per: dict[str, pd.Series] = {}
    if per_inflow:
        for m in members:
            per[f"inflow_{m}_discharge"] = q[m]
    for nutrient, conc in concentrations.items():
        c = conc[members].astype(float).reindex(index)
        loads = q * c * k  # NaN where either is missing
        total = loads.sum(axis=1, skipna=False)
        out[f"{nutrient}_load"] = total
        with np.errstate(divide="ignore", invalid="ignore"):
            fwmc = total / (out["inflow_discharge"] * k)
        out[f"{nutrient}_fwmc"] = fwmc.where(out["inflow_discharge"] > 0)
        flags.append(_gap_flags(c.isna(), f"gap_{nutrient}"))
        if per_inflow:
            for m in members:
                per[f"{nutrient}_load_{m}"] = loads[m]
    out["flags"] = _join(flags, ";")
    if per:
        out = pd.concat([out, pd.DataFrame(per, index=index)], axis=1)
    out.index.name = "date"
    return out
