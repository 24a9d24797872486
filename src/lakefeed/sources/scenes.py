"""Chlorophyll-a scenes: the catalogue (STAC or a GeoTIFF folder) and the windowed reader.

Takes a :class:`~lakefeed.config.sources.SceneSource` (or a catalogue path) and returns a pandas
table of scenes; reads, for each scene, only the window of the value, quality and uncertainty
bands that covers the areas of interest (AOIs) and returns the pixels whose centre lies in each
AOI. Must not compute statistics or decide acceptance (that is :mod:`lakefeed.extract`).

Pixel rule: a pixel belongs to an AOI when its centre lies inside the (shore-buffered) AOI
polygon (``rasterio.features.geometry_mask`` with ``all_touched=False``).

Value encoding: a scale/offset (``raster:bands`` of the STAC asset, else the GeoTIFF's own
scale/offset tags) is applied as ``value x scale + offset`` after no-data masking; the value unit
(``raster:bands`` ``unit``, else the source's ``units``) is converted to mg m-3. A scene id that occurs
twice keeps its first item; later items get the id ``<id>~dup<k>`` and are recorded as rejected.

Problems with one scene (missing, truncated or corrupt file, no CRS, bands of different shapes)
raise :class:`~lakefeed.exceptions.SourceError` from :meth:`SceneReader.read`;
:func:`read_scenes` records them as the scene's rejection reason and goes on with the others.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from contextlib import ExitStack
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import rasterio
import rasterio.errors
import rasterio.features
import rasterio.windows
import shapely
from pyproj import CRS
from rasterio.errors import RasterioError
from rasterio.windows import Window

from lakefeed.exceptions import SourceError
from lakefeed.geometry.zones import shore_buffered
from lakefeed.progress import Progress, no_progress
from lakefeed.sources._scene_catalog import CANONICAL_UNIT, SCENE_COLUMNS, list_scenes
from lakefeed.sources.locations import gdal_env, gdal_path, is_url
from lakefeed.units import factor as unit_factor

__all__ = ["SCENE_COLUMNS", "AoiPixels", "SceneReader", "SceneWindow", "list_scenes", "read_scenes"]


# -------------------------------------------------------------------------------------------- reader
@dataclass
class AoiPixels:
    """Pixels of one scene whose centre lies in one AOI (1-D arrays of equal length).

    ``n_outside`` counts AOI pixels beyond the scene's edge (they count as not valid).
    """

    values: np.ndarray
    quality: np.ndarray | None
    uncertainty: np.ndarray | None
    n_outside: int = 0


@dataclass
class SceneWindow:
    """What was read from one scene: the windows read (scene rows/cols), per-AOI pixels, skips."""

    scene_id: str
    windows: list[Window]
    shape: tuple[int, int]
    nodata: float | None
    pixel_size_m: float
    shore_buffer_m: float
    pixels: dict[str, AoiPixels] = field(default_factory=dict)
    skipped: dict[str, str] = field(default_factory=dict)

    @property
    def pixels_read(self) -> int:
        """Pixels read per band (sum over the windows)."""
        return int(sum(w.width * w.height for w in self.windows))


def _metric_crs(gdf: gpd.GeoDataFrame) -> CRS:
    crs = CRS.from_user_input(gdf.crs)
    if crs.is_projected and crs.axis_info and crs.axis_info[0].unit_name in ("metre", "meter"):
        return crs
    return gdf.estimate_utm_crs()


class SceneReader:
    """Reads AOI windows of scenes; caches the shore-buffered AOIs per (buffer, scene CRS).

    Parameters
    ----------
    aois
        AOI polygons (any CRS), one row per AOI, ids in ``id_field``.
    id_field
        Field holding the AOI ids.
    lake
        Lake polygon(s) for the inward shoreline buffer; None: the buffer applies inward from
        each AOI's own boundary.
    """

    def __init__(self, aois: gpd.GeoDataFrame, *, id_field: str, lake: gpd.GeoDataFrame | None = None) -> None:
        if aois.crs is None:
            raise SourceError("areas of interest have no CRS; set one on the layer and try again")
        self._metric = _metric_crs(aois)
        self.aois = gpd.GeoSeries(aois.geometry.values, index=aois[id_field].astype(str), crs=aois.crs)
        self.aois = self.aois.to_crs(self._metric)
        self.lake = None if lake is None else shapely.union_all(lake.to_crs(self._metric).geometry.values)
        self._cache: dict[tuple[float, str], gpd.GeoSeries] = {}

    def _aois_in(self, crs: CRS, buffer_m: float) -> gpd.GeoSeries:
        key = (round(buffer_m, 6), crs.to_wkt())
        if key not in self._cache:
            self._cache[key] = shore_buffered(self.aois, self.lake, buffer_m).to_crs(crs)
        return self._cache[key]

    def read(
        self,
        scene_id: str,
        value_href: str,
        quality_href: str | None = None,
        uncertainty_href: str | None = None,
        *,
        shore_buffer_m: float | None = None,
        scale: float | None = None,
        offset: float | None = None,
        nodata: float | None = None,
        unit: str | None = None,
    ) -> SceneWindow:
        """Read the AOI window(s) of one scene.

        One window covers all AOIs; when the AOIs lie far apart (the common window would decode more
        than twice the file blocks of their own windows) each AOI gets its own window instead.
        ``shore_buffer_m`` (metres): inward shoreline buffer; None: one pixel of the scene.
        ``scale``, ``offset``, ``nodata`` (declared in the catalogue; None/NaN: not declared) and the
        value ``unit`` (None: mg m-3): the returned values are ``raw x scale + offset`` converted to
        mg m-3, no-data as NaN. Undeclared scale/offset/nodata fall back to the GeoTIFF's own.

        Raises
        ------
        SourceError
            Missing, truncated or corrupt file; scene without CRS; a quality/uncertainty band whose
            shape or grid differs from the value band.
        """
        with ExitStack() as stack:
            if any(h and is_url(h) for h in (value_href, quality_href, uncertainty_href)):
                stack.enter_context(gdal_env())  # object storage: GDAL's /vsis3/, only the windows' bytes travel
            src = stack.enter_context(_open(value_href, scene_id, "chlorophyll-a"))
            if src.crs is None:
                raise SourceError(
                    f"scene {scene_id}: {value_href} has no CRS; write one into the file (e.g. gdal_edit)"
                )
            crs = CRS.from_user_input(src.crs)
            encoding = _encoding(src, scene_id, value_href, scale=scale, offset=offset, nodata=nodata, unit=unit)
            pixel_m = _pixel_size_m(src, crs)
            buffer_m = pixel_m if shore_buffer_m is None else float(shore_buffer_m)
            geoms = self._aois_in(crs, buffer_m)
            out = SceneWindow(scene_id, [], src.shape, encoding[2], pixel_m, buffer_m)
            scene_box = shapely.box(*src.bounds)
            keep = []
            for aoi, geom in geoms.items():
                if geom is None or geom.is_empty:
                    out.skipped[str(aoi)] = f"AOI empty after the {buffer_m:g} m inward shore buffer"
                elif not geom.intersects(scene_box):
                    out.skipped[str(aoi)] = "AOI does not intersect the scene footprint"
                else:
                    keep.append(str(aoi))
            if not keep:
                return out
            others = {
                what: stack.enter_context(_open_matching(href, scene_id, what, src))
                for what, href in (("quality", quality_href), ("uncertainty", uncertainty_href))
                if href
            }
            for group in _window_groups(src, geoms, keep):
                self._read_group(src, others, geoms, group, out, encoding)
        if encoding != (1.0, 0.0, out.nodata, 1.0):  # decoded: no-data is NaN now
            out.nodata = None
        return out

    @staticmethod
    def _read_group(
        src: Any,
        others: dict[str, Any],
        geoms: gpd.GeoSeries,
        group: list[str],
        out: SceneWindow,
        encoding: tuple[float, float, float | None, float] = (1.0, 0.0, None, 1.0),
    ) -> None:
        """Read the window of ``group``'s AOIs from every band; fill ``out.pixels`` / ``out.skipped``."""
        full = rasterio.features.geometry_window(src, list(geoms.loc[group].values), boundless=True)
        try:
            inner = full.intersection(Window(0, 0, src.width, src.height))
        except rasterio.errors.WindowError:
            out.skipped.update(dict.fromkeys(group, "AOI does not intersect the scene footprint"))
            return
        out.windows.append(full)
        values = _decode(_read(src, inner, full, out.scene_id, src.name, fill=np.nan), *encoding)
        bands = {
            what: _read_band(o, inner, full, out.scene_id, decode=what == "uncertainty") for what, o in others.items()
        }
        transform = rasterio.windows.transform(full, src.transform)
        inside = np.zeros(values.shape, dtype=bool)
        r, c = inner.row_off - full.row_off, inner.col_off - full.col_off
        inside[r : r + inner.height, c : c + inner.width] = True
        for aoi in group:
            mask = rasterio.features.geometry_mask(
                [geoms[aoi]], out_shape=values.shape, transform=transform, all_touched=False, invert=True
            )
            if not mask.any():
                out.skipped[aoi] = "no pixel centre inside the AOI (AOI smaller than a pixel)"
                continue
            sel = mask & inside
            out.pixels[aoi] = AoiPixels(
                values=values[sel],
                quality=bands["quality"][sel] if "quality" in bands else None,
                uncertainty=bands["uncertainty"][sel] if "uncertainty" in bands else None,
                n_outside=int(mask.sum() - sel.sum()),
            )


