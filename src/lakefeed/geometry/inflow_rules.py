"""The four rules that find a lake's direct inflows in a sub-basin network, and the checks of the network.

Takes a sub-basin GeoDataFrame (id and downstream-id fields) and the lake polygon(s); gives a validated
:class:`SubbasinNetwork` (drainage graph without cycles, the lake's own sub-basin if any, terminal
sub-basins) and, per rule, the direct inflows and the node standing for the lake: ``config`` (listed in
the lake config), ``lake_subbasin`` (draining into the lake's own sub-basin), ``lake_id`` (downstream id
is the lake's code), ``outlet_in_lake`` (outlet point or shore within a tolerance of the lake).
:func:`lakefeed.geometry.network.trace_catchment` picks the rule. Pure: opens no file.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterable
from dataclasses import dataclass

import geopandas as gpd
import networkx as nx
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS
from shapely.geometry.base import BaseGeometry

from lakefeed.exceptions import GeometryError, LakefeedWarning
from lakefeed.geometry.outlets import clean_ids, metric_frame, reaches_lake

__all__ = [
    "LAKE_NODE",
    "SubbasinNetwork",
    "by_config",
    "by_lake_id",
    "by_lake_subbasin",
    "by_outlets",
    "check_links",
    "subbasin_network",
]

#: Node standing for the lake in :attr:`lakefeed.geometry.network.Catchment.graph` when the lake has no id of its own.
LAKE_NODE = "__lake__"


def _own_subbasin(
    ids: pd.Index,
    overlap_area: np.ndarray,
    lake_area: float,
    graph: nx.DiGraph,
    lake_id: str | None,
    direct_inflows: list[str] | None,
) -> str | None:
    """The lake's own sub-basin: ``lake_id`` when it is a sub-basin id; with neither ``lake_id`` nor
    ``direct_inflows``, the sub-basin holding at least half of the lake's area that others drain into."""
    if lake_id is not None:
        return str(lake_id) if str(lake_id) in graph else None
    if direct_inflows or len(ids) == 0 or lake_area <= 0:
        return None
    best = int(np.argmax(overlap_area))
    if overlap_area[best] >= 0.5 * lake_area and graph.in_degree(ids[best]) > 0:
        return str(ids[best])
    return None


def _check_cycles(graph: nx.DiGraph, where: str, downstream_field: str) -> None:
    """Raise naming each cycle in drainage order (``a -> b -> c -> a``), starting at its smallest id."""
    cycles = []
    for c in nx.simple_cycles(graph):  # nodes in edge order; each node has one downstream, so cycles are few
        c = [str(x) for x in c]
        start = c.index(min(c))
        c = c[start:] + c[:start]
        cycles.append(" -> ".join([*c, c[0]]))
    if cycles:
        shown = "; ".join(sorted(cycles)[:5])
        raise GeometryError(
            f"{where}: {len(cycles)} cycle(s) in the downstream ids ({downstream_field!r}): {shown}; "
            "each sub-basin must drain to exactly one downstream sub-basin, the lake or out of the network: "
            "fix those downstream ids"
        )


@dataclass
class SubbasinNetwork:
    """A validated sub-basin layer: ids, downstream ids, the drainage graph and the lake, as the rules need them."""

    frame: gpd.GeoDataFrame  # indexed by id; columns id, down, geometry
    metric: gpd.GeoDataFrame  # the same in a metric CRS
    lake_metric: BaseGeometry
    overlap_area: np.ndarray  # m2 of each sub-basin overlapping the lake
    graph: nx.DiGraph
    own: str | None  # the lake's own sub-basin, if the layer has one
    terminal: gpd.GeoDataFrame  # sub-basins whose downstream id is not a sub-basin
    outside: set[str]  # upper-case codes for "drains out of the area"
    where: str
    downstream_field: str

    @property
    def ids(self) -> set[str]:
        return set(self.frame.index)


