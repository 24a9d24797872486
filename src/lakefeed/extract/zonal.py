"""Area-weighted zonal means of gridded time series for all zones in one pass.

Takes an ``xarray.DataArray`` with dims (time, <lat>, <lon>) in the grid order the weights
were built for (numpy- or dask-backed) and a :class:`lakefeed.geometry.weights.ZoneWeights`.
Returns an ``xarray.Dataset`` with ``mean`` and ``valid_fraction`` (dims time, zone). The
sparse weight matrix is applied to each time chunk of the array (``dask.array.map_blocks``):
the grid is read once, for every zone at once, and memory depends on the chunk size, not the
record length. Only the window of cells that carries weight is read. A CF-packed variable
opened undecoded (attributes ``scale_factor``/``add_offset``/``_FillValue`` still present) is
decoded inside each block for the weighted cells only: exact, as the weighted mean is linear.

NaN cells are left out and the remaining weights renormalised at every time step; the valid
covered-area fraction of each zone and step is ``valid_fraction`` (0..1; multiply by the
zone's ``grid_coverage`` for the fraction of the whole zone). A zone whose cells are all NaN
at a step gives NaN with valid fraction 0.

Must not: compute dask arrays (everything stays lazy until the caller asks), open files.
"""

from __future__ import annotations

from collections.abc import Callable, Hashable, Sequence
from typing import Any

import dask.array as da
import numpy as np
import scipy.sparse as sp
import xarray as xr

from lakefeed.exceptions import ExtractError
from lakefeed.geometry.weights import ZoneWeights

__all__ = [
    "PACKING_ATTRS",
    "apply_weights",
    "grid_dims",
    "packing_of",
    "prepare_weights",
    "weigh_blocks",
    "zonal_dataset",
    "zonal_mean",
    "zonal_means",
]


#: Above this many (cells x zones) entries the weights are applied as a sparse matrix, else dense BLAS.
DENSE_LIMIT = 4_000_000


def prepare_weights(weights_t: sp.csr_matrix) -> tuple[np.ndarray, np.ndarray | sp.csr_matrix, np.ndarray]:
    """Weighted cell indices, their (cells x zones) weights (dense when small) and zone totals (m2).

    ``weights_t``: sparse (cells x zones) weights, cells numbered row-major in the window read.
    """
    w = sp.csr_matrix(weights_t)
    cols = np.flatnonzero(np.diff(w.indptr))
    sub = w[cols]
    total = np.asarray(sub.sum(axis=0)).ravel()
    dense = sub.toarray() if sub.shape[0] * sub.shape[1] <= DENSE_LIMIT else sub.tocsc()
    return cols, dense, total


#: CF packing attributes (present when a grid was opened without decoding; see sources.grids).
PACKING_ATTRS = ("scale_factor", "add_offset", "_FillValue", "missing_value")


def packing_of(attrs: dict) -> tuple[float, float, tuple[float, ...]] | None:
    """(scale, offset, fill values) of an undecoded CF-packed variable, or None when decoded."""
    if not any(k in attrs for k in PACKING_ATTRS):
        return None
    fills = []
    for k in ("_FillValue", "missing_value"):
        if k in attrs:
            fills.extend(np.atleast_1d(attrs[k]).astype(float).tolist())
    return float(attrs.get("scale_factor", 1.0)), float(attrs.get("add_offset", 0.0)), tuple(fills)


def apply_weights(
    block: np.ndarray,
    weights_t: sp.csr_matrix | tuple[np.ndarray, np.ndarray | sp.csr_matrix, np.ndarray],
    packing: tuple[float, float, tuple[float, ...]] | None = None,
    extremes: bool = False,
) -> np.ndarray:
    """Weighted means and valid fractions of one (time, cells...) block (and the weighed cells' extremes).

    Parameters
    ----------
    block
        Array (n_time, ...) whose trailing dims flatten to the cells of ``weights_t``.
    weights_t
        Sparse (cells x zones) weight matrix (transposed zone weights), or its prepared form.
    packing
        (scale, offset, fill values) when ``block`` holds undecoded CF-packed values: only the
        weighted cells are decoded (the weighted mean is linear, so this is exact).

    Returns
    -------
    ndarray (n_time, 2 * n_zones): means in the block's (decoded) units, then valid fractions (0..1).
    """
    cols, w, total = weights_t if isinstance(weights_t, tuple) else prepare_weights(weights_t)
    nt = block.shape[0]
    x = np.asarray(block).reshape(nt, -1)[:, cols]  # a copy (fancy indexing): changed in place below
    bad = None
    if packing is not None:
        scale, offset, fills = packing
        for f in fills:  # exact comparisons with the stored values
            bad = x == f if bad is None else bad | (x == f)
        if x.dtype.kind not in "iu":  # stored floats may hold NaN besides the fill values
            bad = np.isnan(x) if bad is None else bad | np.isnan(x)
        x = x.astype(np.float64)
        if scale != 1.0:
            x *= scale
        if offset != 0.0:
            x += offset
    nan = np.isnan(x) if bad is None else bad
    ext = None
    if extremes:
        ext = np.full((nt, 2), np.nan)
        some = ~nan.all(axis=1) if x.shape[1] else np.zeros(nt, bool)
        if some.any():
            ext[some, 0] = np.where(nan, np.inf, x)[some].min(axis=1)
            ext[some, 1] = np.where(nan, -np.inf, x)[some].max(axis=1)
    if nan.any():
        x[nan] = 0.0
        num = np.asarray(x @ w)
        den = np.asarray((~nan).astype(w.dtype) @ w)
    else:
        num = np.asarray(x @ w)
        den = np.broadcast_to(total, num.shape)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)
        frac = den / np.where(total > 0, total, 1.0)
    return np.concatenate([mean, frac] if ext is None else [mean, frac, ext], axis=1)


