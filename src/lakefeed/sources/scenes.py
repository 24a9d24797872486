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

import json
import re
from collections.abc import Iterator, Mapping
from contextlib import ExitStack
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pystac
import rasterio
import rasterio.errors
import rasterio.features
import rasterio.windows
import shapely
from pyproj import CRS
from rasterio.errors import RasterioError
from rasterio.windows import Window

from lakefeed.config.sources import SceneSource
from lakefeed.exceptions import SourceError
from lakefeed.extract.scene_stats import shore_buffered
from lakefeed.stages._result import Progress, no_progress
from lakefeed.units import factor as unit_factor

__all__ = ["SCENE_COLUMNS", "AoiPixels", "SceneReader", "SceneWindow", "list_scenes", "read_scenes"]

#: Columns of the scene table returned by :func:`list_scenes` (``reason`` is "" for usable scenes).
#: ``scale``, ``offset``, ``nodata`` come from the asset's STAC ``raster:bands`` (NaN: not declared);
#: ``unit`` is the value unit (declared, else the source's ``units``).
SCENE_COLUMNS = [
    "scene_id",
    "sensor",
    "time",
    "value_href",
    "quality_href",
    "uncertainty_href",
    "scale",
    "offset",
    "nodata",
    "unit",
    "reason",
]
CANONICAL_UNIT = "mg m-3"


# ----------------------------------------------------------------------------------------- catalogue
def list_scenes(source: SceneSource | str | Path, *, asset: str | None = None) -> pd.DataFrame:
    """List the scenes of a STAC catalogue or a GeoTIFF folder.

    Parameters
    ----------
    source
        The scene source of the configuration, or a path: a STAC Catalog/Collection JSON file or a
        folder of STAC Item JSON files (then defaults of :class:`SceneSource` apply).
    asset
        Key of the chlorophyll-a asset (overrides ``source.asset``); default: the first asset whose
        roles include ``data``.

    Returns
    -------
    DataFrame with :data:`SCENE_COLUMNS`, sorted by time; ``time`` is UTC (tz-aware). Items that
    cannot be used (no datetime, no sensor label, asset missing, unreadable JSON) are kept with
    ``reason`` set and ``time`` possibly NaT.

    Raises
    ------
    SourceError
        The catalogue path does not exist or holds no scene at all.
    """
    if not isinstance(source, SceneSource):
        source = SceneSource(catalog=str(source))
    asset = asset or source.asset
    if source.catalog is not None:
        rows = list(_stac_rows(Path(source.catalog), source, asset))
        where = source.catalog
    else:
        rows = list(_folder_rows(Path(source.folder or ""), source, asset))
        where = source.folder
    if not rows:
        hint = " (a folder of GeoTIFFs needs filename_pattern)" if source.catalog is not None else ""
        raise SourceError(f"scene catalogue {where}: no scenes found; check the path and filename_pattern{hint}")
    table = pd.DataFrame(rows, columns=SCENE_COLUMNS)
    table["unit"] = table["unit"].fillna(source.units)
    table["time"] = pd.to_datetime(table["time"], utc=True)
    table = table.sort_values(["time", "scene_id"], na_position="last").reset_index(drop=True)
    return _mark_duplicates(table)


def _mark_duplicates(table: pd.DataFrame) -> pd.DataFrame:
    """The same item listed twice is dropped; a second item with an id already used is renamed
    ``<id>~dup<k>`` and rejected, so that (AOI, scene_id) stays a key of the observation table."""
    table = table.drop_duplicates(["scene_id", "value_href", "time"]).reset_index(drop=True)
    k = table.groupby("scene_id").cumcount()
    dup = k > 0
    if dup.any():
        first = table.drop_duplicates("scene_id").set_index("scene_id")["value_href"]
        old = table.loc[dup, "scene_id"]
        table.loc[dup, "reason"] = [
            f"duplicate scene id {sid!r} (first item: {first[sid]}; this one: {href}); only the first is used: "
            "give each item a unique id"
            for sid, href in zip(old, table.loc[dup, "value_href"], strict=True)
        ]
        table.loc[dup, "scene_id"] = old + "~dup" + k[dup].astype(str)
    return table


def _stac_rows(path: Path, source: SceneSource, asset: str | None) -> Iterator[dict[str, Any]]:
    if not path.exists():
        raise SourceError(f"scene catalogue {path}: not found; give a STAC catalog/collection file or a folder")
    if path.is_dir():
        files = sorted(path.glob("*.json"))
        for f in files:
            yield _item_row(f, source, asset)
        return
    try:
        root = pystac.read_file(str(path))
    except Exception as err:  # pystac raises several kinds on bad JSON / unknown types
        raise SourceError(f"scene catalogue {path}: not a readable STAC file ({err})") from err
    if isinstance(root, pystac.Item):
        yield _item_row(path, source, asset)
        return
    yield from _walk(root, source, asset, seen=set())


def _walk(cat: pystac.Catalog, source: SceneSource, asset: str | None, seen: set[str]) -> Iterator[dict[str, Any]]:
    """Follow item and child links one by one, so that one bad item does not stop the walk."""
    for link in cat.links:
        if link.rel not in ("item", "child"):
            continue
        href = link.get_absolute_href() or link.href
        if href in seen:
            continue
        seen.add(href)
        if link.rel == "item":
            yield _item_row(Path(href), source, asset)
        else:
            try:
                child = pystac.read_file(href)
            except Exception as err:
                yield _rejected(Path(href).stem, f"child catalogue {href} unreadable: {err}")
                continue
            if isinstance(child, pystac.Catalog):
                yield from _walk(child, source, asset, seen)


