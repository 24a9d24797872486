"""Provenance in the store manifest: every table lists the content hashes of its inputs and the config hash.

docs/architecture.md ("Store tables"): the manifest holds input content hashes and the config hash. Checked
after running every stage on the reduced sample scenario, against hashes computed here with hashlib.
"""

from __future__ import annotations

import dataclasses
import hashlib
from pathlib import Path

import pytest

from lakefeed.config import load_project
from lakefeed.stages._provenance import config_hash, input_hashes
from lakefeed.store import Store

pytestmark = pytest.mark.slow


def _sha(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def run(small_sample, tmp_path_factory):
    """All stages; weather and forecast on the lake and AOI zones only (speed)."""
    from lakefeed.stages.features import build_features
    from lakefeed.stages.forecast import build_forecast
    from lakefeed.stages.hydrology import build_hydrology
    from lakefeed.stages.target import build_target
    from lakefeed.stages.weather import build_weather

    project = load_project(small_sample / "config" / "lake-tallow.yaml")
    lake = project.lake.model_copy(update={"zones": project.lake.zones.model_copy(update={"catchment": False})})
    src = project.sources.forecast.model_copy(update={"min_overlap_days": 30})
    project = dataclasses.replace(project, lake=lake, sources=project.sources.model_copy(update={"forecast": src}))
    store = Store(tmp_path_factory.mktemp("provstore"))
    for build in (build_weather, build_hydrology, build_target, build_features, build_forecast):
        build(project, store)
    return project, store, small_sample


def _inputs(store: Store, table: str, lake: str) -> dict[str, str]:
    entry = store.entry(table, lake)
    assert entry is not None, table
    return entry["inputs"]


def test_every_table_has_inputs_and_the_config_hash(run):
    project, store, _ = run
    expected_cfg = hashlib.sha256(
        b"".join(p.name.encode() + b"\0" + p.read_bytes() + b"\0" for p in (project.lake_file, project.sources_file))
    ).hexdigest()
    assert config_hash(project) == expected_cfg
    tables = store.manifest()["tables"]
    written = {t for t, lakes in tables.items() if project.id in lakes}
    assert written >= {"drivers_daily", "hydrology_daily", "target_obs", "target_daily", "features",
                       "forecast_drivers_daily", "bias_adjustment", "forecast_evaluation"}  # fmt: skip
    for table in written:
        entry = tables[table][project.id]
        assert entry["inputs"], f"{table}: no inputs in the manifest"
        assert all(v for v in entry["inputs"].values()), table
        assert entry["config_hash"], f"{table}: no config hash"
        if table not in ("features", "diagnostics"):  # the features stage hashes its own options
            assert entry["config_hash"] == expected_cfg, table


def test_raw_files_are_listed_with_their_content_hash(run):
    project, store, sample = run
    weather = _inputs(store, "drivers_daily", project.id)
    nc = sorted((sample / "weather").glob("reanalysis_*.nc"))
    assert nc and all(weather[str(f.absolute())] == _sha(f) for f in nc)
    assert weather[str((sample / "geometry" / "lake.gpkg").absolute())] == _sha(sample / "geometry" / "lake.gpkg")

    hydro = _inputs(store, "hydrology_daily", project.id)
    for f in (sample / "hydrology" / "subbasin_daily.nc", sample / "samples" / "tributary_samples.csv"):
        assert hydro[str(f.absolute())] == _sha(f)

    target = _inputs(store, "target_obs", project.id)
    assert target[str((sample / "scenes" / "catalog.json").absolute())] == _sha(sample / "scenes" / "catalog.json")
    items = sorted((sample / "scenes" / "items").glob("*.json"))
    tifs = sorted((sample / "scenes" / "data").rglob("*.tif"))
    assert items and all(target[str(f.absolute())] == _sha(f) for f in items)
    assert tifs and all(str(f.absolute()) in target for f in tifs)
    assert _inputs(store, "target_daily", project.id) == target

    fc = _inputs(store, "forecast_drivers_daily", project.id)
    files = sorted((sample / "forecast").glob("forecast_*.nc"))
    assert files and all(fc[str(f.absolute())] == _sha(f) for f in files)
    assert fc[f"drivers_daily/lake={project.id}"] == store.entry("drivers_daily", project.id)["content_hash"]

    feats = _inputs(store, "features", project.id)
    assert feats[f"target_daily/lake={project.id}"] == store.entry("target_daily", project.id)["content_hash"]


def test_input_hashes_of_a_zarr_like_folder_and_duplicates(tmp_path):
    (tmp_path / "store.zarr" / "a").mkdir(parents=True)
    (tmp_path / "store.zarr" / "a" / "0").write_bytes(b"x")
    (tmp_path / "f.csv").write_bytes(b"date\n")
    out = input_hashes([tmp_path / "f.csv", tmp_path / "f.csv", None, tmp_path / "store.zarr"])
    assert list(out) == sorted([str(tmp_path / "f.csv"), str(tmp_path / "store.zarr")])
    assert out[str(tmp_path / "f.csv")] == _sha(tmp_path / "f.csv")
    before = out[str(tmp_path / "store.zarr")]
    (tmp_path / "store.zarr" / "a" / "0").write_bytes(b"y")  # same size, new content
    assert input_hashes([tmp_path / "store.zarr"])[str(tmp_path / "store.zarr")] != before