def grid_dims(data: xr.DataArray, shape: tuple[int, int], *, time_dim: str = "time") -> tuple[str, str]:
    """The (lat, lon) dim names of a (time, lat, lon) array whose grid must have ``shape`` (the weights' grid)."""
    if data.ndim != 3 or data.dims[0] != time_dim:
        raise ExtractError(
            f"variable {data.name!r}: expected dims ({time_dim}, lat, lon), got {data.dims}; "
            "open it with lakefeed.sources.grids.open_grid"
        )
    if tuple(data.shape[1:]) != tuple(shape):
        raise ExtractError(
            f"variable {data.name!r}: grid shape {data.shape[1:]} differs from the weights' grid {shape}; "
            "rebuild the weights for this grid"
        )
    return str(data.dims[1]), str(data.dims[2])


def zonal_mean(
    data: xr.DataArray, weights: ZoneWeights, *, time_dim: str = "time", extremes: bool = False
) -> xr.Dataset:
    """Area-weighted mean of ``data`` over every zone, at every time step.

    Parameters
    ----------
    data
        (time, lat, lon) in the order the weights were built for; any units (kept in ``attrs``).
    weights
        Zone weights of this grid (``weights.shape`` must equal the spatial shape).
    extremes
        Also give ``cell_min`` and ``cell_max`` (dims time; data units): the lowest and highest value
        of the cells any zone weighs, read in the same pass.

    Returns
    -------
    xarray.Dataset with ``mean`` (data units) and ``valid_fraction`` (1), dims (time, zone).
    Lazy when ``data`` is dask-backed.
    """
    ydim, xdim = grid_dims(data, weights.shape, time_dim=time_dim)
    window = weights.cell_window()
    sub = data.isel({ydim: window[0], xdim: window[1]})
    wt = prepare_weights(weights.restrict(window).T.tocsr())
    nz = len(weights.zones)
    ncol = 2 * nz + (2 if extremes else 0)
    packing = packing_of(data.attrs)
    attrs = {k: v for k, v in data.attrs.items() if k not in PACKING_ATTRS}
    out = weigh_blocks(apply_weights, sub.data, wt, packing, extremes, ncol=ncol)
    return zonal_dataset(out, weights.zones, data[time_dim], attrs=attrs, extremes=extremes)


def weigh_blocks(func: Callable[..., np.ndarray], arr: np.ndarray | da.Array, *args: Any, ncol: int) -> Any:
    """``func(block, *args)`` on each time chunk of a (time, lat, lon) array: (time, ``ncol``), lazy for dask input.

    ``func`` is :func:`apply_weights` or a function like it (one row of ``ncol`` columns per time step).
    """
    if not isinstance(arr, da.Array):
        return func(np.asarray(arr), *args)
    arr = arr.rechunk({1: -1, 2: -1})
    return da.map_blocks(
        func,
        arr,
        *args,
        drop_axis=[1, 2],
        new_axis=[1],
        chunks=(arr.chunks[0], (ncol,)),
        dtype=np.float64,
        meta=np.empty((0, 0), dtype=np.float64),
    )


def zonal_dataset(
    out: np.ndarray | da.Array, zones: Sequence[str], time: xr.DataArray, *, attrs: dict, extremes: bool = False
) -> xr.Dataset:
    """The Dataset of :func:`zonal_mean` from the columns :func:`apply_weights` gives (means, fractions[, extremes]).

    ``attrs``: the data's attributes without packing (units of ``mean`` and the extremes).
    """
    nz = len(zones)
    time_dim = str(time.dims[0])
    coords = {time_dim: time, "zone": list(zones)}
    mean = xr.DataArray(out[:, :nz], dims=(time_dim, "zone"), coords=coords, attrs=attrs)
    frac = xr.DataArray(out[:, nz : 2 * nz], dims=(time_dim, "zone"), coords=coords, attrs={"units": "1"})
    res = xr.Dataset({"mean": mean, "valid_fraction": frac})
    if extremes:
        tc = {time_dim: time}
        res["cell_min"] = xr.DataArray(out[:, 2 * nz], dims=(time_dim,), coords=tc, attrs=attrs)
        res["cell_max"] = xr.DataArray(out[:, 2 * nz + 1], dims=(time_dim,), coords=tc, attrs=attrs)
    return res


def zonal_means(
    dataset: xr.Dataset,
    weights: ZoneWeights,
    *,
    variables: Sequence[Hashable] | None = None,
    time_dim: str = "time",
) -> xr.Dataset:
    """:func:`zonal_mean` of several variables of one grid (lazy; compute them together to read once).

    Returns a Dataset with one (time, zone) variable per input variable and
    ``valid_fraction__<name>`` beside each.
    """
    out = {}
    for name in variables if variables is not None else list(dataset.data_vars):
        res = zonal_mean(dataset[name], weights, time_dim=time_dim)
        out[name] = res["mean"]
        out[f"valid_fraction__{name}"] = res["valid_fraction"]
    return xr.Dataset(out)