def _window_groups(src: Any, geoms: gpd.GeoSeries, keep: list[str]) -> list[list[str]]:
    """One group of all AOIs, or one group per AOI when the common window would decode more than twice
    the file blocks (tiles or strips) that the AOIs' own windows touch."""
    if len(keep) == 1:
        return [keep]
    union = rasterio.features.geometry_window(src, list(geoms.loc[keep].values), boundless=True)
    own: set[tuple[int, int]] = set()
    for a in keep:
        own |= _blocks(src, rasterio.features.geometry_window(src, [geoms[a]], boundless=True))
    if len(_blocks(src, union)) > 2 * len(own):
        return [[a] for a in keep]
    return [keep]


def _blocks(src: Any, window: Window) -> set[tuple[int, int]]:
    """File blocks (row, col indices) a window touches, within the scene."""
    bh, bw = src.block_shapes[0]
    r0, r1 = max(window.row_off, 0), min(window.row_off + window.height, src.height)
    c0, c1 = max(window.col_off, 0), min(window.col_off + window.width, src.width)
    if r1 <= r0 or c1 <= c0:
        return set()
    rows = range(int(r0 // bh), int((r1 - 1) // bh) + 1)
    cols = range(int(c0 // bw), int((c1 - 1) // bw) + 1)
    return {(r, c) for r in rows for c in cols}


def _open(href: str, scene_id: str, what: str) -> rasterio.io.DatasetReader:
    if "://" not in href and not Path(href).exists():
        raise SourceError(f"scene {scene_id}: {what} file {href} is missing")
    try:
        return rasterio.open(gdal_path(href))
    except (RasterioError, OSError) as err:
        raise SourceError(f"scene {scene_id}: {what} file {href} is unreadable or corrupt ({err})") from err


def _open_matching(href: str, scene_id: str, what: str, ref: Any) -> rasterio.io.DatasetReader:
    """Open a quality/uncertainty band and check that it shares the value band's grid."""
    src = _open(href, scene_id, what)
    if src.shape != ref.shape or not src.transform.almost_equals(ref.transform):
        src.close()
        raise SourceError(
            f"scene {scene_id}: {what} band {href} has shape {src.shape} / transform {tuple(src.transform)[:6]}, "
            f"the chlorophyll-a band {ref.shape} / {tuple(ref.transform)[:6]}; both must share one grid"
        )
    return src


def _pixel_size_m(src: rasterio.io.DatasetReader, crs: CRS) -> float:
    size = float(abs(src.transform.a))
    if crs.is_geographic:
        lat = np.deg2rad((src.bounds.top + src.bounds.bottom) / 2)
        return size * 111_320.0 * float(np.cos(lat))
    return size * float(crs.axis_info[0].unit_conversion_factor if crs.axis_info else 1.0)


def _given(x: float | None) -> bool:
    return x is not None and not (isinstance(x, float) and np.isnan(x))


def _encoding(
    src: Any,
    scene_id: str,
    href: str,
    *,
    scale: float | None,
    offset: float | None,
    nodata: float | None,
    unit: str | None,
) -> tuple[float, float, float | None, float]:
    """(scale, offset, raw no-data, unit factor to mg m-3) of the value band.

    Declared values (STAC ``raster:bands``) win over the GeoTIFF's tags; a declared scale/offset that
    contradicts a non-default one in the file is an error (applying both would scale twice).
    """
    file_scale, file_offset = float(src.scales[0] or 1.0), float(src.offsets[0] or 0.0)
    for name, declared, own, default in (("scale", scale, file_scale, 1.0), ("offset", offset, file_offset, 0.0)):
        if _given(declared) and own != default and not np.isclose(float(declared), own):  # type: ignore[arg-type]
            raise SourceError(
                f"scene {scene_id}: the catalogue declares {name} {declared} but {href} carries {name} {own}; "
                "fix one of them (lakefeed would not know which to apply)"
            )
    s = float(scale) if _given(scale) else file_scale  # type: ignore[arg-type]
    o = float(offset) if _given(offset) else file_offset  # type: ignore[arg-type]
    raw_nodata = src.nodata if src.nodata is not None else (float(nodata) if _given(nodata) else None)  # type: ignore[arg-type]
    try:
        unit = unit if isinstance(unit, str) and unit.strip() else None
        f = 1.0 if unit is None or unit == CANONICAL_UNIT else unit_factor(unit, CANONICAL_UNIT)
    except SourceError as err:
        raise SourceError(f"scene {scene_id}: value unit {unit!r} of {href}: {err}") from err
    return s, o, raw_nodata, f


def _decode(raw: np.ndarray, scale: float, offset: float, nodata: float | None, unit_factor: float) -> np.ndarray:
    """Raw band values to mg m-3 (float64, no-data as NaN); unchanged when nothing is to be done."""
    if (scale, offset, unit_factor) == (1.0, 0.0, 1.0):
        return raw
    values = raw.astype(np.float64)
    if nodata is not None and np.isfinite(nodata):
        values[raw == nodata] = np.nan
    return (values * scale + offset) * unit_factor


def _read(src: Any, inner: Window, full: Window, scene_id: str, href: str, *, fill: float) -> np.ndarray:
    """Read ``inner`` of band 1 and place it in an array of the ``full`` window (outside: ``fill``)."""
    try:
        data = src.read(1, window=inner)
    except (RasterioError, OSError) as err:
        raise SourceError(f"scene {scene_id}: reading {href} failed; truncated or corrupt file? ({err})") from err
    if inner == full:
        return data
    out = np.full((full.height, full.width), fill, dtype=np.result_type(data.dtype, np.float32))
    r, c = inner.row_off - full.row_off, inner.col_off - full.col_off
    out[r : r + inner.height, c : c + inner.width] = data
    return out


def _read_band(src: Any, inner: Window, full: Window, scene_id: str, *, decode: bool = False) -> np.ndarray:
    """A quality/uncertainty window with the band's own no-data as NaN (unknown); ``decode``: apply the
    band's own scale/offset tags (uncertainty only; quality flags are never scaled)."""
    data = _read(src, inner, full, scene_id, src.name, fill=np.nan)
    if src.nodata is not None and np.isfinite(src.nodata):
        data = np.where(data == src.nodata, np.nan, data.astype(np.float32, copy=False))
    scale, offset = float(src.scales[0] or 1.0), float(src.offsets[0] or 0.0)
    if decode and (scale, offset) != (1.0, 0.0):  # e.g. an integer-coded uncertainty band
        data = data.astype(np.float64) * scale + offset
    return data


def read_scenes(
    scenes: pd.DataFrame,
    reader: SceneReader,
    *,
    shore_buffer_m: Mapping[str, float] | None = None,
    progress: Progress | None = None,
) -> Iterator[tuple[pd.Series, SceneWindow | None, str]]:
    """Read every usable scene sequentially; yield ``(scene row, window or None, reason)``.

    ``shore_buffer_m`` maps sensor labels to their inward shore buffer (metres); sensors not
    listed use one pixel of the scene. A scene that fails yields ``None`` and the reason; the
    others go on. Memory is bounded by the AOI window, not the scene size.
    """
    progress = progress or no_progress
    buffers = dict(shore_buffer_m or {})
    total = len(scenes)
    for i, (_, row) in enumerate(scenes.iterrows()):
        if row["reason"]:
            yield row, None, str(row["reason"])
        else:
            try:
                win = reader.read(
                    row["scene_id"],
                    row["value_href"],
                    row["quality_href"],
                    row["uncertainty_href"],
                    shore_buffer_m=buffers.get(row["sensor"]),
                    scale=row.get("scale"),
                    offset=row.get("offset"),
                    nodata=row.get("nodata"),
                    unit=row.get("unit"),
                )
                yield row, win, ""
            except SourceError as err:
                yield row, None, str(err)
        progress("reading scenes", i + 1, total)
