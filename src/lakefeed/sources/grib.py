"""Open GRIB (editions 1 and 2) weather analyses and forecasts through cfgrib and ecCodes.

Takes one GRIB file. Returns the canonical Dataset the NetCDF readers give: for analyses dims
(``time``, ``latitude``, ``longitude``) with ``time`` the valid time (a field given as a forecast
step, such as an accumulation since the start of a forecast, is placed at ``time + step``); for
forecasts dims (``forecast_reference_time``, ``forecast_period``, ``latitude``, ``longitude``) from
GRIB's ``time`` (issue) and ``step`` (lead). The fields cfgrib gives as separate hypercubes
(instantaneous and accumulated, different levels) are joined on their time axes.

Each variable keeps cfgrib's attributes (``units`` from the GRIB metadata, ``GRIB_*`` keys) and gets
the CF ``standard_name`` of its GRIB parameter: cfgrib's, or where it has none for the edition (most
GRIB 1 parameters) the one ecCodes gives the same ``paramId`` in edition 2; a parameter without one
is found through the config's ``variables`` mapping (its cfgrib name, e.g. ``tp``).

Every message is read once with ecCodes before cfgrib indexes the file (cfgrib skips a corrupt
message with a log line only): a corrupt or truncated message is an error naming the file and the
message number. The index files cfgrib writes go to lakefeed's cache folder (:func:`cache_dir`),
never beside the inputs (which may be read-only).

Must not: compute the data (values are read lazily), do science.
"""

from __future__ import annotations

import hashlib
import json
import warnings
from functools import cache
from pathlib import Path
from typing import Literal

import numpy as np
import xarray as xr

from lakefeed.exceptions import SourceError
from lakefeed.sources.grid_model import ISSUE, LEAD
from lakefeed.sources.locations import cache_dir

__all__ = ["GRIB_MAGIC", "cache_dir", "index_path", "is_grib", "open_grib", "scan_messages"]

GRIB_MAGIC = b"GRIB"
_KEEP_ATTRS = ("GRIB_paramId", "GRIB_shortName", "GRIB_stepType", "GRIB_typeOfLevel", "GRIB_name")


def index_path(path: Path) -> str:
    """cfgrib ``indexpath`` template for ``path``: a file of :func:`cache_dir`'s ``grib-index`` folder."""
    folder = cache_dir() / "grib-index"
    folder.mkdir(parents=True, exist_ok=True)
    key = hashlib.sha1(str(Path(path).resolve()).encode()).hexdigest()[:20]
    return str(folder / f"{key}.{{short_hash}}.idx")


def is_grib(head: bytes) -> bool:
    """True when the first bytes of a file start a GRIB message."""
    return head.startswith(GRIB_MAGIC)


def _scan_record(path: Path) -> Path:
    st = Path(path).stat()
    key = hashlib.sha1(f"{Path(path).resolve()}|{st.st_size}|{st.st_mtime_ns}".encode()).hexdigest()[:20]
    return cache_dir() / "grib-index" / f"{key}.scan.json"


def scan_messages(path: Path, label: str | None = None) -> dict[int, float]:
    """Every message's framing checked (headers only, values not decoded); the packing step of each parameter.

    Returns the largest packing step (``2**E * 10**-D``, the value of one unit of the packed integers) of
    every GRIB ``paramId`` in the file: the noise of its values, as ``scale_factor`` is for packed NetCDF.
    The result is kept in the cache folder (keyed by path, size and modification time), so that a second
    open (``lakefeed check``, then the build) reads the index only.

    Raises
    ------
    SourceError
        Naming the file and the number of the first message that is truncated or corrupt.
    """
    import eccodes

    label = label or str(path)
    record = _scan_record(path)
    if record.exists():
        return {int(k): float(v) for k, v in json.loads(record.read_text()).items()}
    steps: dict[int, float] = {}
    n = 0
    size = Path(path).stat().st_size
    with open(path, "rb") as fh:
        while True:
            start = fh.tell()
            try:
                h = eccodes.codes_grib_new_from_file(fh, headers_only=True)
                if h is None:
                    break
                try:
                    pid = int(eccodes.codes_get(h, "paramId"))
                    e, d = (int(eccodes.codes_get(h, k)) for k in ("binaryScaleFactor", "decimalScaleFactor"))
                finally:
                    eccodes.codes_release(h)
            except Exception as err:  # ecCodes: PrematureEndOfFileError, WrongLengthError, ...
                raise SourceError(
                    f"GRIB file {label}: message {n + 1} (from byte {start}) is truncated or corrupt "
                    f"({type(err).__name__}: {err}); {n} message(s) before it are sound: download the file again"
                ) from err
            steps[pid] = max(steps.get(pid, 0.0), 2.0**e * 10.0**-d)
            n += 1
    if n == 0:
        raise SourceError(f"GRIB file {label}: no GRIB message in its {size} bytes; the file is not GRIB or is empty")
    record.parent.mkdir(parents=True, exist_ok=True)
    record.write_text(json.dumps(steps))
    return steps


@cache
def _cf_name(param_id: int) -> str | None:
    """CF standard_name ecCodes gives GRIB parameter ``param_id`` in edition 2 (None: it has none)."""
    import eccodes

    h = eccodes.codes_grib_new_from_samples("GRIB2")
    try:
        eccodes.codes_set(h, "paramId", int(param_id))
        name = str(eccodes.codes_get(h, "cfName"))
    except Exception:  # a paramId edition 2 does not know
        return None
    finally:
        eccodes.codes_release(h)
    return None if name in ("", "unknown") else name


