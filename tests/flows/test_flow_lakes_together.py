"""A stage that shares work between lakes (features) runs in tasks of many lakes; a lake that fails there is
run again alone, so its error (and its retries) stay its own."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from lakefeed.exceptions import FeatureError
from lakefeed.store import Store


def _config(folder: Path, lake: str, **features: object) -> str:
    for name in ("lake.gpkg", "aois.gpkg", "subbasins.gpkg"):
        (folder / name).write_text("")
    (folder / "sources.yaml").write_text(yaml.safe_dump({"store": str(folder / "store")}))
    cfg = {"id": lake, "name": lake.title(), "timezone": "UTC", "sources": "sources.yaml",
           "lake": {"path": "lake.gpkg"}, "aois": {"path": "aois.gpkg"}, "subbasins": {"path": "subbasins.gpkg"},
           "features": {"windows": [1, 5], **features}}  # fmt: skip
    path = folder / f"lake-{lake}.yaml"
    path.write_text(yaml.safe_dump(cfg))
    return str(path)


def _inputs(store: Store, lake: str, seed: int) -> None:
    rng = np.random.default_rng(seed)
    days = pd.date_range("2022-01-01", "2022-06-30")
    drivers = pd.DataFrame({"date": days, "zone": "lake", "air_temperature_mean": rng.normal(10, 3, len(days)),
                            "precipitation_sum": rng.gamma(0.7, 3, len(days))})  # fmt: skip
    tdays = np.sort(rng.choice(days[10:], 40, replace=False))
    target = pd.DataFrame({"aoi": "open_water", "date": tdays, "chla": rng.gamma(2, 5, 40)})
    store.write_table(
        "drivers_daily", lake, drivers, units={"air_temperature_mean": "degC", "precipitation_sum": "mm d-1"}
    )
    store.write_table("target_daily", lake, target, units={"chla": "mg m-3"})


def _spy_many(monkeypatch: pytest.MonkeyPatch) -> list[list[str]]:
    """The lakes of every many-lakes call the tasks make, in call order."""
    import lakefeed.flows.tasks as tasks

    calls: list[list[str]] = []
    real = tasks.run_stage_many

    def spy(stage: str, lake_files: dict[str, str], root: str, **kw: object) -> dict:
        calls.append(sorted(lake_files))
        return real(stage, lake_files, root, **kw)

    monkeypatch.setattr(tasks, "run_stage_many", spy)
    return calls


def test_features_run_in_one_task_and_a_failing_lake_is_rerun_alone(
    prefect_server, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from prefect import flow

    from lakefeed.flows.refresh import _run_stage

    store = Store(tmp_path / "store")
    lakes = {lk: _config(tmp_path, lk) for lk in ("alder", "birch", "cedar")}
    lakes["rowan"] = _config(tmp_path, "rowan", drivers={"snow_depth": ["mean"]})  # no table provides it
    for i, lk in enumerate(lakes):
        _inputs(store, lk, seed=i)
    calls = _spy_many(monkeypatch)

    @flow
    def run() -> dict[str, object]:
        plans = {lk: {"since": {}} for lk in lakes}
        out = {}
        for lake, outcome in _run_stage("features", sorted(lakes), lakes, str(store.path), plans).items():
            try:
                out[lake] = outcome if isinstance(outcome, dict) else outcome.result()
            except FeatureError as err:
                out[lake] = err
        return out

    out = run()
    assert calls == [sorted(lakes)]  # one task for the four lakes
    for lake in ("alder", "birch", "cedar"):
        assert out[lake]["tables"]["features"] == 40 and store.has_table("features", lake)
    assert isinstance(out["rowan"], FeatureError) and "snow_depth" in str(out["rowan"])  # rerun alone, raised there
    assert not store.has_table("features", "rowan")


@pytest.mark.slow
def test_weather_lakes_sharing_a_grid_run_in_tasks_of_the_configured_size(
    small_sample, prefect_server, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Lakes naming the same grid run in tasks of ``lakes_per_task`` lakes, with the tables of one-lake runs; a
    lake whose zones lie off the grid fails in its task, is rerun alone and fails alone."""
    import geopandas as gpd
    from _variants import write_variants

    from lakefeed.config import load_project
    from lakefeed.flows.refresh import refresh
    from lakefeed.stages.weather import build_weather

    cfg = write_variants(small_sample, tmp_path / "config", ["alder", "birch", "cedar", "rowan"])
    cedar = yaml.safe_load((cfg / "lake-cedar.yaml").read_text())
    (cfg / "lake-cedar.yaml").write_text(yaml.safe_dump({**cedar, "timezone": "UTC"}))  # another time zone
    rowan = yaml.safe_load((cfg / "lake-rowan.yaml").read_text())
    off = gpd.read_file(rowan["lake"]["path"])
    off["geometry"] = off.geometry.translate(600_000.0, 0.0)  # 600 km east of the grid
    off.to_file(tmp_path / "off.gpkg")
    (cfg / "lake-rowan.yaml").write_text(yaml.safe_dump({**rowan, "lake": {"path": str(tmp_path / "off.gpkg")}}))
    calls = _spy_many(monkeypatch)
    out = {s["lake"]: s for s in refresh([str(cfg)], sequential=True, stages=["weather"], lakes_per_task=3)}
    assert calls == [["alder", "birch", "cedar"], ["rowan"]]
    assert out["rowan"]["status"] == "failed" and "outside the grid" in out["rowan"]["error"]
    store = Store(tmp_path / "store")
    for lake in ("alder", "birch", "cedar"):
        assert out[lake]["status"] == "ok" and out[lake]["mode"] == "weather: full build"
        alone = Store(tmp_path / f"alone-{lake}")
        build_weather(load_project(cfg / f"lake-{lake}.yaml"), alone)
        pd.testing.assert_frame_equal(
            store.read_table("drivers_daily", lake), alone.read_table("drivers_daily", lake), check_exact=True
        )
