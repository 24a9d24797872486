"""Hand the map facts of a build to :mod:`lakefeed.map_facts`: the catchment traced and the lake's cell weights.

Takes what the hydrology and weather stages computed anyway (a :class:`~lakefeed.geometry.network.Catchment`,
:class:`~lakefeed.geometry.weights.ZoneWeights` and the grid's cell centres); writes the files the quality
report reads. Must not trace or weight anything again.
"""

from __future__ import annotations

import numpy as np

from lakefeed.geometry.network import Catchment
from lakefeed.geometry.weights import ZoneWeights
from lakefeed.map_facts import CatchmentFacts, CellFacts, write_catchment, write_cells
from lakefeed.store import Store

__all__ = ["record_catchment", "record_cells"]


def record_catchment(store: Store, lake: str, catchment: Catchment) -> None:
    """Store the catchment polygon, its direct inflows and its size for the report."""
    crs = None if catchment.crs is None else catchment.crs.to_wkt()
    facts = CatchmentFacts(catchment.polygon, crs, tuple(catchment.direct_inflows), catchment.n_subbasins)
    write_catchment(store.root, lake, facts)


def _edges(centres: np.ndarray) -> np.ndarray:
    """Cell edges (degrees) from cell centres: midpoints inside, the end cells mirrored outside."""
    mid = (centres[1:] + centres[:-1]) / 2
    return np.concatenate([[2 * centres[0] - mid[0]], mid, [2 * centres[-1] - mid[-1]]])


def record_cells(store: Store, lake: str, weights: ZoneWeights, lat: np.ndarray, lon: np.ndarray) -> None:
    """Store the lake surface's weight fraction per grid cell (dimensionless, sum one) and the cell edges."""
    row = np.asarray(weights.matrix[list(weights.zones).index("lake")].todense()).ravel()
    frac = (row / row.sum()).reshape(weights.shape) if row.sum() > 0 else row.reshape(weights.shape)
    write_cells(store.root, lake, CellFacts(_edges(np.asarray(lon)), _edges(np.asarray(lat)), frac))
