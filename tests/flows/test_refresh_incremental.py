"""A monthly refresh processes only the new weather (scene) month and leaves the tables a full rebuild would write.

On the reduced sample scenario, against the session's Prefect server on loopback: a lake variant whose
weather folder holds links to the first eleven monthly files; the twelfth "arrives" before the refresh.
The reference is a full build of the weather stage from all twelve files into another store. The same
for the target stage: a scene folder of links to the items and rasters before December and a catalogue
listing them; December's scenes arrive (and the catalogue lists them) before the refresh.
"""

from __future__ import annotations

import re

import pandas as pd
import pytest
import yaml
from _variants import write_variants
from scene_factory import link_scenes

from lakefeed.config import load_project
from lakefeed.flows._state import stage_since
from lakefeed.stages.target import build_target
from lakefeed.stages.weather import build_weather
from lakefeed.store import Store

pytestmark = pytest.mark.slow


def test_refresh_recomputes_only_the_new_month(small_sample, prefect_server, tmp_path) -> None:
    from lakefeed.flows.refresh import refresh

    folder = tmp_path / "weather"
    folder.mkdir()
    files = sorted((small_sample / "weather").glob("reanalysis_*.nc"))
    for f in files[:-1]:
        (folder / f.name).symlink_to(f)
    cfg = write_variants(small_sample, tmp_path / "config", ["alder"])
    sources = yaml.safe_load((cfg / "sources.yaml").read_text())
    sources["weather"]["paths"] = [str(folder / "reanalysis_*.nc")]
    (cfg / "sources.yaml").write_text(yaml.safe_dump(sources))
    (first,) = refresh([str(cfg)], sequential=True, stages=["weather"])
    assert first["status"] == "ok" and first["mode"] == "weather: full build"
    store = Store(str(tmp_path / "store"))
    before = store.num_rows("drivers_daily", "alder")

    (folder / files[-1].name).symlink_to(files[-1])  # the new month arrives
    (again,) = refresh([str(cfg)], sequential=True, stages=["weather"])
    assert again["status"] == "ok" and again["changed"] == "weather: 2022-12"
    assert again["mode"] == "weather: incremental from 2022-12-01"
    zones = store.read_table("drivers_daily", "alder")["zone"].nunique()
    assert again["rows_written"] == 32 * zones  # December and the first of January (local days), recomputed
    assert again["new_rows"] == store.num_rows("drivers_daily", "alder") - before == 31 * zones
    runs = store.read_table("run_summary", "alder")
    assert list(runs["mode"]) == ["weather: full build", "weather: incremental from 2022-12-01"]

    reference = Store(str(tmp_path / "reference"))
    build_weather(load_project(cfg / "lake-alder.yaml"), reference)
    pd.testing.assert_frame_equal(
        store.read_table("drivers_daily", "alder"), reference.read_table("drivers_daily", "alder"), check_exact=True
    )


def test_target_since_follows_scene_months() -> None:
    recorded = {"target": ["target_obs", "target_daily", "sensor_bias"]}
    # the catalogue (undated) changes with every new month: the stage checks it itself
    assert stage_since("target", {"scenes": ["2022-12", "all"]}, recorded=recorded) == "2022-12-01"
    assert stage_since("target", {"scenes": ["all"]}, recorded=recorded) is None  # nothing dated: in full
    assert stage_since("target", {"scenes": ["2022-12", "removed:2022-01"]}, recorded=recorded) is None
    assert stage_since("target", {"scenes": ["2022-12"], "config": ["all"]}, recorded=recorded) is None
    assert stage_since("target", {"scenes": ["2022-12"]}, recorded={}) is None
    assert stage_since("weather", {"weather": ["2022-12", "all"]}, recorded={"weather": []}) is None  # unchanged


def test_refresh_reads_only_the_new_scene_month(small_sample, prefect_server, tmp_path) -> None:
    from lakefeed.flows.refresh import refresh

    scenes = tmp_path / "scenes"
    link_scenes(small_sample, scenes, before="2022-12-01")
    cfg = write_variants(small_sample, tmp_path / "config", ["birch"])
    sources = yaml.safe_load((cfg / "sources.yaml").read_text())
    sources["scenes"]["catalog"] = str(scenes / "catalog.json")
    (cfg / "sources.yaml").write_text(yaml.safe_dump(sources))
    (first,) = refresh([str(cfg)], sequential=True, stages=["target"])
    assert first["status"] == "ok" and first["mode"] == "target: full build"
    store = Store(str(tmp_path / "store"))
    before = store.read_table("target_obs", "birch")

    link_scenes(small_sample, scenes)  # December's scenes arrive
    (again,) = refresh([str(cfg)], sequential=True, stages=["target"])
    assert again["status"] == "ok" and again["changed"] == "scenes: 2022-12,all"
    assert again["mode"] == "target: incremental from 2022-12-01"
    after = store.read_table("target_obs", "birch")
    assert set(after["scene_id"]) - set(before["scene_id"]) == {
        s for s in after["scene_id"] if re.search(r"_202212\d\d$", s)
    }

    reference = Store(str(tmp_path / "reference"))
    build_target(load_project(cfg / "lake-birch.yaml"), reference)
    for table in ("target_obs", "target_daily", "sensor_bias"):
        pd.testing.assert_frame_equal(
            store.read_table(table, "birch"), reference.read_table(table, "birch"), check_exact=True
        )


def test_refresh_reads_only_the_new_forecast_month(small_sample, prefect_server, tmp_path) -> None:
    from lakefeed.flows.refresh import refresh
    from lakefeed.stages.forecast import build_forecast

    folder = tmp_path / "forecast"
    folder.mkdir()
    files = sorted((small_sample / "forecast").glob("forecast_*.nc"))
    for f in files[:-1]:
        (folder / f.name).symlink_to(f)
    cfg = write_variants(small_sample, tmp_path / "config", ["cedar"])
    sources = yaml.safe_load((cfg / "sources.yaml").read_text())
    sources["forecast"]["paths"] = [str(folder / "forecast_*.nc")]
    (cfg / "sources.yaml").write_text(yaml.safe_dump(sources))
    (first,) = refresh([str(cfg)], sequential=True, stages=["weather", "forecast"])
    assert first["status"] == "ok" and first["mode"] == "weather: full build; forecast: full build (no stored table)"

    (folder / files[-1].name).symlink_to(files[-1])  # the new forecast month arrives
    (again,) = refresh([str(cfg)], sequential=True, stages=["weather", "forecast"])
    assert again["status"] == "ok" and again["changed"] == "forecast: 2022-12"
    assert again["mode"] == "forecast: incremental from 2022-12-01"

    store = Store(str(tmp_path / "store"))
    reference = Store(str(tmp_path / "reference"))
    project = load_project(cfg / "lake-cedar.yaml")
    build_weather(project, reference)
    build_forecast(project, reference)
    for table in ("forecast_drivers_daily", "bias_adjustment", "forecast_evaluation"):
        pd.testing.assert_frame_equal(
            store.read_table(table, "cedar"), reference.read_table(table, "cedar"), check_exact=True
        )
