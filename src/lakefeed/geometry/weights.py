"""Exact area weights of grid cells for named zones (a sparse zones x cells matrix).

Takes the 1-D cell-centre coordinates of a regular or irregular latitude/longitude grid
(degrees; latitude ascending or descending; longitude in -180..180) and zone polygons in
geographic coordinates (degrees, same datum as the grid). Returns a :class:`ZoneWeights`:
``matrix[z, c]`` = (exactly covered fraction of cell ``c`` by zone ``z``, computed in the
grid's lon/lat plane as exactextract does) x (true area of cell ``c`` in m2 on the ellipsoid,
or on a sphere when asked). Cells are numbered row-major in the grid's own order:
``c = i_lat * n_lon + i_lon``.

Must not: open files, compute dask arrays, or use centre-point masks (a zone smaller than a
cell keeps the cells it touches and is flagged ``sub_cell_zone``). Floating-point slivers of
coverage (exact intersection noise, ~1e-14 of a cell) are dropped so that a zone lying
wholly in NaN cells gives NaN, not a neighbour's value.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
import shapely
from shapely.geometry.base import BaseGeometry

from lakefeed.exceptions import GeometryError
from lakefeed.sources.grid_model import grid_signature

__all__ = [
    "WGS84_A",
    "WGS84_F",
    "ZoneWeights",
    "cell_areas",
    "cell_edges",
    "normalise_polygon",
    "zone_hash",
    "zone_weights",
]

#: WGS84 semi-major axis (m) and flattening (EPSG:7030).
WGS84_A = 6378137.0
WGS84_F = 1 / 298.257223563
#: Coverage below this fraction of the zone's own area is floating-point sliver and is dropped.
SLIVER = 1e-9


@dataclass(frozen=True)
class ZoneWeights:
    """Weights of grid cells per zone.

    Attributes
    ----------
    matrix
        ``scipy.sparse.csr_matrix`` (zones x cells), covered cell area in m2.
    zones
        Zone names, one per matrix row.
    shape
        Grid shape (n_lat, n_lon) in the grid's own order.
    signature
        :func:`lakefeed.sources.grid_model.grid_signature` of the grid the weights belong to.
    zone_hashes
        :func:`zone_hash` per zone.
    grid_coverage
        Fraction (0..1) of each zone's area inside the grid extent.
    sub_cell
        True where the zone is smaller than the mean area of the cells it touches.
    """

    matrix: sp.csr_matrix
    zones: tuple[str, ...]
    shape: tuple[int, int]
    signature: str
    zone_hashes: tuple[str, ...]
    grid_coverage: np.ndarray
    sub_cell: np.ndarray
    extra: dict[str, str] = field(default_factory=dict)

    @property
    def zone_area_m2(self) -> np.ndarray:
        """Weighted (covered) area of each zone in m2."""
        return np.asarray(self.matrix.sum(axis=1)).ravel()

    def flags(self, zone: str) -> list[str]:
        """Geometry flags of one zone (``sub_cell_zone``, ``partial_grid_coverage``)."""
        i = self.zones.index(zone)
        out = []
        if self.sub_cell[i]:
            out.append("sub_cell_zone")
        if self.grid_coverage[i] < 1 - 1e-9:
            out.append("partial_grid_coverage")
        return out

    def to_arrays(self) -> dict[str, np.ndarray]:
        """Plain arrays for caching (see :meth:`from_arrays`)."""
        coo = self.matrix.tocoo()
        return {
            "row": coo.row.astype(np.int32),
            "col": coo.col.astype(np.int64),
            "weight": coo.data,
            "zones": np.asarray(self.zones, dtype=str),
            "zone_hashes": np.asarray(self.zone_hashes, dtype=str),
            "shape": np.asarray(self.shape, dtype=np.int64),
            "signature": np.asarray(self.signature),
            "grid_coverage": self.grid_coverage,
            "sub_cell": self.sub_cell,
        }

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray]) -> ZoneWeights:
        """Rebuild from :meth:`to_arrays` output."""
        shape = tuple(int(v) for v in arrays["shape"])
        zones = tuple(str(z) for z in arrays["zones"])
        m = sp.csr_matrix((arrays["weight"], (arrays["row"], arrays["col"])), shape=(len(zones), shape[0] * shape[1]))
        return cls(
            matrix=m,
            zones=zones,
            shape=(shape[0], shape[1]),
            signature=str(arrays["signature"]),
            zone_hashes=tuple(str(h) for h in arrays["zone_hashes"]),
            grid_coverage=np.asarray(arrays["grid_coverage"], dtype=float),
            sub_cell=np.asarray(arrays["sub_cell"], dtype=bool),
        )

    def cells(self, zone: str | None = None) -> np.ndarray:
        """Flat indices (``i_lat * n_lon + i_lon``, ascending) of the cells ``zone`` weighs (any zone: None).

        The cells the zonal means read and weigh; ``lakefeed check`` counts and inspects these same cells.
        """
        m = self.matrix if zone is None else self.matrix[self.zones.index(zone)]
        return np.unique(m.tocoo().col[m.tocoo().data > 0]).astype(np.int64)

    def cell_window(self) -> tuple[slice, slice]:
        """Smallest (lat, lon) index window holding every weighted cell."""
        cols = self.matrix.indices
        if cols.size == 0:
            return slice(0, 0), slice(0, 0)
        i, j = np.divmod(cols, self.shape[1])
        return slice(int(i.min()), int(i.max()) + 1), slice(int(j.min()), int(j.max()) + 1)

    def restrict(self, window: tuple[slice, slice]) -> sp.csr_matrix:
        """The matrix with columns renumbered for the sub-grid ``window`` (cells outside must be unweighted)."""
        (r0, r1), (c0, c1) = (window[0].start, window[0].stop), (window[1].start, window[1].stop)
        coo = self.matrix.tocoo()
        i, j = np.divmod(coo.col, self.shape[1])
        inside = (i >= r0) & (i < r1) & (j >= c0) & (j < c1)
        if not inside.all():
            raise GeometryError("weights reach outside the requested window")
        col = (i - r0) * (c1 - c0) + (j - c0)
        return sp.csr_matrix((coo.data, (coo.row, col)), shape=(len(self.zones), (r1 - r0) * (c1 - c0)))


def cell_edges(centres: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper edge of each cell from 1-D centre coordinates (degrees).

    Edges lie half-way between neighbouring centres; the outer cells (and cells beside a gap
    wider than 1.5x the median spacing, e.g. a grid split by the antimeridian) mirror their
    inner half-width. Works for ascending and descending coordinates. Returns (low, high)
    with ``low < high`` per cell.
    """
    c = np.asarray(centres, dtype=float)
    if c.ndim != 1 or c.size < 2:
        raise GeometryError(f"need at least two cell centres along each axis, got {c.size}")
    d = np.diff(c)
    if not (np.all(d > 0) or np.all(d < 0)):
        raise GeometryError("cell-centre coordinates must be strictly monotonic")
    step = np.abs(d)
    gap = step > 1.5 * np.median(step)
    half_left = np.r_[np.nan, step / 2]
    half_right = np.r_[step / 2, np.nan]
    half_left[1:][gap] = np.nan
    half_right[:-1][gap] = np.nan
    half_left = np.where(np.isnan(half_left), half_right, half_left)
    half_right = np.where(np.isnan(half_right), half_left, half_right)
    if np.isnan(half_left).any():
        raise GeometryError("cannot infer cell edges of an isolated cell; give a regular grid")
    if d[0] < 0:  # descending: the "left" neighbour is above
        half_left, half_right = half_right, half_left
    return c - half_left, c + half_right