def subbasin_network(
    subbasins: gpd.GeoDataFrame,
    lake: gpd.GeoDataFrame | gpd.GeoSeries,
    *,
    id_field: str,
    downstream_field: str,
    lake_id: str | None,
    direct_inflows: list[str] | None,
    outside_ids: Iterable[str],
    where: str,
) -> SubbasinNetwork:
    """Check the layer's fields, ids and CRS and build the drainage graph among sub-basins (no cycle)."""
    for name in (id_field, downstream_field):
        if name not in subbasins.columns:
            raise GeometryError(
                f"{where}: no field {name!r}; fields are {[c for c in subbasins.columns if c != 'geometry']}; "
                "set id_field/downstream_field in the lake config's 'subbasins' section"
            )
    if subbasins.crs is None:
        raise GeometryError(f"{where}: no CRS; set it before tracing the catchment")
    ids = clean_ids(subbasins[id_field])
    down = clean_ids(subbasins[downstream_field])
    if ids.isna().any():
        raise GeometryError(f"{where}: field {id_field!r} has empty values at rows {list(np.flatnonzero(ids.isna()))}")
    dup = sorted(ids[ids.duplicated()].unique().tolist())
    if dup:
        raise GeometryError(f"{where}: duplicate sub-basin ids in {id_field!r}: {dup}; ids must be unique")
    id_set = set(ids)
    frame = gpd.GeoDataFrame({"id": ids.to_numpy(), "down": down.to_numpy()}, geometry=subbasins.geometry.values)
    frame = frame.set_crs(subbasins.crs, allow_override=True).set_index("id", drop=False)
    lake_geo = lake.geometry if isinstance(lake, gpd.GeoDataFrame) else lake
    if lake_geo.crs is None:
        raise GeometryError("lake polygon has no CRS; set it before tracing the catchment")
    if not CRS.from_user_input(lake_geo.crs).equals(CRS.from_user_input(subbasins.crs)):
        lake_geo = lake_geo.to_crs(subbasins.crs)
    lake_poly = shapely.union_all(lake_geo.values)

    # Drainage graph among sub-basins (sinks added below once the lake's node is known).
    graph = nx.DiGraph()
    graph.add_nodes_from(ids)
    internal = frame[frame["down"].isin(id_set)]
    graph.add_edges_from(zip(internal["id"], internal["down"], strict=True))
    metric = metric_frame(frame)
    lake_metric = gpd.GeoSeries([lake_poly], crs=frame.crs).to_crs(metric.crs).iloc[0]
    overlap_area = shapely.area(shapely.intersection(metric.geometry.values, lake_metric))
    own = _own_subbasin(frame.index, overlap_area, float(lake_metric.area), graph, lake_id, direct_inflows)
    if own is not None:  # the lake is the sink: the outflow of its own sub-basin is not followed
        graph.remove_edges_from(list(graph.out_edges(own)))
    _check_cycles(graph, where, downstream_field)

    outside = {str(o).strip().upper() for o in outside_ids}
    terminal = frame[~frame["down"].isin(id_set)]
    return SubbasinNetwork(
        frame, metric, lake_metric, overlap_area, graph, own, terminal, outside, where, downstream_field
    )


def _sinks(net: SubbasinNetwork, direct: list[str]) -> set[str]:
    """The downstream ids of ``direct`` that are not outside markers."""
    return {s for s in net.frame.loc[direct, "down"] if s is not None and s.upper() not in net.outside}


def by_config(net: SubbasinNetwork, direct_inflows: list[str], lake_id: str | None) -> tuple[list[str], str]:
    """Rule ``config``: the direct inflows listed in the lake config."""
    frame, id_set = net.frame, net.ids
    listed = [str(x) for x in direct_inflows]
    unknown = sorted(set(listed) - id_set)
    if unknown:
        raise GeometryError(
            f"config subbasins.direct_inflows lists ids not in the sub-basin layer: {unknown}; "
            f"known ids include {sorted(id_set)[:10]}"
        )
    inner = [s for s in listed if frame.at[s, "down"] in id_set and frame.at[s, "down"] != net.own]
    if inner:
        pairs = [f"{s} -> {frame.at[s, 'down']}" for s in inner]
        raise GeometryError(
            f"config subbasins.direct_inflows lists sub-basins that drain into another sub-basin, not the "
            f"lake: {pairs}; remove them from the list or fix their '{net.downstream_field}'"
        )
    direct = sorted(set(listed))
    sinks = _sinks(net, direct)
    return direct, lake_id or (sinks.pop() if len(sinks) == 1 else LAKE_NODE)


def by_lake_subbasin(net: SubbasinNetwork) -> tuple[list[str], str]:
    """Rule ``lake_subbasin``: the sub-basins draining into the lake's own sub-basin."""
    own = str(net.own)
    direct = sorted(net.graph.predecessors(own))
    if not direct:
        raise GeometryError(
            f"{net.where}: subbasins.lake_id {own!r} is a sub-basin (the lake's own), but no sub-basin has "
            f"{net.downstream_field!r} equal to it, so nothing flows into the lake; set subbasins.lake_id to the id "
            "the inflows drain into, or list subbasins.direct_inflows"
        )
    return direct, own


