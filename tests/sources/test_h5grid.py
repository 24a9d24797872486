"""The h5py fast path of open_grid: same stored values as netCDF4 for every layout and selection.

Reference: netCDF4-python (the library xarray's default NetCDF engine uses) reading the same files
with ``set_auto_maskandscale(False)``; and xarray's own open_dataset/concat for whole grids.
"""

from __future__ import annotations

import sys
from pathlib import Path

import netCDF4
import numpy as np
import pandas as pd
import pytest
import xarray as xr

from lakefeed.sources import _h5grid
from lakefeed.sources._h5read import H5Stack, H5Variable, _read_chunks
from lakefeed.sources.grids import open_grid

NT, NY, NX = 30, 13, 11


def _file(path: Path, start: str = "2024-01-01", *, nt: int = NT, scale: float = 0.01) -> Path:
    """A NetCDF-4 file with variables stored in several ways (partial edge chunks everywhere)."""
    rng = np.random.default_rng(abs(hash((str(path), start))) % 2**32)
    with netCDF4.Dataset(path, "w") as nc:
        nc.createDimension("time", None)
        nc.createDimension("latitude", NY)
        nc.createDimension("longitude", NX)
        t = nc.createVariable("time", "i4", ("time",))
        t.units, t.calendar = f"hours since {pd.Timestamp(start)}", "gregorian"
        t[:] = np.arange(nt)
        lat = nc.createVariable("latitude", "f8", ("latitude",))
        lat.units, lat.standard_name = "degrees_north", "latitude"
        lat[:] = 50.0 - 0.1 * np.arange(NY)
        lon = nc.createVariable("longitude", "f8", ("longitude",))
        lon.units, lon.standard_name = "degrees_east", "longitude"
        lon[:] = 5.0 + 0.1 * np.arange(NX)
        dims = ("time", "latitude", "longitude")
        specs = {
            "packed": dict(datatype="i2", zlib=True, shuffle=True, chunksizes=(7, 5, 4), fill_value=np.int16(-32767)),
            "plain": dict(datatype="f4", zlib=True, shuffle=False, chunksizes=(8, 13, 3)),
            "big": dict(datatype=np.dtype(">i4"), zlib=True, shuffle=True, chunksizes=(4, 6, 11), endian="big"),
            "check": dict(datatype="f8", zlib=True, fletcher32=True, chunksizes=(5, 5, 5)),
            "sparse": dict(datatype="f4", zlib=True, chunksizes=(10, 13, 11), fill_value=np.float32(-1.0)),
            "nanfill": dict(
                datatype="f4", zlib=True, shuffle=True, chunksizes=(6, 7, 11), fill_value=np.float32("nan")
            ),
        }
        for name, spec in specs.items():
            v = nc.createVariable(name, dimensions=dims, **spec)
            v.units = "K"
            v.set_auto_maskandscale(False)
            if name == "packed":
                v.scale_factor, v.add_offset, v.standard_name = scale, 270.0, "air_temperature"
                vals = rng.integers(-30000, 30000, (nt, NY, NX)).astype("i2")
                vals[:, 0, 0] = -32767  # fill
                v[:] = vals
            elif name == "sparse":  # the chunks of steps 10-19 are never written (fill value)
                v[:10] = rng.normal(size=(10, NY, NX)).astype("f4")
                v[20:] = rng.normal(size=(nt - 20, NY, NX)).astype("f4")
            else:
                v[:] = rng.normal(0, 1000, (nt, NY, NX)).astype(np.dtype(spec["datatype"]).newbyteorder("="))
    return path


def _stored(path: Path, name: str) -> np.ndarray:
    with netCDF4.Dataset(path) as nc:
        v = nc[name]
        v.set_auto_maskandscale(False)
        return np.asarray(v[:])


KEYS = [
    (slice(0, NT), slice(0, NY), slice(0, NX)),
    (slice(3, 17), slice(2, 9), slice(5, 11)),
    (slice(29, 30), slice(12, 13), slice(0, 1)),
    (slice(None), slice(4, 5), slice(None)),
]


@pytest.mark.parametrize("name", ["packed", "plain", "big", "check", "sparse", "nanfill"])
@pytest.mark.parametrize("key", KEYS)
def test_variable_reads_the_stored_values(tmp_path, name, key):
    path = _file(tmp_path / "a.nc")
    want = _stored(path, name)[key]
    var = H5Variable(str(path), name, (NT, NY, NX), want.dtype.newbyteorder("="), 2**20)
    got = var[key]
    assert got.dtype.isnative and got.dtype == want.dtype.newbyteorder("=")
    np.testing.assert_array_equal(got, want)


