"""Open archived weather forecasts (CF NetCDF with forecast_reference_time and forecast_period) lazily.

Takes the path strings of a forecast source (globs allowed). Returns a :class:`ForecastArchive`:
an ``xarray.Dataset`` backed by dask with dims (``forecast_reference_time``, ``forecast_period``,
``latitude``, ``longitude``): issue times as UTC ``datetime64``, sorted and unique; leads as
``timedelta64`` (decoded from CF ``forecast_period`` given as timedelta or as a number with time
units such as ``hours``); longitude in -180..180. The forecast grid may differ from the reanalysis
grid (weights are built for it separately). Variables keep their names and attributes and are
found by CF ``standard_name`` like the reanalysis (:func:`lakefeed.sources.grids.find_variable`).

Checks on entry: a file without a lead dimension, or whose lead cannot be read as a time span, is
an error naming the file and the dimensions found; leads must be a regular step (hourly, 6-hourly,
daily, ...); issue times must be regular, and gaps (missing issues) are reported in
``ForecastArchive.issue_gaps`` (a human-readable line each), never silently filled.

Must not: compute the data (only coordinates are read), do science (de-accumulation and daily
aggregation are in :mod:`lakefeed.extract.forecast_daily`).
"""

from __future__ import annotations

import itertools
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.exceptions import SourceError
from lakefeed.sources.grid_files import FORMATS, engine_of, open_raw
from lakefeed.sources.grid_model import ISSUE, LEAD, Grid
from lakefeed.sources.locations import RemotePath, expand_paths
from lakefeed.units import parse_unit, ureg

__all__ = ["ISSUE", "LEAD", "ForecastArchive", "find_issue_gaps", "open_forecasts"]

_ISSUE_NAMES = ("forecast_reference_time", "reference_time", "issue_time", "init_time", "time")
_LEAD_NAMES = ("forecast_period", "step", "lead_time", "leadtime", "lead", "forecast_hour")


@dataclass(frozen=True)
class ForecastArchive:
    """Normalised forecast archive.

    Attributes
    ----------
    dataset
        Dims (forecast_reference_time, forecast_period, latitude, longitude).
    files
        Files the archive was built from, in issue-time order.
    issue_gaps
        One message per gap in the issue times (e.g. "2 issue(s) missing between ... and ...").
    crs
        Geographic CRS of the grid.
    """

    dataset: xr.Dataset
    files: tuple[Path, ...]
    issue_gaps: tuple[str, ...] = field(default_factory=tuple)
    crs: str = "EPSG:4326"

    @property
    def issue_times(self) -> pd.DatetimeIndex:
        """Issue (forecast reference) times, UTC."""
        return pd.DatetimeIndex(self.dataset[ISSUE].values)

    @property
    def leads(self) -> pd.TimedeltaIndex:
        """Lead times (forecast periods) after the issue time."""
        return pd.TimedeltaIndex(self.dataset[LEAD].values)

    @property
    def step(self) -> pd.Timedelta:
        """Regular lead step (e.g. 6 hours)."""
        return _regular_step(self.leads, what="forecast_period", where=self.label)

    @property
    def label(self) -> str:
        """Short name for messages."""
        if len(self.files) == 1:
            return str(self.files[0])
        return f"{self.files[0].name}..{self.files[-1].name} ({len(self.files)} files)"

    def as_grid(self, data: xr.Dataset | None = None) -> Grid:
        """A :class:`~lakefeed.sources.grids.Grid` view (dims time, latitude, longitude) for weights and zonal means.

        ``data`` (default the archive) is flattened: its (issue, lead) pairs become one ``time`` axis of
        valid times (issue + lead; values repeat across issues, which the zonal machinery allows).
        """
        ds = self.dataset if data is None else data
        flat = ds.stack(time=(ISSUE, LEAD)).transpose("time", "latitude", "longitude")
        valid = (pd.DatetimeIndex(flat[ISSUE].values) + pd.TimedeltaIndex(flat[LEAD].values)).values.astype(
            "datetime64[ns]"
        )
        flat = flat.drop_vars(["time", ISSUE, LEAD]).assign_coords(time=("time", valid))
        return Grid(dataset=flat, files=self.files, crs=self.crs)