def _attributes(ds: xr.Dataset, steps: dict[int, float]) -> xr.Dataset:
    """Keep the useful GRIB keys, add the CF standard_name and the packing step of every variable."""
    for name, var in ds.data_vars.items():
        attrs = {k: v for k, v in var.attrs.items() if k in _KEEP_ATTRS or not k.startswith("GRIB_")}
        if "GRIB_paramId" in var.attrs and steps.get(int(var.attrs["GRIB_paramId"])):
            attrs["packing_step"] = steps[int(var.attrs["GRIB_paramId"])]
        if attrs.get("standard_name") in (None, "", "unknown"):
            attrs.pop("standard_name", None)
            sn = _cf_name(int(var.attrs["GRIB_paramId"])) if "GRIB_paramId" in var.attrs else None
            if sn:
                attrs["standard_name"] = sn
        ds[name].attrs = attrs
    return ds


def _hypercubes(path: Path, label: str) -> list[xr.Dataset]:
    import cfgrib

    try:
        with warnings.catch_warnings():  # cfgrib's own use of xarray's changing merge defaults, not ours
            warnings.filterwarnings("ignore", category=FutureWarning, module="cfgrib")
            return cfgrib.open_datasets(
                str(path),
                backend_kwargs={"indexpath": index_path(path)},
                time_dims=("time", "step"),
                cache=False,
            )
    except Exception as err:
        raise SourceError(
            f"GRIB file {label}: cfgrib cannot read it ({type(err).__name__}: {err}); the file may be corrupt: "
            "download it again"
        ) from err


def _spatial_only(ds: xr.Dataset, label: str) -> xr.Dataset:
    extra = [d for d in ds.dims if d not in ("time", "step", "latitude", "longitude")]
    if extra:
        raise SourceError(
            f"GRIB file {label}: variables {sorted(map(str, ds.data_vars))} have extra dimensions {extra} (ensemble "
            "members or several levels); lakefeed reads one level and one member: split the file (grib_copy -w)"
        )
    if "latitude" not in ds.dims or "longitude" not in ds.dims:
        raise SourceError(
            f"GRIB file {label}: variables {sorted(map(str, ds.data_vars))} are not on a regular latitude/longitude "
            f"grid (dimensions {dict(ds.sizes)}); regrid to a regular_ll grid first"
        )
    keep = {"time", "step", "latitude", "longitude", "valid_time"}
    return ds.drop_vars([c for c in ds.coords if c not in keep])


def _to_valid_time(ds: xr.Dataset, label: str) -> xr.Dataset:
    """Analysis hypercube on one ``time`` axis of valid times (issue + step)."""
    valid = np.asarray(ds["valid_time"].values, dtype="datetime64[ns]")
    for d in ("time", "step"):
        if d not in ds.dims:
            ds = ds.expand_dims(d)
    ds = ds.drop_vars("valid_time").transpose("time", "step", "latitude", "longitude")
    flat = ds.stack(vt=("time", "step")).transpose("vt", "latitude", "longitude")
    flat = flat.drop_vars(["vt", "time", "step"]).rename(vt="time")
    flat = flat.assign_coords(time=("time", valid.reshape(-1)))
    t = flat["time"].values
    if np.unique(t).size != t.size:
        raise SourceError(
            f"GRIB file {label}: fields {sorted(map(str, ds.data_vars))} hold the same valid time twice (overlapping "
            "forecast steps); give analyses one field per valid time, or read the file as a forecast source"
        )
    return flat.sortby("time")


def _to_forecast(ds: xr.Dataset) -> xr.Dataset:

    ds = ds.drop_vars("valid_time", errors="ignore")
    for d in ("time", "step"):
        if d not in ds.dims:
            ds = ds.expand_dims(d)
    ds = ds.rename(time=ISSUE, step=LEAD).transpose(ISSUE, LEAD, "latitude", "longitude")
    ds[ISSUE].attrs["standard_name"] = "forecast_reference_time"
    ds[LEAD].attrs["standard_name"] = "forecast_period"
    return ds


def open_grib(
    path: str | Path, *, kind: Literal["analysis", "forecast"] = "analysis", label: str | None = None
) -> xr.Dataset:
    """Open a GRIB file lazily as the canonical analysis or forecast Dataset (see the module docstring).

    Parameters
    ----------
    path
        A local GRIB file (edition 1 or 2, any number of messages).
    kind
        ``"analysis"``: dims (time, latitude, longitude), time the valid time; ``"forecast"``: dims
        (forecast_reference_time, forecast_period, latitude, longitude).
    label
        How messages name the file (default ``path``; the URL of an object copied into the cache).

    Raises
    ------
    SourceError
        A corrupt or truncated message (file and message number), fields not on a regular lat/lon grid,
        ensemble or level dimensions, the same valid time twice in an analysis.
    """
    path = Path(path)
    label = label or str(path)
    steps = scan_messages(path, label)
    cubes = [_spatial_only(d, label) for d in _hypercubes(path, label)]
    if not cubes:
        raise SourceError(f"GRIB file {label}: cfgrib found no field it can read")
    cubes = [_to_valid_time(d, label) if kind == "analysis" else _to_forecast(d) for d in cubes]
    try:
        ds = xr.merge(cubes, join="outer", compat="override", combine_attrs="drop_conflicts")
    except Exception as err:
        raise SourceError(
            f"GRIB file {label}: its fields cannot be joined on one grid ({type(err).__name__}: {err}); all fields "
            "must share one latitude/longitude grid"
        ) from err
    return _attributes(ds, steps)
