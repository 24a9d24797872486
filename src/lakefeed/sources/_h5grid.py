"""Fast path of :func:`lakefeed.sources.grids.open_grid` for NetCDF-4 (HDF5) files.

Takes the first file of a record opened the general way (xarray, netCDF4 engine, undecoded) and
reads only what is needed of every other file with h5py: the time coordinate (decoded with
xarray's CF time decoder, using that file's own units and calendar), the latitude and longitude
values, the variables' shapes, dtypes, chunking and attributes (which must equal the first file's)
and one element of each variable's last chunk (the probe that finds truncated files). A file that
differs in any way gets ``None`` and is opened the general way, which gives the established errors.

Returns Datasets whose variables are dask arrays over the readers of :mod:`lakefeed.sources._h5read`
(one array over every file of the record, so that a window selection is fused into each read).
Values are the stored ones (CF packing kept, as the netCDF4 engine with ``mask_and_scale=False``
gives them): results are identical to opening every file with xarray.

Must not: decode packed values, compute anything beyond the probe, do science.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from lakefeed.sources._h5read import H5Stack, H5Variable

__all__ = ["Layout", "Record", "layout_of", "open_like", "stack", "to_h5"]

#: HDF5/netCDF-4 bookkeeping attributes (not CF attributes of the variable).
_INTERNAL = {"DIMENSION_LIST", "REFERENCE_LIST", "CLASS", "NAME", "_Netcdf4Dimid", "_Netcdf4Coordinates", "_nc3_strict"}


def _attr(value: Any) -> Any:
    if isinstance(value, bytes | np.bytes_):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray) and value.dtype.kind in "SO":
        return tuple(_attr(v) for v in value.ravel())
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    return value


def _attrs(dset: Any) -> str:
    """The variable's CF attributes as comparable text (NaN fill values compare equal)."""
    return repr(sorted((k, _attr(dset.attrs[k])) for k in dset.attrs if k not in _INTERNAL))


@dataclass(frozen=True)
class Layout:
    """What every file of a record must share with the first one for the fast path."""

    names: tuple[str, ...]  # grid variables, dims (time, lat, lon) in the file
    time: str
    lat: str
    lon: str
    lat_values: np.ndarray
    lon_values: np.ndarray
    shapes: tuple[tuple[int, int], ...]
    dtypes: tuple[np.dtype, ...]
    attrs: tuple[str, ...]
    template: xr.Dataset  # the first file, normalised (coords and attrs are taken from it)
    native: tuple[int, ...] | None  # HDF5 chunk shape of the first variable
    chunk_time: int  # dask chunk length (derived from ``native`` unless given)
    cache_bytes: int


def _is_hdf5(path: Path) -> bool:
    try:
        with open(path, "rb") as fh:
            return fh.read(8) == b"\x89HDF\r\n\x1a\n"
    except OSError:
        return False


def layout_of(
    path: Path, raw: xr.Dataset, ds: xr.Dataset, dims: tuple[str, str, str], chunk_time: int, cache_bytes: int
) -> Layout | None:
    """The fast-path layout of a file opened the general way (None when it does not qualify).

    ``raw``: the file as xarray opened it (before renaming); ``ds``: normalised; ``dims``: the file's
    (time, lat, lon) dim names. Qualifies: an HDF5 file whose time/lat/lon are coordinate variables
    named like their dims, whose grid variables have exactly those dims in that order, and no other
    coordinates.
    """
    if not _is_hdf5(path) or set(ds.coords) != {"time", "latitude", "longitude"}:
        return None
    names = tuple(str(n) for n in ds.data_vars)
    if not names or any(raw[n].dims != dims for n in names) or any(d not in raw.variables for d in dims):
        return None
    try:
        import h5py

        with h5py.File(path, "r") as h:
            if any(n not in h or h[n].shape != raw[n].shape for n in (*names, *dims)):
                return None
            return Layout(
                names=names,
                time=dims[0],
                lat=dims[1],
                lon=dims[2],
                lat_values=h[dims[1]][()],
                lon_values=h[dims[2]][()],
                shapes=tuple(tuple(h[n].shape[1:]) for n in names),  # type: ignore[misc]
                dtypes=tuple(h[n].dtype.newbyteorder("=") for n in names),
                attrs=tuple(_attrs(h[n]) for n in names),
                template=ds,
                native=h[names[0]].chunks,
                chunk_time=chunk_time,
                cache_bytes=cache_bytes,
            )
    except Exception:  # h5py cannot read what netCDF4 could: the general way it is
        return None


def _dask(path: Path, name: str, shape: tuple[int, ...], dtype: np.dtype, lay: Layout) -> Any:
    import dask.array as da

    arr = H5Variable(str(path), name, shape, dtype, lay.cache_bytes)
    chunks = (_time_chunks(shape[0], lay.chunk_time), -1, -1)
    return da.from_array(
        arr, chunks=chunks, name=f"h5-{name}-{_token(path, name)}", lock=False, meta=np.empty((0, 0, 0), dtype)
    )


