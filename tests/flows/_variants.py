"""Variants of the sample lake config (other lake ids, absolute paths) for the flow tests."""

from __future__ import annotations

from pathlib import Path

import yaml


def write_variants(sample: Path, dest: Path, ids: list[str], *, broken: dict[str, str] | None = None) -> Path:
    """Copies of the sample lake config under other lake ids, with absolute paths, in ``dest``.

    ``broken`` maps a lake id to a weather glob that matches nothing (a lake whose files are missing).
    Returns ``dest``. The store is ``dest/../store``.
    """
    dest.mkdir(parents=True, exist_ok=True)
    cfg = sample / "config"
    lake = yaml.safe_load((cfg / "lake-tallow.yaml").read_text())
    src = yaml.safe_load((cfg / "sources.yaml").read_text())

    def absolute(p: str) -> str:
        return str((cfg / p).resolve()) if not Path(p).is_absolute() else p

    src["weather"]["paths"] = [absolute(p) for p in src["weather"]["paths"]]
    src["forecast"]["paths"] = [absolute(p) for p in src["forecast"]["paths"]]
    src["hydrology"]["path"] = absolute(src["hydrology"]["path"])
    src["scenes"]["catalog"] = absolute(src["scenes"]["catalog"])
    for st in src["samples"]:
        st["path"] = absolute(st["path"])
    src["store"] = str((dest.parent / "store").resolve())
    (dest / "sources.yaml").write_text(yaml.safe_dump(src))
    for key in ("lake", "aois", "subbasins"):
        lake[key]["path"] = absolute(lake[key]["path"])
    for lake_id in ids:
        one = {**lake, "id": lake_id, "name": f"Variant {lake_id}", "sources": "sources.yaml"}
        if broken and lake_id in broken:
            bad = {**src, "weather": {**src["weather"], "paths": [broken[lake_id]]}}
            (dest / f"sources-{lake_id}.yaml").write_text(yaml.safe_dump(bad))
            one["sources"] = f"sources-{lake_id}.yaml"
        (dest / f"lake-{lake_id}.yaml").write_text(yaml.safe_dump(one))
    return dest
