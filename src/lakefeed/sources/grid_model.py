"""The canonical grid object the grid readers return, and the content hash that keys cached weights.

Takes an opened ``xarray.Dataset`` and the files behind it; gives :class:`Grid` (cell centres,
label for messages, signature). Must not open files or compute the data.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import xarray as xr

from lakefeed.sources.grid_rules import GridPart

__all__ = ["ISSUE", "LEAD", "Grid", "grid_signature"]


def grid_signature(lat: np.ndarray, lon: np.ndarray, *, crs: str = "EPSG:4326") -> str:
    """Content hash of a grid (cell centres and CRS), the key of cached weights."""
    h = hashlib.sha256()
    for arr in (lat, lon):
        h.update(np.ascontiguousarray(np.asarray(arr, dtype=np.float64)).tobytes())
    h.update(crs.encode())
    return h.hexdigest()[:20]


#: Names of the forecast archive's issue-time and lead-time coordinates (CF).
ISSUE = "forecast_reference_time"
LEAD = "forecast_period"


@dataclass(frozen=True)
class Grid:
    """A normalised lat/lon grid.

    Attributes
    ----------
    dataset
        Dims (time, latitude, longitude); time UTC; longitude -180..180.
    files
        The files (or Zarr store) the dataset was built from, in time order.
    skipped
        One message per file left out (``on_error="skip"``).
    crs
        "EPSG:4326" unless the file's grid mapping names another geographic datum.
    parts
        Each file's own variable attributes (units, packing) and time range (empty when the grid
        was not opened from files by :func:`open_grid`).
    """

    dataset: xr.Dataset
    files: tuple[Path, ...]
    skipped: tuple[str, ...] = field(default_factory=tuple)
    crs: str = "EPSG:4326"
    parts: tuple[GridPart, ...] = field(default_factory=tuple)

    @property
    def lat(self) -> np.ndarray:
        """Cell-centre latitudes (degrees north), file order."""
        return np.asarray(self.dataset["latitude"].values, dtype=float)

    @property
    def lon(self) -> np.ndarray:
        """Cell-centre longitudes (degrees east, -180..180)."""
        return np.asarray(self.dataset["longitude"].values, dtype=float)

    @property
    def signature(self) -> str:
        """Content hash of the grid's cells and CRS (key of cached weights)."""
        return grid_signature(self.lat, self.lon, crs=self.crs)

    @property
    def label(self) -> str:
        """Short name for messages: the file, or first..last file."""
        if len(self.files) == 1:
            return str(self.files[0])
        return f"{self.files[0].name}..{self.files[-1].name} ({len(self.files)} files)"
