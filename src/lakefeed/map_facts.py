"""Map facts a build leaves beside the store tables: the traced catchment and the lake's grid-cell weights.

The hydrology stage traces the catchment and the weather stage computes the lake surface's cell weights;
they hand the results here, and the quality report (:mod:`lakefeed.report`) reads them back instead of
tracing or weighting again. Files: ``<store>/_cache/map/<lake>/catchment.json`` (polygon as WKB hex in
the sub-basins' CRS, direct inflows, number of sub-basins) and ``<store>/_cache/map/<lake>/cells.npz``
(cell edges in degrees, lake-surface weight fraction per cell, dimensionless, summing to one).
Each file is written aside and moved into place. Must not: trace, weight or compute anything itself.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import shapely
from shapely.geometry.base import BaseGeometry

__all__ = ["CatchmentFacts", "CellFacts", "read_catchment", "read_cells", "write_catchment", "write_cells"]


@dataclass(frozen=True)
class CatchmentFacts:
    """The catchment as the report shows it.

    Attributes
    ----------
    polygon
        Dissolved catchment polygon in ``crs``.
    crs
        CRS of ``polygon`` (any text pyproj reads), or None when the sub-basin layer had none.
    direct_inflows
        Ids of the sub-basins draining straight into the lake, sorted.
    n_subbasins
        Number of sub-basins in the catchment.
    """

    polygon: BaseGeometry
    crs: str | None
    direct_inflows: tuple[str, ...]
    n_subbasins: int


@dataclass(frozen=True)
class CellFacts:
    """The lake surface's share of each grid cell: ``fractions[i, j]`` for the cell with edges
    ``lat_edges[i:i+2]`` x ``lon_edges[j:j+2]`` (degrees); fractions are dimensionless and sum to one."""

    lon_edges: np.ndarray
    lat_edges: np.ndarray
    fractions: np.ndarray


def _folder(root: str | os.PathLike[str], lake: str) -> Path:
    return Path(root) / "_cache" / "map" / lake


def _replace(path: Path, write: object) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.stem}.{os.getpid()}.tmp{path.suffix}")
    write(tmp)  # type: ignore[operator]
    os.replace(tmp, path)


def write_catchment(root: str | os.PathLike[str], lake: str, facts: CatchmentFacts) -> Path:
    """Store the catchment facts of ``lake`` under the store folder ``root``; returns the file written."""
    data = {
        "polygon_wkb": shapely.to_wkb(facts.polygon, hex=True),
        "crs": facts.crs,
        "direct_inflows": list(facts.direct_inflows),
        "n_subbasins": int(facts.n_subbasins),
    }
    path = _folder(root, lake) / "catchment.json"
    _replace(path, lambda p: p.write_text(json.dumps(data, sort_keys=True), encoding="utf-8"))
    return path


def read_catchment(root: str | os.PathLike[str], lake: str) -> CatchmentFacts | None:
    """The catchment facts the hydrology stage stored for ``lake``, or None when it has not run."""
    path = _folder(root, lake) / "catchment.json"
    if not path.exists():
        return None
    data = json.loads(path.read_text(encoding="utf-8"))
    return CatchmentFacts(
        polygon=shapely.from_wkb(data["polygon_wkb"]),
        crs=data["crs"],
        direct_inflows=tuple(data["direct_inflows"]),
        n_subbasins=int(data["n_subbasins"]),
    )


def write_cells(root: str | os.PathLike[str], lake: str, facts: CellFacts) -> Path:
    """Store the lake surface's cell fractions of ``lake`` under the store folder ``root``; returns the file."""
    path = _folder(root, lake) / "cells.npz"
    arrays = {"lon_edges": facts.lon_edges, "lat_edges": facts.lat_edges, "fractions": facts.fractions}
    _replace(path, lambda p: np.savez(p, **arrays))
    return path


def read_cells(root: str | os.PathLike[str], lake: str) -> CellFacts | None:
    """The lake surface's cell fractions the weather stage stored for ``lake``, or None when it has not run."""
    path = _folder(root, lake) / "cells.npz"
    if not path.exists():
        return None
    with np.load(path, allow_pickle=False) as npz:
        return CellFacts(lon_edges=npz["lon_edges"], lat_edges=npz["lat_edges"], fractions=npz["fractions"])