def _regular_step(values: pd.Index, *, what: str, where: str) -> pd.Timedelta:
    d = np.diff(np.asarray(values.values, dtype="int64"))
    if d.size == 0:
        return pd.Timedelta(hours=1)
    if np.any(d <= 0):
        raise SourceError(f"forecast archive {where}: {what} is not increasing; sort it or remove duplicates")
    steps, counts = np.unique(d, return_counts=True)
    step = pd.Timedelta(int(steps[np.argmax(counts)]), unit="ns")
    if what == LEAD and len(steps) > 1:
        found = sorted({str(pd.Timedelta(int(s))) for s in steps})
        raise SourceError(
            f"forecast archive {where}: forecast_period steps are irregular ({found}); "
            "lakefeed needs one regular step per archive (hourly, 6-hourly or daily); split the archive"
        )
    return step


def _lead_to_timedelta(coord: xr.DataArray, path: Path) -> np.ndarray:
    vals = coord.values
    if np.issubdtype(vals.dtype, np.timedelta64):
        return vals.astype("timedelta64[ns]")
    unit = coord.attrs.get("units")
    if np.issubdtype(vals.dtype, np.number) and unit:
        try:
            per = ureg.Quantity(1.0, parse_unit(str(unit))).to("ns").magnitude
        except Exception as err:
            raise SourceError(
                f"forecast archive {path}: forecast_period {coord.name!r} has units {unit!r}, not a time unit; "
                "use CF units such as 'hours' or store it as a timedelta"
            ) from err
        return np.round(vals.astype(float) * per).astype("int64").astype("timedelta64[ns]")
    raise SourceError(
        f"forecast archive {path}: forecast_period {coord.name!r} cannot be read as a time span "
        f"(dtype {vals.dtype}, units {unit!r}); store it as CF timedelta or numbers with units 'hours'"
    )


def _find_dim(ds: xr.Dataset, standard_name: str, names: tuple[str, ...]) -> str | None:
    for var in ds.variables.values():
        if var.attrs.get("standard_name") == standard_name and var.ndim == 1:
            return str(var.dims[0])
    for name in names:
        if name in ds.dims:
            return name
    return None


def _open_one(path: Path | RemotePath, fmt: str = "auto") -> xr.Dataset:
    from lakefeed.sources.grids import normalise_lon, spatial_dims

    what = "forecast archive"
    try:
        engine = engine_of(path, fmt, what=what)
        if engine == "grib":  # issue time and step as forecast_reference_time and forecast_period
            ds = open_raw(path, engine, kind="forecast", what=what)
        elif engine == "zarr":
            ds = xr.open_zarr(path.mapper() if isinstance(path, RemotePath) else path, chunks={})
        else:
            ds = xr.open_dataset(path.open("rb") if isinstance(path, RemotePath) else path, chunks={}, cache=False)
    except SourceError:
        raise
    except Exception as err:
        raise SourceError(
            f"forecast archive {path}: cannot open ({type(err).__name__}: {err}); the file may be corrupt or truncated"
        ) from err
    lead = _find_dim(ds, "forecast_period", _LEAD_NAMES)
    if lead is None:
        raise SourceError(
            f"forecast archive {path}: no lead-time dimension (a coordinate with standard_name 'forecast_period' "
            f"or named {list(_LEAD_NAMES[:3])}); dimensions are {dict(ds.sizes)}. An archive of forecasts needs the "
            "forecast_reference_time and forecast_period dimensions"
        )
    issue = _find_dim(ds, "forecast_reference_time", _ISSUE_NAMES)
    if issue is None or issue == lead:
        raise SourceError(
            f"forecast archive {path}: no issue-time dimension (standard_name 'forecast_reference_time'); "
            f"dimensions are {dict(ds.sizes)}"
        )
    lead_td = _lead_to_timedelta(ds[lead] if lead in ds.variables else xr.DataArray(np.arange(ds.sizes[lead])), path)
    if not np.issubdtype(ds[issue].dtype, np.datetime64):
        raise SourceError(f"forecast archive {path}: issue times {issue!r} could not be decoded; give CF time units")
    ydim, xdim = spatial_dims(ds, path)
    ds = ds.rename({d: n for d, n in ((issue, ISSUE), (lead, LEAD), (ydim, "latitude"), (xdim, "longitude")) if d != n})
    ds = ds.assign_coords({LEAD: (LEAD, lead_td, {"standard_name": "forecast_period"})})
    keep = [n for n, v in ds.data_vars.items() if set(v.dims) == {ISSUE, LEAD, "latitude", "longitude"}]
    if not keep:
        raise SourceError(f"forecast archive {path}: no variable with dims (issue, lead, latitude, longitude)")
    ds = ds[keep].transpose(ISSUE, LEAD, "latitude", "longitude")
    return normalise_lon(ds).chunk({ISSUE: 16, LEAD: -1, "latitude": -1, "longitude": -1})


