"""Incremental target builds: reading only the scenes from ``since`` on gives the tables of a full build.

On the reduced sample scenario: a lake variant whose scene catalogue lists the items before December
(per-file links to the sample's items and rasters); the December scenes "arrive" before the build from
``2022-12-01``. The reference is a full build from the whole catalogue into another store.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pandas as pd
import pytest
import yaml
from scene_factory import link_scenes

from lakefeed.config import load_project
from lakefeed.sources.scenes import SceneReader
from lakefeed.stages._target_refresh import raw_reasons
from lakefeed.stages.target import build_target
from lakefeed.store import Store

pytestmark = pytest.mark.slow

TABLES = ("target_obs", "target_daily", "sensor_bias")
SINCE = "2022-12-01"


def project_with(sample: Path, dest: Path, scenes: Path) -> Path:
    """A copy of the sample lake config in ``dest`` (absolute paths) reading the catalogue in ``scenes``."""
    cfg = sample / "config"
    dest.mkdir(parents=True, exist_ok=True)
    lake = yaml.safe_load((cfg / "lake-tallow.yaml").read_text())
    src = yaml.safe_load((cfg / "sources.yaml").read_text())
    for key in ("lake", "aois", "subbasins"):
        lake[key]["path"] = str((cfg / lake[key]["path"]).resolve())
    lake["sources"] = "sources.yaml"
    src = {"scenes": {**src["scenes"], "catalog": str(scenes / "catalog.json")}, "store": str(dest / "store")}
    (dest / "sources.yaml").write_text(yaml.safe_dump(src))
    (dest / "lake-tallow.yaml").write_text(yaml.safe_dump(lake))
    return dest / "lake-tallow.yaml"


@pytest.fixture()
def spy(monkeypatch: pytest.MonkeyPatch) -> list[str]:
    """Scene ids whose rasters the scene reader opens."""
    seen: list[str] = []
    original = SceneReader.read

    def read(self: SceneReader, scene_id: str, *args: object, **kwargs: object) -> object:
        seen.append(scene_id)
        return original(self, scene_id, *args, **kwargs)

    monkeypatch.setattr(SceneReader, "read", read)
    return seen


def _assert_tables_equal(store: Store, reference: Store, lake: str) -> None:
    for table in TABLES:
        pd.testing.assert_frame_equal(
            store.read_table(table, lake), reference.read_table(table, lake), check_exact=True
        )


def test_since_build_reads_only_the_new_scenes_and_equals_a_full_build(
    small_sample: Path, tmp_path: Path, spy: list[str]
) -> None:
    scenes = tmp_path / "scenes"
    link_scenes(small_sample, scenes, before=SINCE)
    project = load_project(project_with(small_sample, tmp_path / "config", scenes))
    store = Store(tmp_path / "store")
    first = build_target(project, store)
    assert first.reason == "full build" and spy
    before = set(store.read_table("target_obs", "tallow")["scene_id"])

    link_scenes(small_sample, scenes)  # December arrives
    spy.clear()
    again = build_target(project, store, since=SINCE)
    assert again.reason == f"incremental from {SINCE}"
    december = {s for s in store.read_table("target_obs", "tallow")["scene_id"] if s not in before}
    assert december and all(re.search(r"_202212\d\d$", s) for s in december)
    assert sorted(spy) == sorted(december)  # only the new scenes' rasters were read

    reference = Store(tmp_path / "reference")
    spy.clear()
    build_target(project, reference)
    assert len(spy) == len(before | december)
    _assert_tables_equal(store, reference, "tallow")
    assert store.entry("target_obs", "tallow")["inputs"] == reference.entry("target_obs", "tallow")["inputs"]

    # nothing new: a since-build reads the last month again and still writes the same tables
    spy.clear()
    assert build_target(project, store, since=SINCE).reason == f"incremental from {SINCE}"
    assert sorted(spy) == sorted(december)
    _assert_tables_equal(store, reference, "tallow")


def test_since_build_falls_back_to_a_full_build(small_sample: Path, tmp_path: Path, spy: list[str]) -> None:
    scenes = tmp_path / "scenes"
    link_scenes(small_sample, scenes)
    lake_file = project_with(small_sample, tmp_path / "config", scenes)
    project = load_project(lake_file)
    store = Store(tmp_path / "store")
    assert build_target(project, store, since=SINCE).reason == "full build (no stored target_obs)"
    n_all = len(spy)

    # a scene of an old month the caller did not name disappears from the catalogue
    cat = json.loads((scenes / "catalog.json").read_text())
    gone = next(x for x in cat["links"] if x["rel"] == "item" and "2022031" in x["href"])
    (scenes / "catalog.json").write_text(json.dumps({**cat, "links": [x for x in cat["links"] if x is not gone]}))
    (scenes / gone["href"]).unlink()
    spy.clear()
    result = build_target(project, store, since=SINCE)
    assert result.reason == f"full build (scenes before {SINCE} differ from the stored ones (0 added, 1 gone))"
    assert len(spy) == n_all - 1

    # a changed item JSON dated before since
    item = next((scenes / "items").glob("dune_202205*.json"))
    text = item.read_text()
    item.unlink()
    item.write_text(text.replace('"title": "chlorophyll-a concentration"', '"title": "chla"'))
    result = build_target(project, store, since=SINCE)
    assert result.reason == f"full build (changed catalogue file {item.name} dated before {SINCE} or undated)"

    # the configuration changed
    lake_file.write_text(lake_file.read_text() + "\n# edited\n")
    result = build_target(load_project(lake_file), store, since=SINCE)
    assert result.reason == "full build (configuration changed)"
    assert build_target(load_project(lake_file), store, since=SINCE).reason == f"incremental from {SINCE}"


def test_raw_reasons_keep_read_failures_and_drop_acceptance_reasons() -> None:
    from lakefeed.config.lake import TargetOptions

    stored = pd.DataFrame(
        {
            "n_valid": [0, 2, 40, 0],
            "valid_fraction": [0.0, 1.0, 0.9, 0.0],
            "cv": [float("nan"), 0.1, 0.1, float("nan")],
            "reason": [
                "scene dune_20220101: chlorophyll-a file /x.tif is missing",
                "valid pixels 2 < 5",
                "",
                "no valid pixel (nodata, bad quality or out of range)",
            ],
        }
    )
    # hand-derived: rows 2-4 carry what acceptance gives for their statistics; row 1 a read failure
    assert list(raw_reasons(stored, TargetOptions())) == [stored["reason"][0], "", "", ""]