def _authalic_band(lat_deg: np.ndarray, a: float, f: float) -> np.ndarray:
    """Area (m2) between the equator and latitude per radian of longitude on an ellipsoid.

    Exact area of an ellipsoidal quadrangle bounded by meridians and parallels, per radian of
    longitude: b^2/2 * q(phi), q the authalic function. Common geodesy (closed form).
    """
    phi = np.deg2rad(np.clip(lat_deg, -90, 90))
    if f == 0:
        return a * a * np.sin(phi)
    e2 = f * (2 - f)
    e = np.sqrt(e2)
    s = np.sin(phi)
    b2 = a * a * (1 - e2)
    q = s / (1 - e2 * s * s) + np.log((1 + e * s) / (1 - e * s)) / (2 * e)
    return b2 / 2 * q


def cell_areas(lat: np.ndarray, lon: np.ndarray, *, a: float = WGS84_A, f: float = WGS84_F) -> np.ndarray:
    """True area (m2) of each lat/lon cell, shape (n_lat, n_lon).

    Ellipsoidal by default (WGS84); ``f=0`` gives a sphere of radius ``a``. Matches
    ``pyproj.Geod.polygon_area_perimeter`` of the cell to ~1e-7 relative at 0.1 degree.
    """
    lat_lo, lat_hi = cell_edges(lat)
    lon_lo, lon_hi = cell_edges(lon)
    band = _authalic_band(lat_hi, a, f) - _authalic_band(lat_lo, a, f)
    return np.outer(band, np.deg2rad(lon_hi - lon_lo))


