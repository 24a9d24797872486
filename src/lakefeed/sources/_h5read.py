"""Lazily indexed readers of NetCDF-4 (HDF5) variables for ``dask.array.from_array``.

Takes a file path, a variable name, its shape and dtype. :class:`H5Variable` reads one file's
variable, :class:`H5Stack` several files' along time as one array (dask fuses a window selection
into each read, which a concatenation of per-file arrays would not). A reader opens its file in
each process on first use (forked workers open their own handles; a small LRU bounds the open
files and their HDF5 chunk caches) and is picklable.

Chunks stored with deflate (and byte shuffle), as NetCDF-4 writes them, are read as stored bytes
and inflated with libdeflate (the ``deflate`` package: about 2.5x faster than the zlib inside
HDF5, and outside h5py's global lock, so threads overlap); anything else is read by h5py. Both
give the stored values, bit for bit.

Must not: decode CF packing, do science.
"""

from __future__ import annotations

import itertools
import os
import sys
import threading
from collections import OrderedDict
from typing import Any

import numpy as np

__all__ = ["MAX_OPEN", "H5Stack", "H5Variable"]

#: Open files per process (each holds an HDF5 chunk cache per variable read).
MAX_OPEN = 16

_LOCK = threading.Lock()
_OPEN: OrderedDict[str, Any] = OrderedDict()
_OPEN_PID = os.getpid()


def _file(path: str, cache_bytes: int) -> Any:
    """An open h5py.File for ``path`` in this process (LRU by path and file identity; a forked child opens its own)."""
    import h5py

    global _OPEN_PID
    st = os.stat(path)  # a file replaced since it was opened (a month downloaded again) is opened anew
    key = f"{path}|{st.st_ino}|{st.st_mtime_ns}|{st.st_size}"
    with _LOCK:
        if _OPEN_PID != os.getpid():  # inherited from the parent: leave those handles alone
            _OPEN.clear()
            _OPEN_PID = os.getpid()
        fh = _OPEN.get(key)
        if fh is not None:
            _OPEN.move_to_end(key)
            return fh
        fh = h5py.File(path, "r", rdcc_nbytes=cache_bytes)
        _OPEN[key] = fh
        while len(_OPEN) > MAX_OPEN:  # dropped, not closed: a reader still using it holds it open
            _OPEN.popitem(last=False)
        return fh


class H5Variable:
    """Lazily indexed HDF5 dataset (a NetCDF-4 variable) for ``dask.array.from_array``; picklable."""

    def __init__(self, path: str, name: str, shape: tuple[int, ...], dtype: np.dtype, cache_bytes: int) -> None:
        self.path, self.name, self.shape, self.dtype = path, name, tuple(shape), np.dtype(dtype)
        self.ndim = len(self.shape)
        self.cache_bytes = cache_bytes

    def __getitem__(self, key: Any) -> np.ndarray:
        fh = _file(self.path, self.cache_bytes)  # held until the read is done
        dset = fh[self.name]
        out = _read_chunks(dset, key)
        return np.asarray(dset[key] if out is None else out, dtype=self.dtype)

    def __repr__(self) -> str:
        return f"H5Variable({self.path!r}, {self.name!r}, shape={self.shape})"


#: HDF5 filter ids: deflate (zlib) and byte shuffle, the pipeline NetCDF-4 writes with ``zlib=True``.
_DEFLATE, _SHUFFLE = 1, 2


def _pipeline(dset: Any) -> tuple[bool, tuple[int, ...]] | None:
    """(shuffled, chunk shape) when the chunks are [shuffle+]deflate only, else None (h5py reads them)."""
    if dset.chunks is None or dset.dtype.kind not in "iuf":
        return None
    plist = dset.id.get_create_plist()
    ids = tuple(plist.get_filter(i)[0] for i in range(plist.get_nfilters()))
    if ids not in ((_DEFLATE,), (_SHUFFLE, _DEFLATE)):
        return None
    return ids[0] == _SHUFFLE, tuple(dset.chunks)


