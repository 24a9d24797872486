"""Lakes of the reduced sample scenario moved over its grid and catchment layers, for the many-lakes tests."""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import yaml

__all__ = ["lake_configs"]


def lake_configs(sample: Path, root: Path, lakes: dict[str, tuple[float, float, str]]) -> dict[str, Path]:
    """One config per lake over the sample's sources: its layers translated, its own time zone."""
    cfg = sample / "config"
    (root / "config").mkdir(parents=True)
    src = yaml.safe_load((cfg / "sources.yaml").read_text())
    src["weather"]["paths"] = [str((cfg / p).resolve()) for p in src["weather"]["paths"]]
    src["hydrology"]["path"] = str((cfg / src["hydrology"]["path"]).resolve())
    for station in src["samples"]:
        station["path"] = str((cfg / station["path"]).resolve())
    for key in ("store", "scenes", "forecast"):
        src.pop(key, None)
    (root / "config" / "sources.yaml").write_text(yaml.safe_dump(src))
    base = yaml.safe_load((cfg / "lake-tallow.yaml").read_text())
    out = {}
    for lake, (dx, dy, tz) in lakes.items():
        conf = dict(base, id=lake, timezone=tz, sources="sources.yaml")
        for key in ("lake", "aois", "subbasins"):
            layer = gpd.read_file(cfg / base[key]["path"])
            layer["geometry"] = layer.geometry.translate(dx, dy)
            path = root / "geometry" / lake / f"{key}.gpkg"
            path.parent.mkdir(parents=True, exist_ok=True)
            layer.to_file(path)
            conf[key] = dict(base[key], path=str(path))
        out[lake] = root / "config" / f"lake-{lake}.yaml"
        out[lake].write_text(yaml.safe_dump(conf))
    return out