def zone_hash(geometry: BaseGeometry) -> str:
    """Content hash of a zone polygon (normalised WKB), the other key of cached weights."""
    return hashlib.sha256(shapely.to_wkb(shapely.normalize(geometry), output_dimension=2)).hexdigest()[:20]


def normalise_polygon(geometry: BaseGeometry) -> BaseGeometry:
    """Fold a polygon given with longitudes beyond +-180 back into -180..180 (split at the antimeridian)."""
    xmin, _, xmax, _ = geometry.bounds
    if xmin >= -180 and xmax <= 180:
        return geometry
    parts = []
    for shift in (-360.0, 0.0, 360.0):
        piece = shapely.intersection(geometry, shapely.box(-180 - shift, -90, 180 - shift, 90))
        if not piece.is_empty:
            parts.append(shapely.affinity.translate(piece, xoff=shift))
    return shapely.union_all(parts)


def zone_weights(
    zones: dict[str, BaseGeometry],
    lat: np.ndarray,
    lon: np.ndarray,
    *,
    allow_partial_coverage: bool = False,
    sphere_radius: float | None = None,
    crs: str = "EPSG:4326",
) -> ZoneWeights:
    """Exact coverage-fraction x cell-area weights of every zone.

    Parameters
    ----------
    zones
        Zone name -> polygon or multipolygon in lon/lat degrees (x = longitude).
    lat, lon
        1-D cell-centre coordinates in degrees (any monotonic order; longitude -180..180).
    allow_partial_coverage
        A zone partly outside the grid is an error unless True (then its covered fraction is in
        ``grid_coverage``). A zone wholly outside is always an error.
    sphere_radius
        Use a sphere of this radius (m) for cell areas instead of the WGS84 ellipsoid.

    Returns
    -------
    ZoneWeights
        Weights in m2 of covered cell area.
    """
    lat = np.asarray(lat, dtype=float)
    lon = np.asarray(lon, dtype=float)
    lat_lo, lat_hi = cell_edges(lat)
    lon_lo, lon_hi = cell_edges(lon)
    a, f = (sphere_radius, 0.0) if sphere_radius else (WGS84_A, WGS84_F)
    areas = cell_areas(lat, lon, a=a, f=f)
    n_lat, n_lon = lat.size, lon.size
    extent = shapely.union_all(
        shapely.box(lon_lo.min(), lat_lo.min(), lon_hi.max(), lat_hi.max())
        if not _has_gap(lon)
        else [shapely.box(lo, lat_lo.min(), hi, lat_hi.max()) for lo, hi in zip(lon_lo, lon_hi, strict=True)]
    )
    rows: list[np.ndarray] = []
    cols: list[np.ndarray] = []
    vals: list[np.ndarray] = []
    coverage = np.ones(len(zones))
    sub_cell = np.zeros(len(zones), dtype=bool)
    names = tuple(zones)
    for k, name in enumerate(names):
        geom = zones[name]
        if geom is None or geom.is_empty or geom.area == 0:
            raise GeometryError(f"zone {name!r} has an empty geometry; fix or remove it")
        geom = normalise_polygon(shapely.make_valid(geom) if not geom.is_valid else geom)
        inside = shapely.intersection(geom, extent)
        coverage[k] = inside.area / geom.area
        if inside.is_empty or coverage[k] <= SLIVER:
            raise GeometryError(
                f"zone {name!r} lies entirely outside the grid: zone extent (lon/lat) "
                f"{_fmt(geom.bounds)}, grid extent {_fmt(extent.bounds)}; check the zone's CRS and the grid"
            )
        if coverage[k] < 1 - 1e-9 and not allow_partial_coverage:
            raise GeometryError(
                f"zone {name!r} is only {coverage[k]:.1%} inside the grid: zone extent {_fmt(geom.bounds)}, "
                f"grid extent {_fmt(extent.bounds)}; use a larger grid or set zones.allow_partial_coverage"
            )
        ci, cj, frac = _coverage(inside, lat_lo, lat_hi, lon_lo, lon_hi)
        cell_deg = (lat_hi[ci] - lat_lo[ci]) * (lon_hi[cj] - lon_lo[cj])
        keep = frac * cell_deg > SLIVER * inside.area
        ci, cj, frac = ci[keep], cj[keep], frac[keep]
        sub_cell[k] = inside.area < cell_deg[keep].mean()
        rows.append(np.full(ci.size, k, dtype=np.int32))
        cols.append(ci.astype(np.int64) * n_lon + cj)
        vals.append(frac * areas[ci, cj])
    matrix = sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(len(names), n_lat * n_lon)
    )
    return ZoneWeights(
        matrix=matrix,
        zones=names,
        shape=(n_lat, n_lon),
        signature=grid_signature(lat, lon, crs=crs) + ("" if sphere_radius is None else f"-s{sphere_radius:g}"),
        zone_hashes=tuple(zone_hash(zones[n]) for n in names),
        grid_coverage=coverage,
        sub_cell=sub_cell,
    )