def _read_chunks(dset: Any, key: Any) -> np.ndarray | None:
    """``dset[key]`` for a tuple of unit-step slices, decompressed here with libdeflate (None: let h5py).

    Reads each chunk's stored bytes once (``read_direct_chunk``), inflates them (libdeflate is about
    2.5x faster than the zlib inside HDF5), undoes the byte shuffle and copies the selected part. The
    same bytes HDF5 would produce; anything else (other filters, a chunk stored unfiltered or not
    stored at all, other selections, no ``deflate`` package) is left to h5py.
    """
    try:
        import deflate
    except ImportError:
        return None
    key = key if isinstance(key, tuple) else (key,)
    if len(key) != dset.ndim or not all(isinstance(k, slice) for k in key):
        return None
    pipe = _pipeline(dset)
    if pipe is None:
        return None
    shuffled, chunks = pipe
    bounds = [k.indices(n) for k, n in zip(key, dset.shape, strict=True)]
    if any(step != 1 or stop <= start for start, stop, step in bounds):
        return None
    dtype, isz = dset.dtype, dset.dtype.itemsize
    native = dtype.newbyteorder("=")
    nelem = int(np.prod(chunks))
    out = np.empty([stop - start for start, stop, _ in bounds], native)
    ranges = [range(start // c * c, stop, c) for (start, stop, _), c in zip(bounds, chunks, strict=True)]
    planes = np.empty((nelem, isz), np.uint8) if shuffled and isz > 1 else None
    little = dtype.byteorder == "<" or (dtype.byteorder in "=|" and sys.byteorder == "little")
    for offset in itertools.product(*ranges):
        try:
            mask, raw = dset.id.read_direct_chunk(offset)
        except Exception:  # e.g. a chunk never written (fill values): h5py knows
            return None
        if mask:
            return None
        try:
            buf = np.frombuffer(deflate.zlib_decompress(raw, nelem * isz), np.uint8)
        except Exception:  # damaged data: h5py reads it and reports
            return None
        if planes is not None and isz == 2 and little:  # the common int16 case, 4x faster than below
            word = buf[nelem:].astype(np.uint16)
            word <<= 8
            word |= buf[:nelem]
            chunk = word.view(np.dtype(f"{dtype.kind}2")).reshape(chunks)
        else:
            if planes is not None:
                for j in range(isz):  # HDF5's shuffle stores byte j of every element together
                    planes[:, j] = buf[j * nelem : (j + 1) * nelem]
                buf = planes.reshape(-1)
            chunk = buf.view(dtype).reshape(chunks)
        src, dst = [], []
        for o, c, (start, stop, _) in zip(offset, chunks, bounds, strict=True):
            lo, hi = max(o, start), min(o + c, stop)
            src.append(slice(lo - o, hi - o))
            dst.append(slice(lo - start, hi - start))
        out[tuple(dst)] = chunk[tuple(src)]
    return out


class H5Stack:
    """Several files' HDF5 datasets stacked along time, as one lazily indexed array (picklable).

    One ``dask.array.from_array`` over this (chunks within files) lets dask fuse a later window
    selection into each read, so only the window is read: a concatenation of per-file arrays would
    read whole grids.
    """

    def __init__(self, parts: list[H5Variable]) -> None:
        self.parts = parts
        self.starts = np.cumsum([0] + [p.shape[0] for p in parts])
        self.shape = (int(self.starts[-1]), *parts[0].shape[1:])
        self.dtype, self.ndim = parts[0].dtype, len(self.shape)

    def __getitem__(self, key: Any) -> np.ndarray:
        key = key if isinstance(key, tuple) else (key,)
        k0, rest = key[0], tuple(key[1:])
        if isinstance(k0, int | np.integer):
            return self[(slice(int(k0) % self.shape[0], int(k0) % self.shape[0] + 1), *rest)][0]
        if not isinstance(k0, slice):  # fancy selection along time (dask fuses only slices): via a range
            idx = np.arange(self.shape[0])[k0]
            if idx.size == 0:
                return self[(slice(0, 0), *rest)]
            lo = int(idx.min())
            return self[(slice(lo, int(idx.max()) + 1), *rest)][idx - lo]
        start, stop, step = k0.indices(self.shape[0])
        if step != 1:
            return self[(np.arange(start, stop, step), *rest)]
        parts, i = [], max(0, int(np.searchsorted(self.starts, start, side="right")) - 1)
        while start < stop:
            hi = min(stop, int(self.starts[i + 1]))
            parts.append(self.parts[i][(slice(start - int(self.starts[i]), hi - int(self.starts[i])), *rest)])
            start, i = hi, i + 1
        if not parts:  # an empty time selection: the shape the other keys give
            return np.empty((0, *np.empty(self.shape[1:], bool)[rest].shape), self.dtype)
        return parts[0] if len(parts) == 1 else np.concatenate(parts)
