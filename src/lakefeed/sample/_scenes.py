"""Invented chlorophyll-a scenes of two sensors, as GeoTIFFs described by a STAC catalog.

Takes the daily lake-wide truth, the spatial pattern, the lake polygon and the weather's cloudiness;
writes ``scenes/data/<sensor>/<scene_id>_{chla,quality,uncertainty}.tif`` (EPSG:32632), one STAC Item
per scene under ``scenes/items/`` and ``scenes/catalog.json``. Planted: a multiplicative bias per sensor
(against the truth), pixel noise, spatially correlated cloud blobs (quality bit 0) with shadows (bit 1),
sun glint (bit 2), shore pixels mixed with land whose adjacency flag (bit 3) is set only for some of them,
partial footprints (nodata), and a few outlier scenes. Returns one truth row per scene.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC
from pathlib import Path

import numpy as np
import pandas as pd
import pystac
import rasterio
import shapely
from pyproj import Transformer
from rasterio.crs import CRS as RasterCRS
from rasterio.io import MemoryFile
from scipy.ndimage import distance_transform_edt

from lakefeed.sample._geo import CRS
from lakefeed.sample._io import rng_for, write_json

__all__ = [
    "NODATA",
    "OUTLIER_FACTOR",
    "QUALITY_NODATA",
    "SENSORS",
    "SHORE_FLAG_PROBABILITY",
    "SensorSpec",
    "aoi_pattern_means",
    "write_scenes",
]

NODATA = -9999.0
QUALITY_NODATA = 255
_EXT = [
    "https://stac-extensions.github.io/projection/v2.0.0/schema.json",
    "https://stac-extensions.github.io/eo/v1.1.0/schema.json",
    "https://stac-extensions.github.io/raster/v1.1.0/schema.json",
]
_TIFF = "image/tiff; application=geotiff"
_RASTER_CRS = RasterCRS.from_user_input(CRS)


@dataclass(frozen=True)
class SensorSpec:
    """One invented sensor: pixel size (m), revisit (days), overpass hour (UTC) and planted errors."""

    name: str
    pixel_m: float
    every_days: int
    hour_utc: float
    margin_m: float
    bias_ratio: float
    noise_sd: float  # per-pixel log-normal noise (relative)
    uncertainty: float  # reported relative 1-sigma of a clean pixel
    cloud_scale_px: float
    shadow_shift_px: tuple[int, int]
    outlier_fraction: float


SENSORS: dict[str, SensorSpec] = {
    "kite": SensorSpec("kite", 20.0, 5, 10.5, 300.0, 1.0, 0.15, 0.15, 30.0, (14, -20), 0.015),
    "dune": SensorSpec("dune", 300.0, 1, 10.0, 900.0, 1.25, 0.08, 0.20, 2.5, (1, -1), 0.01),
}
OUTLIER_FACTOR = 4.0
SHORE_FLAG_PROBABILITY = 0.5
LAND_CHLA = 60.0  # what a land-contaminated pixel would read, mg m-3


@dataclass(frozen=True)
class _Grid:
    transform: rasterio.Affine
    shape: tuple[int, int]
    x: np.ndarray
    y: np.ndarray
    depth: np.ndarray  # signed distance to the shoreline, m (positive inside the lake)
    pattern: np.ndarray
    kernel: np.ndarray  # Fourier transform of the cloud smoothing kernel
    footprint_lonlat: shapely.Polygon


def _grid(spec: SensorSpec, lake: shapely.Polygon, pattern_fn: Callable, to_ll: Transformer) -> _Grid:
    res = spec.pixel_m
    minx, miny, maxx, maxy = lake.bounds
    x0 = np.floor((minx - spec.margin_m) / res) * res
    y1 = np.ceil((maxy + spec.margin_m) / res) * res
    nx = int(np.ceil((maxx + spec.margin_m - x0) / res))
    ny = int(np.ceil((y1 - (miny - spec.margin_m)) / res))
    x = x0 + res * (np.arange(nx) + 0.5)
    y = y1 - res * (np.arange(ny) + 0.5)
    xx, yy = np.meshgrid(x, y)
    inside = shapely.contains_xy(lake, xx, yy)
    # Exact distances only near the shore; elsewhere a distance transform (pixels) is close enough.
    dist = res * np.where(inside, distance_transform_edt(inside), distance_transform_edt(~inside))
    near = dist < 3.0 * res
    dist[near] = shapely.distance(shapely.points(xx[near], yy[near]), lake.boundary)
    ky = np.fft.fftfreq(ny)[:, None]
    kx = np.fft.rfftfreq(nx)[None, :]
    kernel = np.exp(-2.0 * (np.pi * spec.cloud_scale_px) ** 2 * (kx**2 + ky**2))
    box = shapely.box(x0, y1 - ny * res, x0 + nx * res, y1)
    footprint = shapely.transform(box, lambda c: np.column_stack(to_ll.transform(c[:, 0], c[:, 1])))
    return _Grid(
        rasterio.Affine(res, 0.0, x0, 0.0, -res, y1),
        (ny, nx),
        xx,
        yy,
        np.where(inside, dist, -dist),
        pattern_fn(xx, yy),
        kernel,
        shapely.set_precision(footprint, 1e-7),
    )


def _blobs(rng: np.random.Generator, grid: _Grid, fraction: float) -> np.ndarray:
    """Spatially correlated boolean mask covering ``fraction`` of the grid."""
    if fraction <= 0:
        return np.zeros(grid.shape, bool)
    field = np.fft.irfft2(np.fft.rfft2(rng.standard_normal(grid.shape)) * grid.kernel, s=grid.shape)
    return field > np.quantile(field, 1.0 - fraction)


def _scene(rng, spec: SensorSpec, grid: _Grid, truth: float, cloud: float, month: int, outlier: bool) -> dict:
    """Arrays and planted facts of one scene."""
    res = spec.pixel_m
    cloud_fraction = float(np.clip((cloud - 0.3) / 0.55 + rng.normal(0.0, 0.15), 0.0, 0.95))
    cloud_fraction = 0.0 if cloud_fraction < 0.05 else cloud_fraction
    clouds = _blobs(rng, grid, cloud_fraction)
    shadow = np.roll(clouds, spec.shadow_shift_px, axis=(0, 1)) & ~clouds
    glint = _blobs(rng, grid, 0.3) if (5 <= month <= 8 and rng.random() < 0.3) else np.zeros(grid.shape, bool)
    valid = grid.depth > -0.25 * res  # water-masked product: pixels at least a quarter water
    partial = rng.random() < 0.12
    if partial:
        angle = rng.uniform(0, 2 * np.pi)
        proj = (grid.x - grid.x.mean()) * np.cos(angle) + (grid.y - grid.y.mean()) * np.sin(angle)
        valid &= proj < np.quantile(proj, rng.uniform(0.45, 0.8))
    value = truth * grid.pattern * spec.bias_ratio * np.exp(rng.normal(0.0, spec.noise_sd, grid.shape))
    if outlier:
        value *= OUTLIER_FACTOR
    water = np.clip(0.5 + grid.depth / res, 0.0, 1.0)
    shore = grid.depth < res  # within one pixel of the shoreline: mixed / adjacency-affected
    value = np.where(
        shore, water * value * (1.0 + 0.8 * (1.0 - np.clip(grid.depth, 0, res) / res)) + (1 - water) * LAND_CHLA, value
    )
    value = np.where(glint, value * 1.6, value)
    value = np.where(shadow, value * 0.5, value)
    value = np.where(clouds, value * 2.0 + 25.0, value)
    quality = (
        clouds.astype(np.uint8)
        | (shadow.astype(np.uint8) << 1)
        | (glint.astype(np.uint8) << 2)
        | ((shore & (rng.random(grid.shape) < SHORE_FLAG_PROBABILITY)).astype(np.uint8) << 3)
    )
    unc = spec.uncertainty * (1.0 + 0.2 * rng.random(grid.shape)) * np.where(quality > 0, 2.5, 1.0)
    lake_px = valid & (grid.depth > 0)
    cover = float(clouds[lake_px].mean()) if lake_px.any() else 0.0
    return {
        "chla": np.where(valid, value, NODATA).astype(np.float32),
        "quality": np.where(valid, quality, QUALITY_NODATA).astype(np.uint8),
        "uncertainty": np.where(valid, unc, NODATA).astype(np.float32),
        "facts": {
            "cloud_fraction": round(cloud_fraction, 4),
            "lake_cloud_fraction": round(cover, 4),
            "glint": bool(glint.any()),
            "partial": bool(partial),
            "outlier_factor": OUTLIER_FACTOR if outlier else 1.0,
        },
    }


def _write_tif(path: Path, arr: np.ndarray, grid: _Grid, nodata: float) -> None:
    profile = {
        "driver": "GTiff",
        "width": grid.shape[1],
        "height": grid.shape[0],
        "count": 1,
        "dtype": arr.dtype.name,
        "crs": _RASTER_CRS,
        "transform": grid.transform,
        "nodata": nodata,
        "compress": "deflate",
        "zlevel": 1,
        "predictor": 3 if arr.dtype.kind == "f" else 2,
    }
    with MemoryFile() as mem:  # build in memory, then one write: fewer small writes to the disk
        with mem.open(**profile) as dst:
            dst.write(arr, 1)
        path.write_bytes(mem.read())


def _item(spec: SensorSpec, scene_id: str, when: pd.Timestamp, grid: _Grid, cover: float) -> dict:
    fp = grid.footprint_lonlat
    item = pystac.Item(
        id=scene_id,
        geometry=shapely.geometry.mapping(fp),
        bbox=[round(v, 7) for v in fp.bounds],
        datetime=when.to_pydatetime().replace(tzinfo=UTC),
        properties={
            "constellation": spec.name,
            "platform": f"{spec.name}-1",
            "gsd": spec.pixel_m,
            "eo:cloud_cover": round(100.0 * cover, 2),
            "proj:code": CRS,
            "proj:shape": list(grid.shape),
            "proj:transform": [float(v) for v in list(grid.transform)[:6]],
        },
        stac_extensions=list(_EXT),
    )
    specs = {
        "chla": (["data"], "chlorophyll-a concentration", {"nodata": NODATA, "data_type": "float32", "unit": "mg m-3"}),
        "quality": (
            ["quality"],
            "quality bit flags: bit 0 cloud, bit 1 cloud shadow, bit 2 sun glint, bit 3 adjacency/mixed shore pixel",
            {"nodata": QUALITY_NODATA, "data_type": "uint8"},
        ),
        "uncertainty": (
            ["quality"],
            "relative 1-sigma uncertainty of chla",
            {"nodata": NODATA, "data_type": "float32", "unit": "1"},
        ),
    }
    for key, (roles, title, band) in specs.items():
        href = f"../data/{spec.name}/{scene_id}_{key}.tif"
        item.add_asset(
            key, pystac.Asset(href, title=title, media_type=_TIFF, roles=roles, extra_fields={"raster:bands": [band]})
        )
    item.add_link(pystac.Link("root", "../catalog.json", media_type=pystac.MediaType.JSON))
    item.add_link(pystac.Link("parent", "../catalog.json", media_type=pystac.MediaType.JSON))
    return item.to_dict(include_self_link=False, transform_hrefs=False)


def _write_scene(
    folder: Path,
    spec: SensorSpec,
    grid: _Grid,
    when: pd.Timestamp,
    rng: np.random.Generator,
    *,
    truth: float,
    cloud: float,
    outlier: bool,
) -> dict:
    """Write one scene's three GeoTIFFs and its STAC Item; return its planted facts."""
    scene = _scene(rng, spec, grid, truth, cloud, when.month, outlier)
    scene_id = f"{spec.name}_{when:%Y%m%d}"
    data = folder / "data" / spec.name
    data.mkdir(parents=True, exist_ok=True)
    for key, nodata in (("chla", NODATA), ("quality", QUALITY_NODATA), ("uncertainty", NODATA)):
        _write_tif(data / f"{scene_id}_{key}.tif", scene[key], grid, nodata)
    item = _item(spec, scene_id, when, grid, scene["facts"]["lake_cloud_fraction"])
    write_json(item, folder / "items" / f"{scene_id}.json")
    return {
        "scene_id": scene_id,
        "sensor": spec.name,
        "datetime": when.strftime("%Y-%m-%dT%H:%M:%SZ"),
        **scene["facts"],
    }


