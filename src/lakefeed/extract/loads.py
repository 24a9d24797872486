"""Lake inflow and nutrient loads from per-sub-basin model outputs.

Takes wide daily frames (index = date, columns = sub-basin ids): discharge in m3 s-1 and
concentrations in mg L-1 (as :func:`lakefeed.sources.hydrology.read_hydrology` returns them),
and the inflow sub-basins. Returns one wide daily frame: lake inflow, lake loads per nutrient
(kg d-1), flow-weighted mean concentrations (mg L-1), per-inflow discharge and loads, and flags.

Which sub-basins make the inflow:

- ``discharge_kind="routed"`` (each sub-basin's discharge includes everything upstream): the
  inflow is the sum over the direct inflows;
- ``"local"`` (runoff generated in each sub-basin alone): the sum over the whole catchment.

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
from lakefeed.units import CANONICAL, factor

__all__ = ["inflow_loads", "inflow_members", "load_factor"]


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
    if discharge_kind == "routed":
        return [str(s) for s in direct_inflows]
    if discharge_kind == "local":
        return [str(s) for s in catchment_ids]
    raise ExtractError(f"discharge_kind must be 'routed' or 'local', got {discharge_kind!r}")


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
