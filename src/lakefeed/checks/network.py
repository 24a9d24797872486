"""Sanity of a sub-basin network given as (id, downstream id) pairs.

Takes plain sequences of ids (strings); returns a :class:`NetworkReport` with the problems
found (duplicate ids, dangling downstream ids, cycles, unknown direct inflows, no sub-basin
reaching the lake), each naming the ids involved, plus what the network looks like. Pure:
no files, no geometry. Built on networkx.

Note: :mod:`lakefeed.geometry.network` (catchment tracing) validates the same rules when it
builds the catchment; this module is the cheap, report-everything variant used by
``lakefeed check``.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field

import networkx as nx

__all__ = ["LAKE_NODE", "OUTSIDE_NODE", "NetworkReport", "check_network"]

LAKE_NODE = "<lake>"
OUTSIDE_NODE = "<outside>"


@dataclass(frozen=True)
class NetworkReport:
    """What :func:`check_network` found.

    ``direct_inflows``: sub-basins whose downstream is the lake (by ``lake_id`` or listed);
    ``catchment``: every sub-basin that drains into the lake, directly or through others;
    ``outside``: sub-basins that drain out of the area (not into the lake).
    """

    problems: list[str] = field(default_factory=list)
    n_subbasins: int = 0
    direct_inflows: list[str] = field(default_factory=list)
    catchment: list[str] = field(default_factory=list)
    outside: list[str] = field(default_factory=list)
    lake_known: bool = True


def _is_blank(v: object) -> bool:
    if v is None:
        return True
    if isinstance(v, float) and v != v:  # NaN
        return True
    return str(v).strip() == ""


def _short(ids: Sequence[str], n: int = 10) -> str:
    ids = list(ids)
    shown = ", ".join(repr(i) for i in ids[:n])
    return shown + (f" and {len(ids) - n} more" if len(ids) > n else "")


def check_network(
    ids: Sequence[object],
    downstream: Sequence[object],
    *,
    lake_id: str | None = None,
    outside_ids: Sequence[str] = (),
    direct_inflows: Sequence[str] | None = None,
) -> NetworkReport:
    """Check a sub-basin network and describe it.

    Parameters
    ----------
    ids
        Sub-basin ids (compared as strings).
    downstream
        Downstream id of each sub-basin, aligned with ``ids``. Blank/None/NaN means "drains
        out of the area".
    lake_id
        Downstream id meaning "drains into the lake"; when it is a sub-basin id, that sub-basin is the
        lake's own (in the catchment, its outflow not followed).
    outside_ids
        Downstream ids meaning "drains out of the area" (case-insensitive).
    direct_inflows
        Sub-basins listed by hand as draining directly into the lake.

    Returns
    -------
    NetworkReport
        Problems (empty when the network is sane) and the network's shape.
    """
    if len(ids) != len(downstream):
        raise ValueError("ids and downstream must have the same length")
    sid = [str(i) for i in ids]
    problems: list[str] = []
    dups = sorted(k for k, n in Counter(sid).items() if n > 1)
    if dups:
        problems.append(f"duplicate sub-basin ids: {_short(dups)}")
    known = set(sid)
    outside = {str(o).strip().upper() for o in outside_ids}
    graph = nx.DiGraph()
    graph.add_nodes_from([LAKE_NODE, OUTSIDE_NODE])
    graph.add_nodes_from(sid)
    dangling: dict[str, list[str]] = {}
    # lake_id naming a sub-basin: the lake's own sub-basin (as in lakefeed.geometry.network). Those draining
    # into it drain into the lake; it belongs to the catchment; its own outflow is not followed.
    own = str(lake_id) if lake_id is not None and str(lake_id) in known else None
    if own is not None:
        graph.add_edge(own, LAKE_NODE)
    for i, d in zip(sid, downstream, strict=True):
        if i == own:
            continue
        if own is not None and not _is_blank(d) and str(d) == own:
            graph.add_edge(i, LAKE_NODE)
            continue
        if _is_blank(d):
            graph.add_edge(i, OUTSIDE_NODE)
            continue
        d = str(d)
        if d in known:
            graph.add_edge(i, d)
        elif lake_id is not None and d == str(lake_id):
            graph.add_edge(i, LAKE_NODE)
        elif d.upper() in outside:
            graph.add_edge(i, OUTSIDE_NODE)
        else:
            dangling.setdefault(d, []).append(i)
    for d, froms in sorted(dangling.items()):
        if lake_id is None:
            why = " and no subbasins.lake_id is set"
        elif not any(str(x) == str(lake_id) for x in downstream):
            why = f" (subbasins.lake_id is {lake_id!r}, which no sub-basin drains into)"
        else:
            why = ""
        problems.append(
            f"dangling downstream id {d!r} (of sub-basin(s) {_short(froms)}): no sub-basin has that id{why}"
        )
    listed = [str(x) for x in direct_inflows or []]
    unknown_listed = [x for x in listed if x not in known]
    if unknown_listed:
        problems.append(f"subbasins.direct_inflows names unknown sub-basin(s): {_short(unknown_listed)}")
    for x in listed:
        if x in known and not graph.has_edge(x, LAKE_NODE):
            graph.add_edge(x, LAKE_NODE)
    loops = sorted(str(u) for u, _ in nx.selfloop_edges(graph))
    if loops:
        problems.append(f"sub-basin(s) draining into themselves: {_short(loops)}")
    comps = sorted(sorted(map(str, c)) for c in nx.strongly_connected_components(graph) if len(c) > 1)
    for comp in comps:
        cycle = [str(u) for u, _ in nx.find_cycle(graph.subgraph(comp), source=comp[0])]
        start = cycle.index(min(cycle))  # start at the smallest id, so the message is stable
        cycle = cycle[start:] + cycle[:start]
        problems.append(f"cycle in the sub-basin network: {' -> '.join([*cycle, cycle[0]])}")
    direct = sorted(str(u) for u in graph.predecessors(LAKE_NODE) if u != own)
    catchment = sorted(str(u) for u in nx.ancestors(graph, LAKE_NODE))
    out = sorted(str(u) for u in nx.ancestors(graph, OUTSIDE_NODE) if u != LAKE_NODE)
    lake_known = lake_id is not None or bool(listed)
    if lake_known and not direct and not dangling:
        problems.append(
            f"no sub-basin drains into the lake (none has downstream id {lake_id!r} nor is listed in direct_inflows)"
        )
    return NetworkReport(
        problems=problems,
        n_subbasins=len(sid),
        direct_inflows=direct,
        catchment=catchment,
        outside=out,
        lake_known=lake_known,
    )
