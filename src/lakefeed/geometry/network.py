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

from collections.abc import Iterable
from dataclasses import dataclass, field

import geopandas as gpd
import networkx as nx
import numpy as np
import shapely
from pyproj import CRS, Geod
from shapely.geometry.base import BaseGeometry

from lakefeed.config.lake import SubbasinLayer
from lakefeed.geometry.inflow_rules import (
    LAKE_NODE,
    SubbasinNetwork,
    by_config,
    by_lake_id,
    by_lake_subbasin,
    by_outlets,
    check_links,
    subbasin_network,
)
from lakefeed.units import convert

__all__ = ["DEFAULT_OUTSIDE_IDS", "LAKE_NODE", "Catchment", "trace_catchment", "trace_configured_catchment"]

#: Downstream ids meaning "drains out of the network" (case-insensitive; common practice).
DEFAULT_OUTSIDE_IDS: tuple[str, ...] = ("", "0", "-1", "NONE", "NAN", "OUTSIDE")
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
    net = subbasin_network(
        subbasins,
        lake,
        id_field=id_field,
        downstream_field=downstream_field,
        lake_id=lake_id,
        direct_inflows=direct_inflows,
        outside_ids=outside_ids,
        where=where,
    )
    if direct_inflows:
        rule, (direct, lake_node) = "config", by_config(net, direct_inflows, lake_id)
    elif net.own is not None:
        rule, (direct, lake_node) = "lake_subbasin", by_lake_subbasin(net)
    elif lake_id is not None:
        rule, (direct, lake_node) = "lake_id", by_lake_id(net, str(lake_id))
    else:
        rule, (direct, lake_node) = "outlet_in_lake", by_outlets(net, outlets, tolerance_m)
    check_links(net, direct, lake_node)
    return _catchment(net, direct, lake_node, rule)


def _catchment(net: SubbasinNetwork, direct: list[str], lake_node: str, rule: str) -> Catchment:
    """The catchment upstream of ``lake_node`` once its direct inflows are known."""
    frame, graph = net.frame, net.graph
    graph.add_node(lake_node, kind="lake")
    graph.add_edges_from((d, lake_node) for d in direct)
    members = sorted(nx.ancestors(graph, lake_node) | ({net.own} if net.own == lake_node else set()))
    polygon = shapely.union_all(frame.loc[members].geometry.values)
    own_area = shapely.area(net.metric.geometry.values)
    overlapping = sorted(frame.index[net.overlap_area > 1e-6 * np.maximum(own_area, 1.0)].tolist())
    crs = CRS.from_user_input(frame.crs)
    return Catchment(
        polygon=polygon,
        subbasin_ids=tuple(members),
        direct_inflows=tuple(direct),
        rule=rule,
        lake_node=lake_node,
        area_km2=_geodesic_area_km2(polygon, crs),
        overlapping=tuple(overlapping),
        graph=graph,
        crs=crs,
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
