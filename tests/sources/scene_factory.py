"""Tiny synthetic scenes and STAC items for the scene tests (built in code)."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import rasterio
from affine import Affine

ORIGIN = (500_000.0, 5_300_000.0)  # EPSG:32632, metres


def write_tif(
    path: Path,
    data: np.ndarray,
    *,
    res: float = 20.0,
    crs: str | None = "EPSG:32632",
    nodata: float | None = -9999.0,
    origin: tuple[float, float] = ORIGIN,
    scale: float | None = None,
) -> Path:
    """Write a single-band GeoTIFF, north-up, top-left corner at ``origin`` (``scale``: its scale tag)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    profile = dict(
        driver="GTiff",
        width=data.shape[1],
        height=data.shape[0],
        count=1,
        dtype=data.dtype,
        transform=Affine(res, 0.0, origin[0], 0.0, -res, origin[1]),
        nodata=nodata,
    )
    if crs is not None:
        profile["crs"] = crs
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(data, 1)
        if scale is not None:
            dst.scales = (scale,)
    return path


def write_item(
    folder: Path,
    scene_id: str,
    *,
    datetime: str | None,
    sensor: str | None,
    assets: dict[str, str],
    extra: dict | None = None,
) -> Path:
    """Write a STAC Item JSON; ``assets`` maps keys to hrefs (key ``chla`` gets role data)."""
    props: dict = {"datetime": datetime}
    if sensor is not None:
        props["constellation"] = sensor
    props.update(extra or {})
    item = {
        "type": "Feature",
        "stac_version": "1.0.0",
        "id": scene_id,
        "properties": props,
        "geometry": {"type": "Polygon", "coordinates": [[[9, 47], [9.1, 47], [9.1, 47.1], [9, 47]]]},
        "bbox": [9, 47, 9.1, 47.1],
        "links": [],
        "assets": {k: {"href": v, "roles": ["data"] if k == "chla" else [k]} for k, v in assets.items()},
    }
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{scene_id}.json"
    path.write_text(json.dumps(item))
    return path


def write_catalog(root: Path, items: list[Path]) -> Path:
    """A STAC Catalog at ``root/catalog.json`` linking ``items`` by relative href."""
    links = [{"rel": "root", "href": "./catalog.json"}] + [
        {"rel": "item", "href": "./" + str(p.relative_to(root)), "type": "application/json"} for p in items
    ]
    cat = {"type": "Catalog", "stac_version": "1.0.0", "id": "test", "description": "test", "links": links}
    path = root / "catalog.json"
    path.write_text(json.dumps(cat))
    return path


#: ``target_obs`` columns in the order of the store contract (docs/architecture.md, "Store tables").
TARGET_OBS_COLUMNS = [
    "lake",
    "aoi",
    "scene_id",
    "sensor",
    "time",
    "date",
    "median",
    "mean",
    "p10",
    "p90",
    "std",
    "cv",
    "n_valid",
    "valid_fraction",
    "uncertainty",
    "accepted",
    "reason",
    "outlier",
    "screened",
    "screening",
]


def link_scenes(sample: Path, dest: Path, *, before: str | None = None) -> None:
    """``dest`` as a scene folder: links to the sample's item and raster files dated before ``before``
    (YYYY-MM-DD; all when None) and a catalogue listing those items."""
    src = sample / "scenes"
    stop = before.replace("-", "") if before else None

    def keep(name: str) -> bool:
        return stop is None or re.search(r"_(\d{8})", name).group(1) < stop

    for f in sorted(src.rglob("*")):
        link = dest / f.relative_to(src)
        if f.is_file() and f.name != "catalog.json" and keep(f.name) and not link.exists():
            link.parent.mkdir(parents=True, exist_ok=True)
            link.symlink_to(f)
    cat = json.loads((src / "catalog.json").read_text())
    cat["links"] = [x for x in cat["links"] if x["rel"] != "item" or keep(x["href"])]
    (dest / "catalog.json").write_text(json.dumps(cat, indent=1))
