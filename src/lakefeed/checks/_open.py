"""Open sources cheaply for the checks: globbing, lazy xarray opening, coordinates, periods.

Takes paths and patterns from the config; returns file lists, lazily opened datasets
(metadata and coordinates only: data variables are never read), small summaries and the
per-file time-axis check. Must not load data variables or write anything.
"""

from __future__ import annotations

import glob
import itertools
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.checks._result import CheckResult, failed, passed, warned
from lakefeed.exceptions import SourceError
from lakefeed.sources.grid_files import engine_of, open_raw
from lakefeed.sources.locations import RemotePath, expand_paths, is_url

__all__ = ["Period", "expand", "find_coord", "lonlat_bounds", "open_lazy", "scan_files", "time_period"]


@dataclass(frozen=True)
class Period:
    """A closed time interval (naive UTC timestamps)."""

    start: pd.Timestamp
    end: pd.Timestamp

    def __str__(self) -> str:
        return f"{self.start:%Y-%m-%d} .. {self.end:%Y-%m-%d}"


def expand(patterns: Sequence[str], *, key: str) -> tuple[list[Path | RemotePath], list[str]]:
    """Files matching each pattern (globs expanded, sorted; local or URLs); problems name ``key[i]`` for patterns
    matching nothing (or an object store refusing access)."""
    files: list[Path | RemotePath] = []
    problems: list[str] = []
    for i, pat in enumerate(patterns):
        try:
            files += expand_paths([pat], what="source", key=f"{key}[{i}]")
        except SourceError as err:
            magic = glob.has_magic(pat.split("://", 1)[-1])
            said = str(err) if is_url(pat) else f"{'no file matches' if magic else 'file not found:'} {pat}"
            problems.append(f"{key}[{i}]: {said}")
    return files, problems


@contextmanager
def open_lazy(
    path: Path | RemotePath, *, fmt: str = "auto", kind: Literal["analysis", "forecast"] = "analysis"
) -> Iterator[xr.Dataset]:
    """Open a NetCDF file, Zarr store or GRIB file (its index) lazily (no data variable is read); close it afterwards.

    A GRIB file is opened as the build opens it (:func:`lakefeed.sources.grib.open_grib`: its messages'
    framing checked once, then cfgrib's index from lakefeed's cache folder).
    """
    try:
        engine = engine_of(path, fmt, what="source")
        if engine == "grib":
            ds = open_raw(path, engine, kind=kind)
        elif engine == "zarr":
            ds = xr.open_zarr(path.mapper() if isinstance(path, RemotePath) else path, decode_timedelta=True)
        else:
            ds = xr.open_dataset(
                path.open("rb") if isinstance(path, RemotePath) else path, decode_timedelta=True, cache=False
            )
    except SourceError:
        raise
    except Exception as err:
        head = b""
        if path.is_file():
            with path.open("rb") as fh:
                head = fh.read(8)
        kind = head.startswith((b"\x89HDF", b"CDF\x01", b"CDF\x02", b"CDF\x05"))
        why = (
            "it looks like NetCDF but cannot be read: the file is damaged or truncated (copy or download it again)"
            if kind
            else "is it CF NetCDF or Zarr?"
        )
        raise SourceError(f"cannot open {path} ({type(err).__name__}: {err}); {why}") from err
    try:
        yield ds
    finally:
        ds.close()


_NAMES = {
    "latitude": ("latitude", "lat", "nav_lat"),
    "longitude": ("longitude", "lon", "nav_lon"),
    "time": ("time", "valid_time"),
    "forecast_reference_time": ("forecast_reference_time", "reference_time", "init_time", "issue_time"),
    "forecast_period": ("forecast_period", "lead_time", "lead", "step", "leadtime"),
}
_UNITS = {"latitude": ("degrees_north", "degree_north", "degree_N"), "longitude": ("degrees_east", "degree_east")}


def find_coord(ds: xr.Dataset, what: str) -> xr.DataArray | None:
    """A variable/coordinate by CF standard_name, then by units (lat/lon), then by common name."""
    cands = [*ds.coords.values(), *ds.data_vars.values()]
    for v in cands:
        if v.attrs.get("standard_name") == what:
            return v
    for v in cands:
        if v.attrs.get("units") in _UNITS.get(what, ()):
            return v
    for name in _NAMES.get(what, (what,)):
        if name in ds.variables:
            return ds[name]
    return None


