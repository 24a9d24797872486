"""Zonal means in one pass: NaN renormalisation per step, valid fraction, packed input, laziness."""

from __future__ import annotations

import dask
import dask.array as da
import numpy as np
import pandas as pd
import pytest
import shapely
import xarray as xr

from lakefeed.exceptions import ExtractError
from lakefeed.extract.zonal import zonal_mean, zonal_means
from lakefeed.geometry.weights import zone_weights

LAT = np.round(np.arange(50.05, 51.0, 0.1), 6)[::-1]
LON = np.round(np.arange(10.05, 11.0, 0.1), 6)
TIME = pd.date_range("2024-01-01", periods=30, freq="h")
ZONES = {
    "a": shapely.box(10.2, 50.3, 10.5, 50.7),
    "b": shapely.Polygon([(10.13, 50.22), (10.77, 50.31), (10.55, 50.87), (10.2, 50.6)]),
    "nan_only": shapely.box(LON[0] - 0.05, LAT[0] - 0.05, LON[0] + 0.05, LAT[0] + 0.05),
}


def _grid(lazy: bool) -> xr.DataArray:
    rng = np.random.default_rng(5)
    x = rng.normal(280, 3, size=(TIME.size, LAT.size, LON.size))
    x[:, 0, 0] = np.nan  # the cell of zone nan_only, always
    x[7, 4:6, 2:5] = np.nan  # some cells at one step only (xagg#78)
    data = da.from_array(x, chunks=(8, 5, 5)) if lazy else x
    return xr.DataArray(
        data,
        dims=("time", "latitude", "longitude"),
        coords={"time": TIME, "latitude": LAT, "longitude": LON},
        attrs={"units": "K"},
        name="t",
    )


def _reference(x: np.ndarray, w) -> tuple[np.ndarray, np.ndarray]:
    """Plain per-step loop: NaN cells excluded, weights renormalised (the definition)."""
    m = w.matrix.toarray()
    means = np.full((x.shape[0], m.shape[0]), np.nan)
    fracs = np.zeros_like(means)
    for t in range(x.shape[0]):
        v = x[t].ravel()
        ok = ~np.isnan(v)
        for k in range(m.shape[0]):
            den = m[k, ok].sum()
            fracs[t, k] = den / m[k].sum()
            if den > 0:
                means[t, k] = (m[k, ok] * v[ok]).sum() / den
    return means, fracs


@pytest.mark.parametrize("lazy", [False, True], ids=["numpy", "dask"])
def test_nan_cells_excluded_and_weights_renormalised_per_step(lazy):
    data = _grid(lazy)
    w = zone_weights(ZONES, LAT, LON)
    res = zonal_mean(data, w).compute()
    ref_mean, ref_frac = _reference(np.asarray(_grid(False).values), w)
    np.testing.assert_allclose(res["mean"].values, ref_mean, rtol=1e-12)
    np.testing.assert_allclose(res["valid_fraction"].values, ref_frac, rtol=1e-12)
    # a zone wholly in NaN cells is NaN with valid fraction 0 (not -40 degC nor a neighbour's value)
    assert np.isnan(res["mean"].sel(zone="nan_only")).all()
    assert (res["valid_fraction"].sel(zone="nan_only") == 0).all()
    assert res["valid_fraction"].sel(zone="b").isel(time=7) < 1
    assert res["mean"].attrs["units"] == "K"


def test_stays_lazy_until_asked():
    """Nothing is computed while building the result (extract/ must not compute lazy input; docs/architecture.md)."""
    data = _grid(True)
    w = zone_weights(ZONES, LAT, LON)
    with dask.config.set(scheduler=_refuse):
        res = zonal_mean(data, w)
        both = zonal_means(xr.Dataset({"t": data, "u": data * 2}), w)
    assert isinstance(res["mean"].data, da.Array)
    assert isinstance(both["u"].data, da.Array)
    np.testing.assert_allclose(both["u"].values, 2 * both["t"].values, rtol=1e-12)


def _refuse(*args, **kwargs):
    raise AssertionError("something was computed")


def test_packed_input_decoded_only_in_weighted_cells_equals_decoded_input():
    """CF packing (int16 x scale + offset, fill value) gives the same means as decoding first."""
    decoded = _grid(False)
    scale, offset, fill = 0.002, 280.0, np.int16(-32767)
    raw = np.round((decoded.values - offset) / scale)
    raw = np.where(np.isnan(raw), fill, raw).astype(np.int16)
    exact = np.where(raw == fill, np.nan, raw * scale + offset)
    packed = decoded.copy(data=da.from_array(raw, chunks=(10, 10, 10)))
    packed.attrs = {"units": "K", "scale_factor": scale, "add_offset": offset, "_FillValue": fill}
    w = zone_weights(ZONES, LAT, LON)
    got = zonal_mean(packed, w).compute()
    want = zonal_mean(decoded.copy(data=exact), w)
    np.testing.assert_allclose(got["mean"].values, want["mean"].values, rtol=1e-12)
    assert "scale_factor" not in got["mean"].attrs


def test_shape_mismatch_is_an_error():
    w = zone_weights(ZONES, LAT, LON)
    with pytest.raises(ExtractError, match="differs from the weights"):
        zonal_mean(_grid(False).isel(longitude=slice(0, 9)), w)