def _rejected(scene_id: str, reason: str, sensor: str = "", time: Any = None) -> dict[str, Any]:
    return dict(
        scene_id=scene_id,
        sensor=sensor,
        time=time,
        value_href=None,
        quality_href=None,
        uncertainty_href=None,
        scale=np.nan,
        offset=np.nan,
        nodata=np.nan,
        unit=None,
        reason=reason,
    )


def _item_row(path: Path, source: SceneSource, asset: str | None) -> dict[str, Any]:
    try:
        data = json.loads(Path(path).read_text())
    except (OSError, ValueError) as err:
        return _rejected(path.stem, f"STAC item {path} unreadable: {err}")
    scene_id = str(data.get("id") or path.stem)
    props = data.get("properties") or {}
    if props.get("datetime") is None and not (props.get("start_datetime") and props.get("end_datetime")):
        return _rejected(scene_id, f"STAC item {path}: no 'datetime' (nor start/end_datetime); add it to the item")
    try:
        item = pystac.Item.from_dict(data, href=str(path))
    except Exception as err:
        return _rejected(scene_id, f"STAC item {path} invalid: {err}")
    if item.datetime is not None:
        time = item.datetime
    else:  # an interval: its midpoint
        start, end = item.common_metadata.start_datetime, item.common_metadata.end_datetime
        time = start + (end - start) / 2  # type: ignore[operator]
    sensor = _sensor_label(item.properties, source)
    if not sensor:
        return _rejected(
            scene_id, f"STAC item {path}: no sensor label in property {source.sensor_property!r}", time=time
        )
    key = asset
    if key is None:
        key = next((k for k, a in item.assets.items() if "data" in (a.roles or [])), None)
    if key is None or key not in item.assets:
        what = f"asset {key!r}" if key else "an asset with role 'data'"
        return _rejected(scene_id, f"STAC item {path}: has no {what}; assets are {list(item.assets)}", sensor, time)

    def href(k: str | None) -> str | None:
        return item.assets[k].get_absolute_href() if k and k in item.assets else None

    bands = item.assets[key].extra_fields.get("raster:bands") or [{}]
    band = bands[0] if isinstance(bands, list) and bands and isinstance(bands[0], dict) else {}

    def number(name: str) -> float:
        value = band.get(name)
        try:
            return float(value) if value is not None else np.nan
        except (TypeError, ValueError):
            return np.nan

    return dict(
        scene_id=scene_id,
        sensor=sensor,
        time=time,
        value_href=href(key),
        quality_href=href(source.quality_asset),
        uncertainty_href=href(source.uncertainty_asset),
        scale=number("scale"),
        offset=number("offset"),
        nodata=number("nodata"),
        unit=band.get("unit") or None,
        reason="",
    )


def _sensor_label(props: Mapping[str, Any], source: SceneSource) -> str:
    raw = props.get(source.sensor_property)
    if raw is None:
        raw = props.get("constellation") or props.get("platform")
    if isinstance(raw, list):
        raw = raw[0] if raw else None
    if raw is None:
        return ""
    return source.sensor_map.get(str(raw), str(raw))


def _folder_rows(folder: Path, source: SceneSource, asset: str | None) -> Iterator[dict[str, Any]]:
    """GeoTIFFs named by a regex with groups ``date``, ``sensor`` (optional ``time`` and ``asset``).

    Files whose ``asset`` group equals ``quality_asset`` / ``uncertainty_asset`` are those bands of the
    scene; any other (or no) ``asset`` value is the chlorophyll-a band.
    """
    if not folder.is_dir():
        raise SourceError(f"scene folder {folder}: not found; check 'folder' in sources.yaml scenes")
    pattern = re.compile(source.filename_pattern or "")
    missing = {"date", "sensor"} - set(pattern.groupindex)
    if missing:
        raise SourceError(
            f"scenes.filename_pattern {pattern.pattern!r}: needs named groups {sorted(missing)}, e.g. "
            r"'(?P<sensor>[a-z]+)_(?P<date>\d{8})\.tif'"
        )
    scenes: dict[str, dict[str, Any]] = {}
    for f in sorted(folder.rglob("*")):
        m = pattern.fullmatch(f.name)
        if not m or not f.is_file():
            continue
        g = m.groupdict()
        stamp = g["date"] + (("T" + g["time"]) if g.get("time") else "")
        sensor = source.sensor_map.get(g["sensor"], g["sensor"])
        scene_id = f"{sensor}_{g['date']}" + (f"_{g['time']}" if g.get("time") else "")
        row = scenes.setdefault(scene_id, _rejected(scene_id, "", sensor))
        try:
            row["time"] = pd.Timestamp(stamp).tz_localize("UTC") if pd.Timestamp(stamp).tz is None else stamp
        except ValueError:
            row["reason"] = f"{f.name}: date {stamp!r} not understood"
            continue
        kind = g.get("asset")
        if kind is not None and kind == source.quality_asset:
            row["quality_href"] = str(f)
        elif kind is not None and kind == source.uncertainty_asset:
            row["uncertainty_href"] = str(f)
        elif asset is None or kind is None or kind == asset:
            row["value_href"] = str(f)
    for row in scenes.values():
        if row["value_href"] is None and not row["reason"]:
            row["reason"] = f"scene {row['scene_id']}: no chlorophyll-a file in {folder}"
        yield row


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
        return rasterio.open(href)
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
