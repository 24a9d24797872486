"""Scene catalogues: STAC Items (JSON files, a catalog or collection) or a folder of GeoTIFFs named by a
regular expression, listed as one table row per scene (internal to :mod:`lakefeed.sources.scenes`).

Takes a :class:`~lakefeed.config.sources.SceneSource` and returns a pandas table (:data:`SCENE_COLUMNS`);
opens only JSON files and folder listings, never a raster. Unusable items are rows with ``reason`` set.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pystac

from lakefeed.config.sources import SceneSource
from lakefeed.exceptions import SourceError
from lakefeed.sources.locations import RemotePath, as_location

__all__ = ["CANONICAL_UNIT", "SCENE_COLUMNS", "list_scenes"]


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
    ``reason`` set and ``time`` possibly NaT. ``attrs["source_files"]``: the catalogue and item JSON
    files read (sorted paths; for provenance).

    Raises
    ------
    SourceError
        The catalogue path does not exist or holds no scene at all.
    """
    if not isinstance(source, SceneSource):
        source = SceneSource(catalog=str(source))
    asset = asset or source.asset
    if source.catalog is not None:
        rows = list(_stac_rows(as_location(source.catalog), source, asset))
        where = source.catalog
    else:
        rows = list(_folder_rows(Path(source.folder or ""), source, asset))
        where = source.folder
    if not rows:
        hint = " (a folder of GeoTIFFs needs filename_pattern)" if source.catalog is not None else ""
        raise SourceError(f"scene catalogue {where}: no scenes found; check the path and filename_pattern{hint}")
    table = pd.DataFrame(rows, columns=SCENE_COLUMNS)
    # the JSON files read (catalogue, item files), for the provenance of the tables built from them
    read = [source.catalog] if source.catalog is not None and not as_location(source.catalog).is_dir() else []
    read += [r["item_path"] for r in rows if r.get("item_path")]
    table["unit"] = table["unit"].fillna(source.units)
    table["time"] = pd.to_datetime(table["time"], utc=True)
    table = table.sort_values(["time", "scene_id"], na_position="last").reset_index(drop=True)
    table = _mark_duplicates(table)
    table.attrs["source_files"] = sorted(set(map(str, read)))
    return table


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


def _read_stac(path: Path | RemotePath) -> Any:
    """A STAC object from a local file or an object-storage URL (pystac reads local files and http only)."""
    return pystac.read_dict(json.loads(path.read_text()), href=str(path))


def _stac_rows(path: Path | RemotePath, source: SceneSource, asset: str | None) -> Iterator[dict[str, Any]]:
    if not path.exists():
        raise SourceError(f"scene catalogue {path}: not found; give a STAC catalog/collection file or a folder")
    if path.is_dir():
        files = sorted(path.glob("*.json"))
        for f in files:
            yield _item_row(f, source, asset)
        return
    try:
        root = _read_stac(path)
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
            yield _item_row(as_location(href), source, asset)
        else:
            try:
                child = _read_stac(as_location(href))
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


def _item_row(path: Path | RemotePath, source: SceneSource, asset: str | None) -> dict[str, Any]:
    try:
        data = json.loads(path.read_text())
    except (OSError, ValueError, SourceError) as err:
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
        item_path=str(path),
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