def test_direct_chunk_path_is_taken_only_for_deflate_and_shuffle(tmp_path):
    import h5py

    path = _file(tmp_path / "a.nc")
    key = KEYS[1]
    with h5py.File(path, "r") as h:
        for name in ("packed", "plain", "big"):  # [shuffle+]deflate: decompressed here
            got = _read_chunks(h[name], key)
            assert got is not None
            np.testing.assert_array_equal(got, _stored(path, name)[key])
        assert _read_chunks(h["check"], key) is None  # fletcher32: h5py reads it
        assert _read_chunks(h["sparse"], (slice(0, NT), slice(0, NY), slice(0, NX))) is None  # unwritten chunks
        assert _read_chunks(h["packed"], (slice(0, NT, 2), slice(0, NY), slice(0, NX))) is None  # strided


@pytest.mark.parametrize(
    "key",
    [
        (slice(25, 40), slice(1, 12), slice(2, 3)),  # across the file boundary
        (slice(0, 30),),
        (slice(58, 60), slice(None), slice(None)),
        (31, slice(None), 4),
        (-1, 0, 0),
        ([2, 29, 30, 45], slice(0, 3), slice(None)),
        (slice(5, 50, 7), slice(None), slice(None)),
        (slice(10, 10), slice(0, 4), slice(None)),
    ],
)
def test_stack_across_files_equals_the_concatenation(tmp_path, key):
    paths = [_file(tmp_path / "a.nc"), _file(tmp_path / "b.nc", "2024-01-02 06:00")]
    want = np.concatenate([_stored(p, "packed") for p in paths])[key]
    parts = [H5Variable(str(p), "packed", (NT, NY, NX), np.dtype("i2"), 2**20) for p in paths]
    got = H5Stack(parts)[key]
    assert got.shape == want.shape
    np.testing.assert_array_equal(got, want)


def test_open_grid_fast_path_matches_xarray(tmp_path):
    starts = ["2024-01-01", "2024-01-02 06:00", "2024-01-03 12:00"]
    paths = [_file(tmp_path / f"m{i}.nc", s) for i, s in enumerate(starts)]
    grid = open_grid(str(tmp_path / "m*.nc"))
    ds = grid.dataset
    assert ds["packed"].data.name.startswith("h5-")  # one array over every file: windows fuse into reads
    ref = xr.concat(
        [xr.open_dataset(p, mask_and_scale=False).transpose("time", "latitude", "longitude") for p in paths],
        dim="time",
    )
    for name in ("packed", "plain", "big", "check", "sparse", "nanfill"):  # NaN fill values compare equal
        win = ds[name].isel(latitude=slice(2, 9), longitude=slice(3, 10))
        np.testing.assert_array_equal(win.values, ref[name].isel(latitude=slice(2, 9), longitude=slice(3, 10)).values)
        np.testing.assert_equal(ds[name].attrs, ref[name].attrs)  # NaN == NaN here
    np.testing.assert_array_equal(ds["time"].values, ref["time"].values)
    assert pd.Timestamp(ds["time"].values[NT]) == pd.Timestamp("2024-01-02 06:00")


def test_a_file_laid_out_differently_is_opened_the_general_way(tmp_path):
    _file(tmp_path / "m0.nc", "2024-01-01")
    _file(tmp_path / "m1.nc", "2024-01-02 06:00", scale=0.02)  # other packing: not read like the first
    assert _h5grid.open_like(tmp_path / "m1.nc", _layout(tmp_path / "m0.nc")) is None
    grid = open_grid(str(tmp_path / "m*.nc"))
    assert grid.dataset.sizes["time"] == 2 * NT
    np.testing.assert_array_equal(grid.dataset["plain"].values[NT:], _stored(tmp_path / "m1.nc", "plain"))


def _layout(path: Path) -> _h5grid.Layout:
    from lakefeed.sources.grids import _open_one

    _ds, lay = _open_one(path, None)
    assert lay is not None
    return lay


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="fork start method")
def test_forked_worker_opens_its_own_handles(tmp_path):
    import multiprocessing

    path = _file(tmp_path / "a.nc")
    var = H5Variable(str(path), "plain", (NT, NY, NX), np.dtype("f4"), 2**20)
    before = var[KEYS[1]]  # the parent holds a handle now
    ctx = multiprocessing.get_context("fork")
    with ctx.Pool(1) as pool:
        got = pool.apply(var.__getitem__, (KEYS[1],))
    np.testing.assert_array_equal(got, before)
