"""Sub-basin network: which sub-basins drain into the lake, and the whole upstream catchment.

Takes a sub-basin GeoDataFrame (one polygon per sub-basin, an id field and a downstream-id
field) and the lake polygon(s); returns a :class:`Catchment` (dissolved polygon in the
sub-basins' CRS, member ids, direct inflows and the rule that found them, geodesic area,
sub-basins overlapping the lake, and the drainage graph). Pure: opens no file.

How the direct inflows (the sub-basins draining straight into the lake) are found, in order:

1. ``direct_inflows`` listed in the config: rule ``"config"``. Each must be a sub-basin id;
   a listed sub-basin whose own downstream id is another sub-basin is an error (it does not
   drain directly into the lake).
2. The lake's own sub-basin (the one the lake lies in), rule ``"lake_subbasin"``: the sub-basins
   draining into it are the direct inflows, and it belongs to the catchment itself (its local
   runoff reaches the lake; its own downstream id, the lake's outflow, is ignored). It is
   ``lake_id`` when that names a sub-basin of the layer; with neither ``lake_id`` nor
   ``direct_inflows``, the sub-basin holding at least half of the lake's area, if another
   sub-basin drains into it.
3. ``lake_id`` configured (and not a sub-basin id): the sub-basins whose downstream id equals it,
   rule ``"lake_id"`` ("the downstream id is the lake's own").
4. Otherwise the outlet rule, ``"outlet_in_lake"``: a sub-basin is terminal when its downstream
   id is not a sub-basin id; terminal sub-basins whose outlet lies in the lake polygon are
   direct inflows. With ``outlets`` (one point per sub-basin) the point must lie within the lake
   (within ``tolerance_m``); without them the outlet is taken to lie on the sub-basin's
   boundary, so the polygon must overlap the lake or share a stretch of shore with it (at least
   ten ``tolerance_m`` of contact; touching at a corner does not count). The
   downstream id those sub-basins share (e.g. ``"LAKE"``) is then recognised as the lake's own.

A downstream id that is neither a sub-basin id nor the lake's is an outlet out of the network
only when it is empty/null or one of ``outside_ids`` (compared case-insensitively; default
``"", "0", "-1", "NONE", "OUTSIDE"``, common practice for "no downstream sub-basin"); any other
is a dangling reference and an error. Sub-basins draining out of the network are simply not
part of the catchment.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterable
from dataclasses import dataclass, field

import geopandas as gpd
import networkx as nx
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS, Geod
from shapely.geometry.base import BaseGeometry

from lakefeed.config.lake import SubbasinLayer
from lakefeed.exceptions import GeometryError, LakefeedWarning
from lakefeed.geometry.outlets import clean_ids, metric_frame, reaches_lake
from lakefeed.units import convert

__all__ = ["DEFAULT_OUTSIDE_IDS", "LAKE_NODE", "Catchment", "trace_catchment", "trace_configured_catchment"]

#: Downstream ids meaning "drains out of the network" (case-insensitive; common practice).
DEFAULT_OUTSIDE_IDS: tuple[str, ...] = ("", "0", "-1", "NONE", "NAN", "OUTSIDE")
#: Node standing for the lake in :attr:`Catchment.graph` when the lake has no id of its own.
LAKE_NODE = "__lake__"
_GEOD = Geod(ellps="WGS84")


@dataclass(frozen=True, eq=False)
class Catchment:
    """The upstream catchment of a lake.

    Attributes
    ----------
    polygon
        Dissolved union of the catchment's sub-basins, in the sub-basins' CRS (``crs``).
    subbasin_ids
        Ids of every sub-basin draining into the lake (direct inflows and all upstream), sorted.
    direct_inflows
        Ids of the sub-basins draining straight into the lake, sorted.
    rule
        Which rule found the direct inflows: ``"config"``, ``"lake_subbasin"``, ``"lake_id"`` or
        ``"outlet_in_lake"``.
    lake_node
        The node standing for the lake in ``graph``: the lake's downstream id (e.g. ``"LAKE"``) or the
        lake's own sub-basin (rule ``lake_subbasin``, which is then also in ``subbasin_ids``).
    area_km2
        Geodesic area of ``polygon`` on the WGS84 ellipsoid, km2.
    overlapping
        Ids of sub-basins (in the catchment or not) whose polygon overlaps the lake's by area.
    graph
        Directed drainage graph: edge ``u -> v`` when ``u`` drains into ``v``; includes ``lake_node``.
    crs
        CRS of ``polygon``.
    """

    polygon: BaseGeometry
    subbasin_ids: tuple[str, ...]
    direct_inflows: tuple[str, ...]
    rule: str
    lake_node: str
    area_km2: float
    overlapping: tuple[str, ...]
    graph: nx.DiGraph = field(repr=False)
    crs: CRS | None = None

    @property
    def n_subbasins(self) -> int:
        """Number of sub-basins in the catchment."""
        return len(self.subbasin_ids)

    def upstream_of(self, subbasin_id: str) -> tuple[str, ...]:
        """Ids of the sub-basins upstream of ``subbasin_id`` (excluding itself), sorted."""
        return tuple(sorted(nx.ancestors(self.graph, subbasin_id)))


def _geodesic_area_km2(polygon: BaseGeometry, crs: CRS) -> float:
    """Area on the WGS84 ellipsoid (pyproj Geod), km2."""
    lonlat = gpd.GeoSeries([polygon], crs=crs).to_crs("EPSG:4326").iloc[0]
    area_m2, _ = _GEOD.geometry_area_perimeter(lonlat)
    return float(convert(abs(area_m2), "m2", "km2"))


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


def trace_catchment(
    subbasins: gpd.GeoDataFrame,
    lake: gpd.GeoDataFrame | gpd.GeoSeries,
    *,
    id_field: str,
    downstream_field: str,
    lake_id: str | None = None,
    direct_inflows: list[str] | None = None,
    outlets: gpd.GeoSeries | None = None,
    outside_ids: Iterable[str] = DEFAULT_OUTSIDE_IDS,
    tolerance_m: float = 1.0,
    where: str = "sub-basin layer",
) -> Catchment:
    """Find the lake's direct inflows and trace the whole upstream catchment.

    Parameters
    ----------
    subbasins
        Sub-basin polygons with a CRS, fields ``id_field`` and ``downstream_field``.
    lake
        Lake polygon(s); reprojected to the sub-basins' CRS when it differs (compared semantically).
    id_field, downstream_field
        Field names of the sub-basin id and of the id of the sub-basin (or lake) it drains into.
    lake_id
        Downstream id meaning "drains into the lake" (e.g. ``"LAKE"``), if the layer uses one.
    direct_inflows
        Sub-basin ids listed in the config as draining directly into the lake.
    outlets
        Optional outlet points indexed by sub-basin id (any CRS), used by the outlet rule.
    outside_ids
        Downstream ids meaning "drains out of the network" (case-insensitive).
    tolerance_m
        Distance, metres, within which a polygon or outlet counts as touching the lake.
    where
        How error messages name the layer (e.g. its file and config key).

    Returns
    -------
    Catchment

    Raises
    ------
    GeometryError
        Missing fields, duplicate ids, a cycle, dangling downstream ids, no sub-basin reaching the
        lake, or a listed direct inflow that drains into another sub-basin; each message names the ids.
    """
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
    is_outside = terminal["down"].isna() | terminal["down"].str.upper().isin(outside)

    if direct_inflows:
        rule = "config"
        listed = [str(x) for x in direct_inflows]
        unknown = sorted(set(listed) - id_set)
        if unknown:
            raise GeometryError(
                f"config subbasins.direct_inflows lists ids not in the sub-basin layer: {unknown}; "
                f"known ids include {sorted(id_set)[:10]}"
            )
        inner = [s for s in listed if frame.at[s, "down"] in id_set and frame.at[s, "down"] != own]
        if inner:
            pairs = [f"{s} -> {frame.at[s, 'down']}" for s in inner]
            raise GeometryError(
                f"config subbasins.direct_inflows lists sub-basins that drain into another sub-basin, not the "
                f"lake: {pairs}; remove them from the list or fix their '{downstream_field}'"
            )
        direct = sorted(set(listed))
        sinks = {s for s in frame.loc[direct, "down"] if s is not None and s.upper() not in outside}
        lake_node = lake_id or (sinks.pop() if len(sinks) == 1 else LAKE_NODE)
    elif own is not None:
        rule = "lake_subbasin"
        lake_node = own
        direct = sorted(graph.predecessors(own))
        if not direct:
            raise GeometryError(
                f"{where}: subbasins.lake_id {own!r} is a sub-basin (the lake's own), but no sub-basin has "
                f"{downstream_field!r} equal to it, so nothing flows into the lake; set subbasins.lake_id to the id "
                "the inflows drain into, or list subbasins.direct_inflows"
            )
    elif lake_id is not None:
        rule = "lake_id"
        lake_node = str(lake_id)
        direct = sorted(terminal.loc[terminal["down"] == lake_node, "id"])
        if not direct:
            found = sorted(set(terminal["down"].dropna()))
            raise GeometryError(
                f"{where}: no sub-basin has {downstream_field!r} equal to the lake id {lake_node!r}, so no outlet "
                f"reaches the lake; downstream ids that are not sub-basins: {found}. Set subbasins.lake_id to the "
                "lake's id in the layer, or list subbasins.direct_inflows"
            )
    else:
        rule = "outlet_in_lake"
        explicit_outside = terminal["down"].notna() & terminal["down"].str.upper().isin(outside - {""})
        cand = terminal.index[~explicit_outside.to_numpy()].tolist()
        if outlets is not None:
            pts = outlets.to_crs(metric.crs) if outlets.crs is not None else outlets
            pts.index = clean_ids(pd.Series(pts.index, index=pts.index)).to_numpy()
            have = [c for c in cand if c in pts.index]
            dist = shapely.distance(pts.loc[have].values, lake_metric)
        else:
            have = cand
            # touching = sharing a stretch of shore, not a corner
            dist = np.where(reaches_lake(metric.loc[have].geometry.values, lake_metric, tolerance_m), 0.0, np.inf)
        direct = sorted(np.asarray(have, dtype=object)[np.asarray(dist) <= tolerance_m].tolist())
        if not direct:
            raise GeometryError(
                f"{where}: no sub-basin outlet reaches the lake: no terminal sub-basin "
                f"({sorted(terminal['id'])}) {'has its outlet point' if outlets is not None else 'touches'} within "
                f"{tolerance_m} m of the lake polygon. Set subbasins.lake_id or list subbasins.direct_inflows"
            )
        sinks = {s for s in frame.loc[direct, "down"] if s is not None and s.upper() not in outside}
        if len(sinks) > 1:
            raise GeometryError(
                f"{where}: sub-basins touching the lake drain into different ids {sorted(sinks)} "
                f"({direct}); set subbasins.lake_id to the lake's own id"
            )
        lake_node = sinks.pop() if sinks else LAKE_NODE
        if lake_node != LAKE_NODE:  # every sub-basin draining into the recognised lake id is a direct inflow
            direct = sorted(set(direct) | set(terminal.loc[terminal["down"] == lake_node, "id"]))

    lake_sinks = {lake_node} | set(frame.loc[direct, "down"].dropna())
    dangling = terminal[~is_outside.to_numpy() & ~terminal["down"].isin(lake_sinks).to_numpy()]
    dangling = dangling[~dangling["id"].isin([*direct, own])]  # the lake's outflow may leave the layer
    if len(dangling):
        pairs = [f"{a} -> {b}" for a, b in zip(dangling["id"], dangling["down"], strict=True)]
        raise GeometryError(
            f"{where}: dangling downstream ids in {downstream_field!r} (neither a sub-basin, the lake "
            f"{lake_node!r}, nor an outside marker {sorted(outside - {''})}): {pairs}; fix the ids, add the "
            "missing sub-basins, or declare the code as draining out of the area (subbasins.outside_ids in the "
            "lake config; `lakefeed init --outside-id CODE`)"
        )
    unlisted = sorted(set(terminal.loc[terminal["down"] == lake_node, "id"]) - set(direct))
    if unlisted:
        warnings.warn(
            f"{where}: sub-basins {unlisted} drain into the lake {lake_node!r} but are not in "
            "subbasins.direct_inflows; they are left out of the catchment",
            LakefeedWarning,
            stacklevel=2,
        )
    graph.add_node(lake_node, kind="lake")
    graph.add_edges_from((d, lake_node) for d in direct)
    members = sorted(nx.ancestors(graph, lake_node) | ({own} if own == lake_node else set()))
    polygon = shapely.union_all(frame.loc[members].geometry.values)
    own_area = shapely.area(metric.geometry.values)
    overlapping = sorted(frame.index[overlap_area > 1e-6 * np.maximum(own_area, 1.0)].tolist())
    return Catchment(
        polygon=polygon,
        subbasin_ids=tuple(members),
        direct_inflows=tuple(direct),
        rule=rule,
        lake_node=lake_node,
        area_km2=_geodesic_area_km2(polygon, CRS.from_user_input(frame.crs)),
        overlapping=tuple(overlapping),
        graph=graph,
        crs=CRS.from_user_input(frame.crs),
    )


def trace_configured_catchment(
    subbasins: gpd.GeoDataFrame,
    lake: gpd.GeoDataFrame | gpd.GeoSeries,
    layer: SubbasinLayer,
    *,
    where: str | None = None,
) -> Catchment:
    """:func:`trace_catchment` with the field names and rules of a lake config's ``subbasins`` section.

    The one place where the configuration is mapped onto the tracing options, so that
    ``lakefeed check``, the weather zones and the hydrology stage apply the same rules.
    """
    return trace_catchment(
        subbasins,
        lake,
        id_field=layer.id_field,
        downstream_field=layer.downstream_field,
        lake_id=layer.lake_id,
        direct_inflows=layer.direct_inflows,
        outside_ids=["", *layer.outside_ids],
        where=where or f"sub-basin layer {layer.path}",
    )
