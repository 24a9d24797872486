"""Tell a grid file's format and open it raw: NetCDF (classic or NetCDF-4), Zarr or GRIB, local or on object storage.

Takes a local path or a :class:`~lakefeed.sources.locations.RemotePath` and the config's ``format``
(``auto``: from the content). Returns an undecoded, lazily read ``xarray.Dataset`` as stored: a NetCDF
file on object storage is read through an fsspec file object (HTTP byte ranges: only the chunks a
selection needs travel), a Zarr store through its fsspec mapping, a GRIB file through
:func:`lakefeed.sources.grib.open_grib` (an object is first copied into lakefeed's cache folder:
ecCodes reads local files only).

Must not: compute the data, do science.
"""

from __future__ import annotations

from pathlib import Path
from typing import Literal

import xarray as xr

from lakefeed.exceptions import SourceError
from lakefeed.sources.grib import is_grib, open_grib
from lakefeed.sources.locations import RemotePath, local_copy

__all__ = ["FORMATS", "engine_of", "open_raw", "zarr_chunks"]

#: Values of a weather or forecast source's ``format`` key.
FORMATS = ("auto", "netcdf", "zarr", "grib")
_NETCDF_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF")


def _is_zarr(path: Path | RemotePath) -> bool:
    return path.suffix == ".zarr" or (path.is_dir() and ((path / ".zgroup").exists() or (path / "zarr.json").exists()))


def engine_of(path: Path | RemotePath, fmt: str = "auto", *, what: str = "weather grid") -> str:
    """``zarr``, ``netcdf4`` (NetCDF-4/HDF5 or classic), or ``grib``: by ``fmt`` or, for ``auto``, the content."""
    if fmt == "zarr" or (fmt == "auto" and _is_zarr(path)):
        return "zarr"
    try:
        if isinstance(path, RemotePath):
            magic = path.head(8)
        else:
            with path.open("rb") as fh:
                magic = fh.read(8)
    except OSError as err:
        raise SourceError(f"{what} {path}: cannot read ({err})") from err
    if fmt == "grib" or (fmt == "auto" and is_grib(magic)):
        if not is_grib(magic):
            raise SourceError(
                f"{what} {path}: format is grib but the file does not start with 'GRIB' ({magic[:4]!r}); "
                "the file is of another format or damaged: fix format in sources.yaml or download it again"
            )
        return "grib"
    if magic.startswith(_NETCDF_MAGIC):
        return "netcdf4"
    raise SourceError(
        f"{what} {path}: not a NetCDF (classic or NetCDF-4/HDF5) file, a GRIB file nor a Zarr store (starts with "
        f"{magic[:4]!r}); the file may be corrupt, truncated or of another format"
    )


def _open_zarr(path: Path | RemotePath) -> xr.Dataset:
    meta = path / "zarr.json"
    consolidated = (path / ".zmetadata").exists() or (
        meta.exists() and '"consolidated_metadata"' in meta.read_text(encoding="utf-8")
    )
    store = path.mapper() if isinstance(path, RemotePath) else path
    return xr.open_zarr(store, chunks=None, mask_and_scale=False, consolidated=consolidated)


def _open_netcdf(path: Path | RemotePath, chunk_cache: int) -> xr.Dataset:
    if isinstance(path, RemotePath):
        head = path.head(4)
        fh = path.open("rb", block_size=2**20, cache_type="readahead")  # stays open: the dataset reads from it
        engine = "h5netcdf" if head.startswith(b"\x89HDF") else "scipy"
        return xr.open_dataset(fh, engine=engine, chunks=None, cache=False, mask_and_scale=False)
    import netCDF4

    previous = netCDF4.get_chunk_cache()
    netCDF4.set_chunk_cache(chunk_cache)
    try:
        return xr.open_dataset(path, engine="netcdf4", chunks=None, cache=False, mask_and_scale=False)
    finally:
        netCDF4.set_chunk_cache(*previous)


def open_raw(
    path: Path | RemotePath,
    engine: str,
    *,
    chunk_cache: int = 2 * 2**20,
    kind: Literal["analysis", "forecast"] = "analysis",
    what: str = "weather grid",
) -> xr.Dataset:
    """The file as stored (undecoded, lazy); an unreadable file is a :class:`SourceError` naming it."""
    if engine == "grib":
        return open_grib(local_copy(path), kind=kind, label=str(path))
    try:
        return _open_zarr(path) if engine == "zarr" else _open_netcdf(path, chunk_cache)
    except SourceError:
        raise
    except Exception as err:  # netCDF4/HDF5/zarr/fsspec raise many types
        raise SourceError(
            f"{what} {path}: cannot open ({type(err).__name__}: {err}); the file may be corrupt "
            "or truncated: download it again"
        ) from err


def zarr_chunks(path: Path | RemotePath, names: list[str]) -> None:
    """Refuse a Zarr store whose grid variables lack chunks: a missing chunk would read as fill values."""
    import zarr

    group = zarr.open_group(path.mapper() if isinstance(path, RemotePath) else str(path), mode="r")
    gaps = [
        (n, a.nchunks - a.nchunks_initialized, a.nchunks)
        for n in names
        if (a := group[n]).nchunks_initialized < a.nchunks
    ]
    if gaps:
        said = ", ".join(f"{n!r} {k} of {m}" for n, k, m in gaps)
        raise SourceError(
            f"weather grid {path}: Zarr chunks missing ({said}); they would read as missing values: copy the "
            "store again (or write it with write_empty_chunks=True if those chunks are truly empty)"
        )