def write_scenes(
    out: Path,
    *,
    truth: pd.Series,
    cloud: pd.Series,
    lake: shapely.Polygon,
    pattern_fn: Callable[[np.ndarray, np.ndarray], np.ndarray],
    seed: int,
    every_days: dict[str, int] | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> pd.DataFrame:
    """Write all scenes, Items and the catalog; return one planted-truth row per scene.

    ``truth``: daily lake-wide chlorophyll-a (mg m-3) by date; ``cloud``: daily cloud cover 0..1 by date;
    ``every_days`` overrides each sensor's revisit (the reduced scenario thins the scenes).
    """
    to_ll = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    folder = out / "scenes"
    (folder / "items").mkdir(parents=True, exist_ok=True)
    dates = truth.index
    plan = []
    for name, spec in SENSORS.items():
        step = (every_days or {}).get(name, spec.every_days)
        for d in dates[::step]:
            plan.append((d + pd.Timedelta(hours=spec.hour_utc), name))
    plan.sort()
    rows, links = [], []
    grids = {name: _grid(spec, lake, pattern_fn, to_ll) for name, spec in SENSORS.items()}
    outliers = {}
    for name, spec in SENSORS.items():
        n = sum(1 for _, s in plan if s == name)
        k = max(2, round(spec.outlier_fraction * n))
        outliers[name] = set(rng_for(seed, f"outliers-{name}").choice(n, k, replace=False).tolist())
    counters = dict.fromkeys(SENSORS, 0)
    with rasterio.Env():
        for i, (when, name) in enumerate(plan):
            idx = counters[name]
            counters[name] += 1
            day = when.normalize()
            facts = _write_scene(
                folder,
                SENSORS[name],
                grids[name],
                when,
                rng_for(seed, f"scene-{name}-{idx}"),
                truth=float(truth[day]),
                cloud=float(cloud[day]),
                outlier=idx in outliers[name],
            )
            links.append(pystac.Link("item", f"./items/{facts['scene_id']}.json", media_type=pystac.MediaType.JSON))
            rows.append(facts)
            if progress:
                progress(i + 1, len(plan))
    catalog = pystac.Catalog(
        id="tallow-scenes",
        description="Invented chlorophyll-a scenes over the Tallow sample reservoir (sensors kite and dune).",
        title="Tallow sample scenes",
    )
    for link in links:
        catalog.add_link(link)
    write_json(catalog.to_dict(include_self_link=False, transform_hrefs=False), folder / "catalog.json")
    return pd.DataFrame(rows)


def aoi_pattern_means(
    lake: shapely.Polygon, aois: dict[str, shapely.Geometry], pattern_fn: Callable[[np.ndarray, np.ndarray], np.ndarray]
) -> dict[str, float]:
    """Mean of the spatial pattern over the reference sensor's pixel centres inside each AOI."""
    spec = next(s for s in SENSORS.values() if s.bias_ratio == 1.0)
    res = spec.pixel_m
    minx, miny, maxx, maxy = lake.bounds
    x = np.arange(np.floor((minx - spec.margin_m) / res) * res + res / 2, maxx + spec.margin_m, res)
    y = np.arange(np.floor((miny - spec.margin_m) / res) * res + res / 2, maxy + spec.margin_m, res)
    xx, yy = np.meshgrid(x, y)
    out = {}
    for name, geom in aois.items():
        inside = shapely.contains_xy(geom, xx, yy)
        out[name] = float(pattern_fn(xx[inside], yy[inside]).mean())
    return out
