"""Zonal means of one gridded time series for the zones of many lakes, each time chunk read once.

Takes an ``xarray.DataArray`` (time, lat, lon) and the :class:`~lakefeed.geometry.weights.ZoneWeights`
of several lakes built on that grid (lake surface, areas of interest, catchment, sub-basins: every zone of
every lake). Returns one ``xarray.Dataset`` per lake, exactly what :func:`lakefeed.extract.zonal.zonal_mean`
gives for that lake alone (``mean``, ``valid_fraction`` and optionally ``cell_min``/``cell_max``).

How: the lakes' weights are stacked into one sparse matrix (:class:`UnionWeights`: rows are the zones of
every lake, columns the cells of the smallest window holding every weighted cell of every lake). Each time
chunk of that window is read and decoded once (one ``dask.array.map_blocks`` task per chunk) and every
lake's row block of the matrix is applied to it. A lake's block is applied on its own cells, in the same
order and with the same prepared (cells x zones) weights as a one-lake run: the floating-point sums are the
same, so each lake's result equals its one-lake result bit for bit (a single product over all cells would
add the other lakes' zeros and change the summation order in the last bits). Memory is bounded by the time
chunk of the union window and the number of weighted cells, not by the number of lakes times the record.

Must not: compute dask arrays (everything stays lazy until the caller asks), open files.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import xarray as xr

from lakefeed.exceptions import ExtractError
from lakefeed.extract.zonal import (
    PACKING_ATTRS,
    apply_weights,
    grid_dims,
    packing_of,
    prepare_weights,
    weigh_blocks,
    zonal_dataset,
)
from lakefeed.geometry.weights import ZoneWeights

__all__ = ["UnionWeights", "apply_weights_many", "union_weights", "zonal_mean_many"]

Prepared = tuple[np.ndarray, np.ndarray | sp.csr_matrix, np.ndarray]


@dataclass(frozen=True)
class UnionWeights:
    """The zone weights of several lakes over the union of the cells they weigh.

    Attributes
    ----------
    matrix
        ``scipy.sparse.csr_matrix`` (all zones of all lakes x cells of ``window``), covered cell area in m2;
        lake ``k``'s zones are the rows ``rows[k]``.
    rows
        Row slice of each lake in ``matrix``.
    window
        (lat, lon) index window of the grid holding every weighted cell of every lake.
    prepared
        Per lake, its row block prepared for :func:`~lakefeed.extract.zonal.apply_weights` (weighted cells
        numbered in ``window``, their (cells x zones) weights, zone totals).
    zones
        Zone names per lake.
    shape
        Shape (n_lat, n_lon) of the grid the weights belong to.
    """

    matrix: sp.csr_matrix
    rows: tuple[slice, ...]
    window: tuple[slice, slice]
    prepared: tuple[Prepared, ...]
    zones: tuple[tuple[str, ...], ...]
    shape: tuple[int, int]

    @property
    def n_cells(self) -> int:
        """Number of distinct grid cells weighed by any zone of any lake."""
        return int(np.unique(self.matrix.indices).size)


def union_weights(weights: Sequence[ZoneWeights]) -> UnionWeights:
    """Stack the zone weights of several lakes on one grid over the union of their cells.

    Raises :class:`~lakefeed.exceptions.ExtractError` when the weights belong to different grids.
    """
    if not weights:
        raise ExtractError("no zone weights given; pass the weights of at least one lake")
    first = weights[0]
    for w in weights[1:]:
        if w.shape != first.shape or w.signature != first.signature:
            raise ExtractError(
                f"zone weights of grid {w.signature} {w.shape} and {first.signature} {first.shape} cannot be "
                "computed together; group lakes by the grid files they name"
            )
    windows = [w.cell_window() for w in weights if w.matrix.nnz]
    if windows:
        window = (
            slice(min(w[0].start for w in windows), max(w[0].stop for w in windows)),
            slice(min(w[1].start for w in windows), max(w[1].stop for w in windows)),
        )
    else:
        window = (slice(0, 0), slice(0, 0))
    # each lake's block renumbered for the union window exactly as zonal_mean renumbers it for its own window:
    # the same entries in the same order, so the prepared weights (and the sums made with them) are the same
    blocks = [w.restrict(window) for w in weights]
    stops = np.cumsum([len(w.zones) for w in weights])
    rows = tuple(slice(int(e - len(w.zones)), int(e)) for w, e in zip(weights, stops, strict=True))
    return UnionWeights(
        matrix=sp.vstack(blocks, format="csr"),
        rows=rows,
        window=window,
        prepared=tuple(prepare_weights(b.T.tocsr()) for b in blocks),
        zones=tuple(tuple(w.zones) for w in weights),
        shape=first.shape,
    )


def apply_weights_many(
    block: np.ndarray,
    prepared: Sequence[Prepared],
    packing: tuple[float, float, tuple[float, ...]] | None = None,
    extremes: bool = False,
) -> np.ndarray:
    """:func:`~lakefeed.extract.zonal.apply_weights` of every lake's prepared weights on one (time, cells...) block.

    Returns ndarray (n_time, sum over lakes of the one-lake columns): each lake's means, valid fractions
    (0..1) and, with ``extremes``, the lowest and highest value of its weighed cells, lake after lake.
    """
    return np.concatenate([apply_weights(block, p, packing, extremes) for p in prepared], axis=1)


def zonal_mean_many(
    data: xr.DataArray, weights: Sequence[ZoneWeights] | UnionWeights, *, time_dim: str = "time", extremes: bool = False
) -> list[xr.Dataset]:
    """Area-weighted means of ``data`` over the zones of several lakes, reading each time chunk once.

    Parameters
    ----------
    data
        (time, lat, lon) in the order the weights were built for; any units (kept in ``attrs``).
    weights
        The zone weights of each lake on this grid, or their :func:`union_weights`.
    extremes
        Also give each lake's ``cell_min`` and ``cell_max`` (dims time; data units) over its own cells.

    Returns
    -------
    list of xarray.Dataset, one per lake, each equal to :func:`~lakefeed.extract.zonal.zonal_mean` of that lake
    (``mean`` in data units, ``valid_fraction`` 0..1; dims time, zone). Lazy when ``data`` is dask-backed;
    compute them together (one ``dask.compute``) to read the grid once.
    """
    union = weights if isinstance(weights, UnionWeights) else union_weights(weights)
    ydim, xdim = grid_dims(data, union.shape, time_dim=time_dim)
    sub = data.isel({ydim: union.window[0], xdim: union.window[1]})
    widths = [2 * len(z) + (2 if extremes else 0) for z in union.zones]
    packing = packing_of(data.attrs)
    attrs = {k: v for k, v in data.attrs.items() if k not in PACKING_ATTRS}
    out = weigh_blocks(apply_weights_many, sub.data, union.prepared, packing, extremes, ncol=sum(widths))
    ends = np.cumsum(widths)
    return [
        zonal_dataset(out[:, int(e - n) : int(e)], zones, data[time_dim], attrs=attrs, extremes=extremes)
        for zones, n, e in zip(union.zones, widths, ends, strict=True)
    ]