def by_lake_id(net: SubbasinNetwork, lake_node: str) -> tuple[list[str], str]:
    """Rule ``lake_id``: the sub-basins whose downstream id is the lake's code."""
    terminal = net.terminal
    direct = sorted(terminal.loc[terminal["down"] == lake_node, "id"])
    if not direct:
        found = sorted(set(terminal["down"].dropna()))
        raise GeometryError(
            f"{net.where}: no sub-basin has {net.downstream_field!r} equal to the lake id {lake_node!r}, so no "
            f"outlet reaches the lake; downstream ids that are not sub-basins: {found}. Set subbasins.lake_id to "
            "the lake's id in the layer, or list subbasins.direct_inflows"
        )
    return direct, lake_node


def by_outlets(net: SubbasinNetwork, outlets: gpd.GeoSeries | None, tolerance_m: float) -> tuple[list[str], str]:
    """Rule ``outlet_in_lake``: terminal sub-basins whose outlet point (or shore) lies within ``tolerance_m``."""
    terminal = net.terminal
    explicit_outside = terminal["down"].notna() & terminal["down"].str.upper().isin(net.outside - {""})
    cand = terminal.index[~explicit_outside.to_numpy()].tolist()
    if outlets is not None:
        pts = outlets.to_crs(net.metric.crs) if outlets.crs is not None else outlets
        pts.index = clean_ids(pd.Series(pts.index, index=pts.index)).to_numpy()
        have = [c for c in cand if c in pts.index]
        dist = shapely.distance(pts.loc[have].values, net.lake_metric)
    else:
        have = cand
        # touching = sharing a stretch of shore, not a corner
        dist = np.where(reaches_lake(net.metric.loc[have].geometry.values, net.lake_metric, tolerance_m), 0.0, np.inf)
    direct = sorted(np.asarray(have, dtype=object)[np.asarray(dist) <= tolerance_m].tolist())
    if not direct:
        raise GeometryError(
            f"{net.where}: no sub-basin outlet reaches the lake: no terminal sub-basin "
            f"({sorted(terminal['id'])}) {'has its outlet point' if outlets is not None else 'touches'} within "
            f"{tolerance_m} m of the lake polygon. Set subbasins.lake_id or list subbasins.direct_inflows"
        )
    sinks = _sinks(net, direct)
    if len(sinks) > 1:
        raise GeometryError(
            f"{net.where}: sub-basins touching the lake drain into different ids {sorted(sinks)} "
            f"({direct}); set subbasins.lake_id to the lake's own id"
        )
    lake_node = sinks.pop() if sinks else LAKE_NODE
    if lake_node != LAKE_NODE:  # every sub-basin draining into the recognised lake id is a direct inflow
        direct = sorted(set(direct) | set(terminal.loc[terminal["down"] == lake_node, "id"]))
    return direct, lake_node


def check_links(net: SubbasinNetwork, direct: list[str], lake_node: str) -> None:
    """Refuse dangling downstream ids; warn about sub-basins draining into the lake but not listed."""
    terminal, outside = net.terminal, net.outside
    is_outside = terminal["down"].isna() | terminal["down"].str.upper().isin(outside)
    lake_sinks = {lake_node} | set(net.frame.loc[direct, "down"].dropna())
    dangling = terminal[~is_outside.to_numpy() & ~terminal["down"].isin(lake_sinks).to_numpy()]
    dangling = dangling[~dangling["id"].isin([*direct, net.own])]  # the lake's outflow may leave the layer
    if len(dangling):
        pairs = [f"{a} -> {b}" for a, b in zip(dangling["id"], dangling["down"], strict=True)]
        raise GeometryError(
            f"{net.where}: dangling downstream ids in {net.downstream_field!r} (neither a sub-basin, the lake "
            f"{lake_node!r}, nor an outside marker {sorted(outside - {''})}): {pairs}; fix the ids, add the "
            "missing sub-basins, or declare the code as draining out of the area (subbasins.outside_ids in the "
            "lake config; `lakefeed init --outside-id CODE`)"
        )
    unlisted = sorted(set(terminal.loc[terminal["down"] == lake_node, "id"]) - set(direct))
    if unlisted:
        warnings.warn(
            f"{net.where}: sub-basins {unlisted} drain into the lake {lake_node!r} but are not in "
            "subbasins.direct_inflows; they are left out of the catchment",
            LakefeedWarning,
            stacklevel=3,
        )