def _token(path: Path, name: str) -> str:
    st = path.stat()
    return hashlib.sha1(f"{path.resolve()}|{st.st_mtime_ns}|{st.st_size}|{name}".encode()).hexdigest()[:16]


def to_h5(path: Path, ds: xr.Dataset, lay: Layout) -> xr.Dataset:
    """``ds`` (the layout's own file) with its grid variables read through h5py instead of netCDF4."""
    nt = ds.sizes["time"]
    data = {
        n: (ds[n].dims, _dask(path, n, (nt, *shape), dtype, lay), ds[n].attrs)
        for n, shape, dtype in zip(lay.names, lay.shapes, lay.dtypes, strict=True)
    }
    return ds.assign(data)


@dataclass(frozen=True)
class Record:
    """A file of the record read like the layout's first one: its decoded time stamps (UTC-naive)."""

    path: Path
    time: np.ndarray

    def dataset(self, lay: Layout) -> xr.Dataset:
        """The file as its own lazy Dataset (as the general way opens it)."""
        tm, nt = lay.template, self.time.size
        data = {
            n: (("time", "latitude", "longitude"), _dask(self.path, n, (nt, *shape), dtype, lay), tm[n].attrs)
            for n, shape, dtype in zip(lay.names, lay.shapes, lay.dtypes, strict=True)
        }
        coords = {
            "time": ("time", self.time, tm["time"].attrs),
            "latitude": tm["latitude"],
            "longitude": tm["longitude"],
        }
        return xr.Dataset(data, coords=coords, attrs=tm.attrs)


def open_like(path: Path, lay: Layout) -> Record | None:
    """Read ``path``'s time stamps if it is laid out like the layout's first file, else None.

    None also when h5py cannot read it: the general way then opens it and names the problem.
    """
    if not _is_hdf5(path):
        return None
    import h5py

    try:
        h = h5py.File(path, "r")
    except Exception:
        return None
    with h:
        try:
            t = h[lay.time]
            if t.ndim != 1 or t.shape[0] == 0 or lay.lat not in h or lay.lon not in h:
                return None
            nt = t.shape[0]
            tattrs = {k: _attr(t.attrs[k]) for k in ("units", "calendar") if k in t.attrs}
            traw = t[()]
            if not (np.array_equal(h[lay.lat][()], lay.lat_values) and np.array_equal(h[lay.lon][()], lay.lon_values)):
                return None
            for n, shape, dtype, attrs in zip(lay.names, lay.shapes, lay.dtypes, lay.attrs, strict=True):
                if n not in h:
                    return None
                d = h[n]
                if d.shape != (nt, *shape) or d.dtype.newbyteorder("=") != dtype or _attrs(d) != attrs:
                    return None
            if h[lay.names[0]].chunks != lay.native:
                return None
            # probe: one element of the last chunk of every variable (a truncated file fails here)
            for n in lay.names:
                d = h[n]
                d[tuple(s - 1 for s in d.shape)]
        except Exception:
            return None
    time = _decode_time(traw, tattrs, lay.template["time"].dtype)
    return None if time is None else Record(path, time)


def _decode_time(raw: np.ndarray, attrs: dict[str, Any], like: np.dtype) -> np.ndarray | None:
    """CF time decoded with xarray's CF decoder to ``like``'s resolution (None when that fails)."""
    from xarray.coding.times import decode_cf_datetime

    units, calendar = attrs.get("units"), attrs.get("calendar")
    if not isinstance(units, str) or "since" not in units or np.dtype(like).kind != "M":
        return None
    try:
        dec = decode_cf_datetime(raw, units, calendar, time_unit=np.datetime_data(like)[0])
    except Exception:
        return None
    return dec if dec.dtype == like else None


def stack(records: list[Record], lay: Layout) -> xr.Dataset:
    """One Dataset of the records (time order), each variable one array over every file.

    Same values, coordinates, attributes and time chunks as concatenating the files' Datasets.
    """
    import dask.array as da

    tm = lay.template
    time = np.concatenate([r.time for r in records])
    chunks = tuple(c for r in records for c in _time_chunks(r.time.size, lay.chunk_time))
    data = {}
    for n, shape, dtype in zip(lay.names, lay.shapes, lay.dtypes, strict=True):
        parts = [H5Variable(str(r.path), n, (r.time.size, *shape), dtype, lay.cache_bytes) for r in records]
        token = hashlib.sha1("|".join(_token(r.path, n) for r in records).encode()).hexdigest()[:16]
        arr = da.from_array(
            H5Stack(parts), chunks=(chunks, -1, -1), name=f"h5-{n}-{token}", lock=False, meta=np.empty((0, 0, 0), dtype)
        )
        data[n] = (("time", "latitude", "longitude"), arr, tm[n].attrs)
    coords = {"time": ("time", time, tm["time"].attrs), "latitude": tm["latitude"], "longitude": tm["longitude"]}
    return xr.Dataset(data, coords=coords, attrs=tm.attrs)


def _time_chunks(nt: int, chunk_time: int) -> tuple[int, ...]:
    ct = max(1, min(chunk_time, nt))
    return (ct,) * (nt // ct) + ((nt % ct,) if nt % ct else ())
