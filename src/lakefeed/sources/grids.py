"""Open gridded reanalysis (CF NetCDF file, glob of files, or Zarr store) lazily as canonical xarray.

Takes the path strings of a weather source (globs allowed). Returns a :class:`Grid`: an
``xarray.Dataset`` backed by dask with dims renamed to (``time``, ``latitude``,
``longitude``), longitude in -180..180 (0..360 grids are rolled), latitude in the file's own
order (ascending or descending), time as UTC ``datetime64`` sorted without duplicates.
Variables are found by CF ``standard_name`` (:data:`lakefeed.config.sources.WEATHER_ROLES`),
else through the config's mapping; their units come from the file's ``units`` attribute or
from the config.

A grid without CRS information is taken as geographic lat/lon only when its coordinates say
so (CF ``standard_name`` latitude/longitude or units degrees_north/degrees_east). Every file
is opened and probed on entry: a corrupt or truncated file is named in the error; with
``on_error="skip"`` the other files are kept and the bad ones listed in ``Grid.skipped``.

NetCDF-4 files are read through h5py (:mod:`lakefeed.sources._h5grid`): the first file is opened
with xarray, every other file laid out like it only has its time, coordinates, attributes and a
probe read (about 2 ms a file instead of 20), and a record of such files becomes one lazily indexed
array per variable, so that a window selection reads only the window. Other files (classic NetCDF,
Zarr, files laid out differently) go through xarray; the values are the same either way. A
variable packed differently in different files (own ``scale_factor``/``add_offset``, as separately
downloaded months often are) is decoded file by file to float64 before the files are joined.

Must not: compute the data (only one probe element per variable and file is read), do science.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.exceptions import SourceError
from lakefeed.sources._h5grid import Layout, Record, layout_of, open_like, stack, to_h5
from lakefeed.sources.grid_files import FORMATS, engine_of, open_raw, zarr_chunks
from lakefeed.sources.grid_model import Grid
from lakefeed.sources.grid_roles import decode, find_variable, select_roles
from lakefeed.sources.grid_rules import GridPart
from lakefeed.sources.locations import RemotePath, expand_paths

__all__ = [
    "Grid",
    "GridPart",
    "decode",
    "expand_paths",
    "find_variable",
    "normalise_lon",
    "open_grid",
    "select_roles",
    "spatial_dims",
]

_LAT_UNITS = {"degrees_north", "degree_north", "degree_n", "degrees_n", "degreen", "degreesn"}
_LON_UNITS = {"degrees_east", "degree_east", "degree_e", "degrees_e", "degreee", "degreese"}
TARGET_CHUNK_BYTES = 96 * 2**20
#: HDF5 chunk cache per open variable. Every chunk is read once per pass (whole time blocks), so a
#: small cache suffices; the library default (tens of MiB per variable and file) grows with the
#: number of files kept open and made memory grow with the record length.
CHUNK_CACHE_BYTES = 2 * 2**20


def _is_coord(var: xr.DataArray, kind: Literal["latitude", "longitude"]) -> bool:
    units = str(var.attrs.get("units", "")).strip().lower().replace(" ", "")
    return var.attrs.get("standard_name") == kind or units in (_LAT_UNITS if kind == "latitude" else _LON_UNITS)


def spatial_dims(ds: xr.Dataset, path: Path) -> tuple[str, str]:
    """Names of the (latitude, longitude) dims of a CF dataset (``path`` names the file in errors)."""
    lat = [n for n, v in ds.variables.items() if v.ndim == 1 and _is_coord(v, "latitude")]
    lon = [n for n, v in ds.variables.items() if v.ndim == 1 and _is_coord(v, "longitude")]
    mappings = {str(v.attrs.get("grid_mapping_name")) for v in ds.variables.values() if "grid_mapping_name" in v.attrs}
    if mappings - {"latitude_longitude"}:
        raise SourceError(
            f"weather grid {path}: grid mapping {sorted(mappings)} is not a latitude/longitude grid; "
            "only geographic grids are supported (regrid it to lat/lon first)"
        )
    if not lat or not lon:
        raise SourceError(
            f"weather grid {path}: cannot tell that the grid is geographic: no 1-D coordinate with standard_name "
            "'latitude'/'longitude' or units 'degrees_north'/'degrees_east' and no CRS; add those attributes "
            f"(coordinates found: {sorted(map(str, ds.coords))})"
        )
    ydim, xdim = ds[lat[0]].dims[0], ds[lon[0]].dims[0]
    return str(ydim), str(xdim)


def _open_one(path: Path | RemotePath, chunk_time: int | None, fmt: str = "auto") -> tuple[xr.Dataset, Layout | None]:
    """One file opened the general way, and its fast-path layout for the record's other files."""
    engine = engine_of(path, fmt)
    ds = open_raw(path, engine, chunk_cache=CHUNK_CACHE_BYTES)
    raw = ds
    if "time" not in ds.dims:
        cand = [n for n, v in ds.variables.items() if v.ndim == 1 and np.issubdtype(v.dtype, np.datetime64)]
        if not cand:
            raise SourceError(f"weather grid {path}: no time coordinate (CF time with units 'hours since ...')")
        ds = ds.swap_dims({ds[cand[0]].dims[0]: cand[0]}).rename({cand[0]: "time"})
    if not np.issubdtype(ds["time"].dtype, np.datetime64):
        raise SourceError(f"weather grid {path}: time could not be decoded ({ds['time'].dtype}); give CF time units")
    ydim, xdim = spatial_dims(ds, path)
    ds = ds.rename({ydim: "latitude", xdim: "longitude"}) if (ydim, xdim) != ("latitude", "longitude") else ds
    for name in ("latitude", "longitude"):
        if name not in ds.coords:
            raise SourceError(f"weather grid {path}: dimension {name} has no coordinate values")
    grid_vars = [n for n, v in ds.data_vars.items() if set(v.dims) == {"time", "latitude", "longitude"}]
    ds = ds[grid_vars].transpose("time", "latitude", "longitude")
    if engine == "zarr":
        zarr_chunks(path, grid_vars)
    # probe: read one element of the last chunk of every variable (truncation shows up here)
    try:
        for n in grid_vars:
            ds[n].isel(time=-1, latitude=-1, longitude=-1).values  # noqa: B018
    except Exception as err:
        raise SourceError(
            f"weather grid {path}: reading variable {n!r} failed ({type(err).__name__}: {err}); the file is corrupt "
            "or truncated: download it again"
        ) from err
    if chunk_time is None:
        native = ds[grid_vars[0]].encoding.get("chunksizes") if grid_vars else None
        per_step = max(1, ds.sizes["latitude"] * ds.sizes["longitude"] * 8)
        nt = max(1, TARGET_CHUNK_BYTES // per_step)
        if native and native[0]:
            nt = max(int(native[0]), nt // int(native[0]) * int(native[0]))
        chunk_time = nt
    # one dask chunk per time block over the whole grid; a later window selection reads only the window
    ds = ds.chunk({"time": min(chunk_time, max(1, ds.sizes["time"])), "latitude": -1, "longitude": -1})
    local = engine == "netcdf4" and isinstance(path, Path)
    lay = layout_of(path, raw, ds, ("time", ydim, xdim), chunk_time, CHUNK_CACHE_BYTES) if local else None
    if lay is not None:  # read through h5py too (fresh handles in worker processes); netCDF4 closes the file
        ds = to_h5(path, ds, lay)
        lay = dataclasses.replace(lay, template=ds)
        raw.close()
    return ds, lay


_PACKING = ("scale_factor", "add_offset", "_FillValue", "missing_value")


def _same_packing(dsets: list[xr.Dataset]) -> list[xr.Dataset]:
    """The files' Datasets, a variable packed differently in different files decoded (float64) in each.

    Joining keeps the first file's attributes, so such a variable would be decoded with the first
    file's scale and offset (as separately downloaded reanalysis months often differ). ``packing_step``
    keeps the largest scale factor (packing noise).
    """

    def key(attrs: Mapping) -> str:
        return repr([attrs.get(k) for k in _PACKING])

    first = dsets[0]
    differ = [n for n in first.data_vars if any(n in d and key(d[n].attrs) != key(first[n].attrs) for d in dsets[1:])]
    if not differ:
        return dsets
    step = {n: max(float(d[n].attrs.get("scale_factor", 0.0) or 0.0) for d in dsets if n in d) for n in differ}
    return [d.assign({n: decode(d[n]).assign_attrs(packing_step=step[n]) for n in differ if n in d}) for d in dsets]


def _first_time(o: xr.Dataset | Record) -> np.datetime64:
    t = o.time if isinstance(o, Record) else o["time"].values
    return t[0] if t.size else np.datetime64("NaT")


def _n_time(o: xr.Dataset | Record) -> int:
    return o.time.size if isinstance(o, Record) else o.sizes["time"]


def normalise_lon(ds: xr.Dataset) -> xr.Dataset:
    """Longitudes wrapped to [-180, 180) and sorted ascending (0..360 grids), unchanged otherwise."""
    lon = np.asarray(ds["longitude"].values, dtype=float)
    if lon.max() <= 180 and lon.min() >= -180:
        return ds
    wrapped = (lon + 180.0) % 360.0 - 180.0
    ds = ds.assign_coords(longitude=("longitude", wrapped, ds["longitude"].attrs))
    k = int(np.argmin(wrapped))
    rolled = np.roll(wrapped, -k)
    if np.all(np.diff(rolled) > 0):
        return ds.roll(longitude=-k, roll_coords=True) if k else ds
    return ds.sortby("longitude")


def _check_time(ds: xr.Dataset, files: list[Path], starts: list[int]) -> None:
    t = ds["time"].values
    d = np.diff(t.astype("datetime64[ns]").astype(np.int64))
    bad = np.nonzero(d <= 0)[0]
    if bad.size:
        i = int(bad[0]) + 1
        which = files[int(np.searchsorted(starts, i, side="right")) - 1]
        kind = "duplicate" if d[bad[0]] == 0 else "out of order"
        raise SourceError(
            f"weather grid {which}: time axis has a {kind} step at {pd.Timestamp(t[i])} (after "
            f"{pd.Timestamp(t[i - 1])}); remove overlapping files or sort the time axis"
        )


def open_grid(
    paths: str | Path | Iterable[str | Path],
    *,
    time_zone: str = "UTC",
    on_error: Literal["raise", "skip"] = "raise",
    chunk_time: int | None = None,
    format: str = "auto",
) -> Grid:
    """Open one file, a glob of files or a Zarr store as a normalised lazy :class:`Grid`.

    Parameters
    ----------
    paths
        Path(s) or glob(s) of CF NetCDF or GRIB files, or a Zarr store; local or URLs (``s3://...``).
    time_zone
        Time zone of naive time stamps in the files (CF files are UTC; then leave "UTC").
    on_error
        ``"raise"``: the first unreadable file stops with an error naming every unreadable file;
        ``"skip"``: unreadable files are left out and listed in ``Grid.skipped``.
    chunk_time
        Time steps per dask chunk (default: about 96 MiB of float64 per chunk, a multiple of the
        file's own chunking).
    format
        ``auto`` (from each file's content), ``netcdf``, ``zarr`` or ``grib`` (:data:`FORMATS`).
    """
    if format not in FORMATS:
        raise SourceError(f"weather grid: format {format!r} is not one of {', '.join(FORMATS)}")
    files = expand_paths(paths)
    opened: list[tuple[Path, xr.Dataset | Record]] = []
    problems: list[str] = []
    layout: Layout | None = None  # of the first NetCDF-4 file: the others are read like it when they match
    for f in files:
        try:
            rec = open_like(f, layout) if layout is not None and isinstance(f, Path) else None
            if rec is None:
                ds, lay = _open_one(f, chunk_time, format)
                layout = layout or lay
                rec = Record(f, ds["time"].values) if lay is not None and lay is layout else ds
            opened.append((f, rec))
        except SourceError as err:
            problems.append(str(err))
    if problems and (on_error == "raise" or not opened):
        ok = f" ({len(opened)} other file(s) opened fine)" if opened else ""
        raise SourceError("\n".join(problems) + ok)
    # a Record's coordinates are its layout's (checked equal when it was read)
    grids = [(f, layout.template if isinstance(o, Record) and layout else o) for f, o in opened]
    own = [{str(n): dict(v.attrs) for n, v in g.data_vars.items()} for _, g in grids]  # before any joining
    order = sorted(range(len(opened)), key=lambda k: _first_time(opened[k][1]))
    opened, grids, own = [opened[k] for k in order], [grids[k] for k in order], [own[k] for k in order]
    ref_f, ref = grids[0]
    for f, g in grids[1:]:
        for c in ("latitude", "longitude"):
            if g.sizes[c] != ref.sizes[c] or not np.allclose(g[c].values, ref[c].values):
                raise SourceError(f"weather grid {f}: its {c} differs from {ref_f}'s; all files must share one grid")
    if layout is not None and all(isinstance(o, Record) for _, o in opened):
        ds = stack([o for _, o in opened], layout)  # type: ignore[misc]
    else:
        dsets = _same_packing([o.dataset(layout) if isinstance(o, Record) and layout else o for _, o in opened])
        ds = (
            dsets[0]
            if len(dsets) == 1
            else xr.concat(
                dsets,
                dim="time",
                data_vars="minimal",
                coords="minimal",
                compat="override",
                join="override",
                combine_attrs="override",
            )
        )
    starts = list(np.cumsum([0] + [_n_time(o) for _, o in opened[:-1]]))
    _check_time(ds, [f for f, _ in opened], starts)
    if time_zone != "UTC":
        t = pd.DatetimeIndex(ds["time"].values).tz_localize(time_zone).tz_convert("UTC").tz_localize(None)
        ds = ds.assign_coords(time=t.values)
    ds = normalise_lon(ds)
    t = ds["time"].values
    ends = [*starts[1:], t.size]
    parts = tuple(
        GridPart(f, t[a], t[b - 1], attrs)
        for (f, _), a, b, attrs in zip(opened, starts, ends, own, strict=True)
        if b > a
    )
    return Grid(dataset=ds, files=tuple(f for f, _ in opened), skipped=tuple(problems), parts=parts)