def find_issue_gaps(issue_times: pd.DatetimeIndex, step: pd.Timedelta) -> list[str]:
    """Messages for each gap of ``issue_times`` longer than ``step`` (e.g. one missing daily issue)."""
    t = pd.DatetimeIndex(issue_times)
    out = []
    for a, b in itertools.pairwise(t):
        if b - a > step:
            n = int((b - a) / step) - 1
            out.append(f"{n} issue(s) missing between {a:%Y-%m-%d %H:%M} and {b:%Y-%m-%d %H:%M} UTC")
    return out


def open_forecasts(paths: str | Path | Iterable[str | Path], *, format: str = "auto") -> ForecastArchive:
    """Open forecast archive file(s) as a normalised lazy :class:`ForecastArchive`.

    Parameters
    ----------
    paths
        CF NetCDF file(s) or glob(s) with dims forecast_reference_time, forecast_period, latitude,
        longitude (all files on one grid and with the same leads), or GRIB files (issue ``time`` and
        ``step``); local or URLs (``s3://...``).
    format
        ``auto`` (from each file's content), ``netcdf``, ``zarr`` or ``grib``.

    Raises
    ------
    SourceError
        Missing or unreadable lead dimension, irregular leads, files on different grids or with
        different leads, duplicate issue times.
    """
    if format not in FORMATS:
        raise SourceError(f"forecast archive: format {format!r} is not one of {', '.join(FORMATS)}")
    files = expand_paths(paths, what="forecast archive", key="forecast.paths")
    opened = [(f, _open_one(f, format)) for f in files]
    opened.sort(key=lambda fd: fd[1][ISSUE].values[0])
    ref_f, ref = opened[0]
    for f, ds in opened[1:]:
        for c in ("latitude", "longitude", LEAD):
            if ds.sizes[c] != ref.sizes[c] or not np.array_equal(np.asarray(ds[c].values), np.asarray(ref[c].values)):
                raise SourceError(f"forecast archive {f}: its {c} differs from {ref_f}'s; all files must match")
    dsets = [d for _, d in opened]
    ds = (
        dsets[0]
        if len(dsets) == 1
        else xr.concat(dsets, dim=ISSUE, data_vars="minimal", coords="minimal", compat="override", join="override")
    )
    issues = pd.DatetimeIndex(ds[ISSUE].values)
    if issues.has_duplicates:
        dup = issues[issues.duplicated()][0]
        raise SourceError(
            f"forecast archive: issue time {dup} appears twice (overlapping files?); remove the duplicate"
        )
    label = str(files[0]) if len(files) == 1 else f"{files[0].name}..{files[-1].name}"
    _regular_step(pd.TimedeltaIndex(ds[LEAD].values), what=LEAD, where=label)
    step = _regular_step(issues, what=ISSUE, where=label)
    gaps = find_issue_gaps(issues, step)
    return ForecastArchive(dataset=ds, files=tuple(f for f, _ in opened), issue_gaps=tuple(gaps))
