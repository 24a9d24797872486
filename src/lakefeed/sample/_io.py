"""Deterministic writers and random streams shared by the sample-scenario generator.

Takes in-memory objects (xarray datasets, dicts, frames) and writes files whose bytes depend only on
their content: fixed global attributes, no timestamps, sorted JSON keys, a fixed GeoPackage
``last_change`` date. Random numbers come from one :class:`numpy.random.Generator` per named stream
derived from the seed, so changing one part of the scenario does not shift the others.
Must not read the wall clock or depend on hash-randomised ordering.
"""

from __future__ import annotations

import json
import zlib
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

__all__ = ["GLOBAL_ATTRS", "fixed_gpkg_date", "rng_for", "write_json", "write_netcdf"]

#: Global attributes of every generated NetCDF file (no history, no creation date).
GLOBAL_ATTRS: dict[str, str] = {
    "Conventions": "CF-1.8",
    "institution": "lakefeed sample scenario (invented data)",
    "source": "lakefeed.sample generator; every value is synthetic",
    "comment": "Invented scenario 'Tallow Reservoir'; not a real place. For testing and demonstration only.",
}


def rng_for(seed: int, stream: str) -> np.random.Generator:
    """A random generator for one named part of the scenario (stable across Python runs).

    The stream name is turned into an integer with CRC-32 (``hash()`` is randomised per process).
    """
    return np.random.default_rng(np.random.SeedSequence([int(seed), zlib.crc32(stream.encode("utf-8"))]))


def write_netcdf(ds: xr.Dataset, path: Path, *, encoding: dict[str, dict[str, Any]] | None = None) -> Path:
    """Write ``ds`` as NetCDF-4 with the fixed global attributes; byte-identical for identical content."""
    path.parent.mkdir(parents=True, exist_ok=True)
    ds = ds.copy()
    ds.attrs = {**GLOBAL_ATTRS, **ds.attrs}
    ds.to_netcdf(path, engine="netcdf4", format="NETCDF4", encoding=encoding or {})
    return path


def write_json(obj: Any, path: Path) -> Path:
    """Write ``obj`` as JSON with sorted keys and a trailing newline."""
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(obj, sort_keys=True, indent=1, allow_nan=False) + "\n", encoding="utf-8")
    return path


@contextmanager
def fixed_gpkg_date():
    """Make GDAL stamp GeoPackages with a fixed ``last_change`` date (reproducible bytes)."""
    import pyogrio

    key = "OGR_CURRENT_DATE"
    old = pyogrio.get_gdal_config_option(key)
    pyogrio.set_gdal_config_options({key: "2000-01-01T00:00:00.000Z"})
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options({key: old})