def lonlat_bounds(ds: xr.Dataset) -> tuple[float, float, float, float] | None:
    """Grid extent (west, south, east, north) in degrees, cell edges included (half a step beyond centres)."""
    lat, lon = find_coord(ds, "latitude"), find_coord(ds, "longitude")
    if lat is None or lon is None:
        return None
    la, lo = np.asarray(lat.values, dtype=float), np.asarray(lon.values, dtype=float)

    def edges(a: np.ndarray) -> tuple[float, float]:
        if a.ndim == 1 and a.size > 1:
            half = float(np.nanmax(np.abs(np.diff(a)))) / 2
        else:
            half = 0.0
        return float(np.nanmin(a)) - half, float(np.nanmax(a)) + half

    s, n = edges(la)
    w, e = edges(lo)
    return w, s, e, n


def time_period(values: np.ndarray | xr.DataArray) -> Period | None:
    """First and last time of a coordinate (None if empty or not time-like)."""
    arr = np.asarray(values)
    if arr.size == 0:
        return None
    try:
        t = pd.DatetimeIndex(pd.to_datetime(arr.ravel()))
    except (TypeError, ValueError):
        return None
    if t.tz is not None:
        t = t.tz_convert("UTC").tz_localize(None)
    t = t[~t.isna()]
    if len(t) == 0:
        return None
    return Period(t.min(), t.max())


def _signature(ds: xr.Dataset) -> tuple[object, ...]:
    lat, lon = find_coord(ds, "latitude"), find_coord(ds, "longitude")
    shape = tuple(int(c.size) for c in (lat, lon) if c is not None)
    bounds = lonlat_bounds(ds)
    return shape, tuple(round(b, 4) for b in bounds) if bounds else None, tuple(sorted(map(str, ds.data_vars)))


def _span(step: pd.Timedelta | None) -> str:
    """A time step in plain words: '1 h', '6 h', '1 d', '15 min'."""
    if step is None:
        return "unknown"
    secs = step.total_seconds()
    for unit, size in (("d", 86400), ("h", 3600), ("min", 60)):
        if secs >= size and secs % size == 0:
            return f"{int(secs // size)} {unit}"
    return str(step)


def scan_files(
    files: Sequence[Path | RemotePath], coord: str, *, section: str, gaps: bool = True, fmt: str = "auto"
) -> tuple[list[CheckResult], Period | None]:
    """Read one time coordinate (and the grid's shape) of every file: period, gaps between files, odd grids.

    A file whose grid or variables differ from the first file's is a problem; a gap of more
    than one and a half time steps between consecutive files, or files overlapping in time, a
    warning (not looked for when ``gaps`` is False: the caller checks the time axis itself). Only
    coordinates are read.
    """
    out: list[CheckResult] = []
    spans: list[tuple[pd.Timestamp, pd.Timestamp, Path]] = []
    steps: list[pd.Timedelta] = []
    ref: tuple[object, ...] | None = None
    kind: Literal["analysis", "forecast"] = "forecast" if coord == "forecast_reference_time" else "analysis"
    for f in files:
        with open_lazy(f, fmt=fmt, kind=kind) as ds:
            sig = _signature(ds)
            if ref is None:
                ref = sig
            elif sig != ref:
                out.append(
                    failed(
                        f"{section} files",
                        f"{f.name}: grid or variables differ from {files[0].name} "
                        f"(shape, extent, variables: {sig} vs {ref})",
                        "all files of a source must share one grid and one set of variables",
                    )
                )
            c = find_coord(ds, coord)
            if c is None:
                continue
            try:
                t = pd.DatetimeIndex(pd.to_datetime(np.asarray(c.values).ravel())).dropna().sort_values()
            except (TypeError, ValueError):
                continue
            if len(t):
                spans.append((t[0], t[-1], f))
            if len(t) > 1:
                steps.append(pd.Series(t).diff().dropna().median())
    if not spans:
        out.append(failed(f"{section} time axis", f"no readable {coord} coordinate in the {section} files", ""))
        return out, None
    spans.sort(key=lambda s: s[0])
    step = min(steps) if steps else None
    for (_, end, a), (start, _, b) in itertools.pairwise(spans if gaps else []):
        if step is not None and start - end > 1.5 * step:
            out.append(
                warned(
                    f"{section} time axis",
                    f"gap from {end} ({a.name}) to {start} ({b.name}): {start - end - step} missing",
                    "add the missing file(s); days in the gap get no values",
                )
            )
        elif start <= end:
            out.append(
                warned(
                    f"{section} time axis",
                    f"{b.name} starts at {start}, before {a.name} ends ({end}): files overlap in time",
                    "remove duplicate files from the glob",
                )
            )
    period = Period(spans[0][0], max(s[1] for s in spans))
    if not any(r.name == f"{section} time axis" for r in out):
        out.append(
            passed(
                f"{section} time axis", f"{period}, step {_span(step)}, {len(files)} file(s) without gaps or overlaps"
            )
        )
    return out, period
