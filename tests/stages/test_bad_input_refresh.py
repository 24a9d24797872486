"""Bad input reaching a refresh never replaces good data with worse.

On a private copy of the reduced sample scenario, built once for the module (all five stages): each test
breaks one input (an empty, truncated or random-bytes file, a month cut short, a scene that cannot be read,
a setting that rejects every scene), runs the stage that reads it on a copy of the built store, asserts the
error and its message, and compares every table of the store with the one before (no row lost, no value
changed). The broken file is restored after each test.
"""

from __future__ import annotations

import contextlib
import os
import shutil
from collections.abc import Callable, Iterator
from pathlib import Path

import pandas as pd
import pytest
import xarray as xr
import yaml

from lakefeed.config import load_project
from lakefeed.exceptions import ConfigError, ShrinkError, SourceError
from lakefeed.flows.runtime import STAGES, available_stages
from lakefeed.store import Store

pytestmark = pytest.mark.slow
LAKE = "tallow"


@pytest.fixture(scope="module")
def built(small_sample: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """(data folder, store) of a full build of every stage on a private copy of the sample."""
    data = tmp_path_factory.mktemp("bad-input") / "data"
    shutil.copytree(small_sample, data, symlinks=True)
    project = load_project(data / "config" / f"lake-{LAKE}.yaml")
    store = Store(data.parent / "store")
    stages, _ = available_stages()
    for name in STAGES:
        stages[name](project, store)
    return data, data.parent / "store"


@pytest.fixture()
def case(built: tuple[Path, Path], tmp_path: Path) -> Iterator[tuple[Path, Store, Callable[[str, bytes], Path]]]:
    """(data folder, a copy of the built store, break(relative path, new bytes)); broken files are restored."""
    data, root = built
    shutil.copytree(root, tmp_path / "store")
    saved: dict[Path, bytes] = {}

    def replace(rel: str, content: bytes) -> Path:
        path = data / rel
        saved.setdefault(path, path.read_bytes())
        path.write_bytes(content)
        return path

    yield data, Store(tmp_path / "store"), replace
    for path, content in saved.items():
        path.write_bytes(content)


def _tables(store: Store) -> dict[str, pd.DataFrame]:
    return {t: store.read_table(t, LAKE) for t in store.tables() if store.has_table(t, LAKE)}


def _assert_unchanged(store: Store, before: dict[str, pd.DataFrame]) -> None:
    after = _tables(store)
    assert sorted(after) == sorted(before)
    for table, frame in before.items():
        pd.testing.assert_frame_equal(after[table], frame, check_exact=True, obj=table)


def _broken(how: str, good: bytes) -> bytes:
    if how == "empty":
        return b""
    if how == "truncated":
        return good[: len(good) * 9 // 10]  # the header survives, the data are cut short
    return os.urandom(len(good))


@contextlib.contextmanager
def _setting(data: Path, section: str, key: str, value: object) -> Iterator[Path]:
    """The lake config with ``section.key`` set to ``value`` for the duration (then the original text again)."""
    lake_file = data / "config" / f"lake-{LAKE}.yaml"
    text = lake_file.read_text()
    cfg = yaml.safe_load(text)
    cfg[section][key] = value
    lake_file.write_text(yaml.safe_dump(cfg))
    try:
        yield lake_file
    finally:
        lake_file.write_text(text)


def _run(stage: str, data: Path, store: Store, **kw: object) -> object:
    stages, _ = available_stages()
    return stages[stage](load_project(data / "config" / f"lake-{LAKE}.yaml"), store, **kw)


@pytest.mark.parametrize("how", ["empty", "truncated", "random"])
@pytest.mark.parametrize(
    ("stage", "rel", "since"),
    [
        ("weather", "weather/reanalysis_2022-12.nc", "2022-12-01"),
        ("hydrology", "hydrology/subbasin_daily.nc", None),
        ("forecast", "forecast/forecast_2022-12.nc", "2022-12-01"),
    ],
)
def test_unreadable_source_file_fails_the_stage_and_keeps_the_tables(case, stage, rel, since, how) -> None:
    data, store, replace = case
    before = _tables(store)
    path = replace(rel, _broken(how, (data / rel).read_bytes()))
    with pytest.raises(SourceError, match=str(path)):
        _run(stage, data, store, **({"since": since} if since else {}))
    _assert_unchanged(store, before)


def test_weather_month_cut_short_is_refused_unless_allowed(case) -> None:
    """A readable December file holding only its first ten days would shorten drivers_daily by three weeks."""
    data, store, replace = case
    rel = "weather/reanalysis_2022-12.nc"
    with xr.open_dataset(data / rel) as ds:
        short = ds.isel(time=slice(0, 240)).load()
    replace(rel, short.to_netcdf())
    before = _tables(store)
    with pytest.raises(ShrinkError) as err:
        _run("weather", data, store, since="2022-12-01")
    text = str(err.value)
    assert "refusing to write drivers_daily/lake=tallow from 2022-12-01 on" in text
    # the sample's lake is on Europe/Berlin: the last stored local day is 2023-01-01, the short file ends on 12-11
    assert "the record would end on 2022-12-11 instead of 2023-01-01 (lost: 2022-12-12..2023-01-01)" in text
    assert "--allow-shrink" in text
    _assert_unchanged(store, before)
    result = _run("weather", data, store, since="2022-12-01", allow_shrink=True)
    assert any("--allow-shrink" in w for w in result.warnings)
    assert store.read_table("drivers_daily", LAKE)["date"].max() == pd.Timestamp("2022-12-11").date()


def test_settings_that_reject_every_scene_do_not_empty_target_daily(case) -> None:
    """A valid range above every observed value (config-valid, but it rejects every scene) would empty the
    target tables: refused, naming the tables and dates; declared with allow_shrink it is written."""
    data, store, _ = case
    before = _tables(store)
    assert len(before["target_daily"]) > 100
    with _setting(data, "target", "valid_range", [5000.0, 9000.0]):
        with pytest.raises(ShrinkError) as err:
            _run("target", data, store)
        msg = str(err.value)
        assert "refusing to write target_obs/lake=tallow" in msg
        assert "valid value(s) would become missing" in msg
        _assert_unchanged(store, before)
        result = _run("target", data, store, allow_shrink=True)
        assert store.num_rows("target_daily", LAKE) == 0
        assert any("target_daily/lake=tallow" in w and "would be removed" in w for w in result.warnings)


def test_unreadable_scene_with_stored_statistics_is_refused(case) -> None:
    """A scene is one observation: a new unreadable scene is recorded as rejected (reason naming its file);
    a scene whose stored statistics were valid and that can no longer be read is refused."""
    from lakefeed.sources.scenes import list_scenes

    data, store, replace = case
    project = load_project(data / "config" / f"lake-{LAKE}.yaml")
    obs = store.read_table("target_obs", LAKE)
    scene = obs.loc[obs["accepted"].astype(bool), "scene_id"].iloc[0]
    day = obs.loc[obs["scene_id"] == scene, "date"].iloc[0]
    scenes = list_scenes(project.sources.scenes)
    href = Path(scenes.loc[scenes["scene_id"] == scene, "value_href"].iloc[0])
    replace(str(href.relative_to(data)), b"II*\x00" + os.urandom(400))
    before = _tables(store)
    with pytest.raises(ShrinkError, match=rf"(?s)target_obs/lake=tallow.*missing on {day:%Y-%m-%d}"):
        _run("target", data, store)
    _assert_unchanged(store, before)
    result = _run("target", data, store, allow_shrink=True)
    rows = store.read_table("target_obs", LAKE).query("scene_id == @scene")
    assert not rows["accepted"].any() and rows["reason"].str.contains(href.name).all()
    assert any("scene(s) rejected as unreadable" in w for w in result.warnings)


def test_window_longer_than_the_record_is_refused_at_stage_start(case) -> None:
    """The same words as `lakefeed check` (FeatureOptions.record_problems), before anything is computed."""
    data, store, _ = case
    before = _tables(store)
    with _setting(data, "features", "windows", [7, 4000]) as lake_file, pytest.raises(ConfigError) as err:
        _run("features", data, store, full=True)
    msg = str(err.value)
    assert str(lake_file) in msg and "features.windows/features.leads" in msg
    assert "the longest window (4000 d) plus lead(s) [0] d do not fit in the record" in msg
    _assert_unchanged(store, before)