def _has_gap(lon: np.ndarray) -> bool:
    step = np.abs(np.diff(lon))
    return bool((step > 1.5 * np.median(step)).any())


def _fmt(bounds: tuple[float, float, float, float]) -> str:
    return "[" + ", ".join(f"{b:.4f}" for b in bounds) + "]"


def _candidates(lo: np.ndarray, hi: np.ndarray, vmin: float, vmax: float) -> np.ndarray:
    """Indices of cells whose [lo, hi] interval overlaps [vmin, vmax] (bbox slice; no buffer)."""
    return np.nonzero((hi > vmin) & (lo < vmax))[0]


def _coverage(
    geom: BaseGeometry, lat_lo: np.ndarray, lat_hi: np.ndarray, lon_lo: np.ndarray, lon_hi: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(row, col, covered fraction) of the cells the geometry touches; vectorised shapely 2."""
    xmin, ymin, xmax, ymax = geom.bounds
    ii = _candidates(lat_lo, lat_hi, ymin, ymax)
    jj = _candidates(lon_lo, lon_hi, xmin, xmax)
    if ii.size == 0 or jj.size == 0:
        return np.empty(0, int), np.empty(0, int), np.empty(0)
    gi, gj = np.meshgrid(ii, jj, indexing="ij")
    gi, gj = gi.ravel(), gj.ravel()
    boxes = shapely.box(lon_lo[gj], lat_lo[gi], lon_hi[gj], lat_hi[gi])
    shapely.prepare(geom)
    full = shapely.contains_properly(geom, boxes)
    touch = shapely.intersects(geom, boxes) & ~full
    frac = full.astype(float)
    part = np.nonzero(touch)[0]
    if part.size:
        inter = shapely.intersection(boxes[part], geom)
        frac[part] = shapely.area(inter) / shapely.area(boxes[part])
    keep = frac > 0
    return gi[keep], gj[keep], np.minimum(frac[keep], 1.0)
