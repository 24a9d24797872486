"""The weather stage built only from a changed source month on (``since``) equals a full rebuild.

On the reduced sample scenario: a lake whose weather folder holds symlinks to the sample's monthly files, so
a month can "arrive" (a new link) or be corrected (a changed copy). The reference of every check is a fresh
full build of the same files into another store (exact equality of the table read back).
"""

from __future__ import annotations

import hashlib
from datetime import date
from pathlib import Path

import pandas as pd
import pytest
import xarray as xr
import yaml

import lakefeed.stages.weather as weather
from lakefeed.config import load_project
from lakefeed.exceptions import ShrinkError
from lakefeed.stages._weather_refresh import refresh_plan
from lakefeed.stages.weather import build_weather
from lakefeed.store import Store

pytestmark = pytest.mark.slow


def _setup(sample: Path, root: Path, *, months: int, timezone: str = "Europe/Berlin") -> Path:
    """A lake config reading ``root/weather/reanalysis_*.nc``: links to the sample's first ``months`` files."""
    (root / "weather").mkdir(parents=True)
    files = sorted((sample / "weather").glob("reanalysis_*.nc"))
    for f in files[:months]:
        (root / "weather" / f.name).symlink_to(f)
    cfg = sample / "config"
    src = yaml.safe_load((cfg / "sources.yaml").read_text())
    lake = yaml.safe_load((cfg / "lake-tallow.yaml").read_text())
    src["weather"]["paths"] = [str(root / "weather" / "reanalysis_*.nc")]
    src.pop("store", None)
    (root / "config").mkdir()
    (root / "config" / "sources.yaml").write_text(yaml.safe_dump(src))
    for key in ("lake", "aois", "subbasins"):
        lake[key]["path"] = str((cfg / lake[key]["path"]).resolve())
    lake["timezone"] = timezone
    (root / "config" / "lake-tallow.yaml").write_text(yaml.safe_dump(lake))
    return root / "config" / "lake-tallow.yaml"


def _arrive(sample: Path, root: Path, month: str) -> None:
    f = sample / "weather" / f"reanalysis_{month}.nc"
    (root / "weather" / f.name).symlink_to(f)


def _full(lake_file: Path, root: Path) -> pd.DataFrame:
    store = Store(root)
    build_weather(load_project(lake_file), store)
    return store.read_table("drivers_daily", "tallow")


def _sha(path: str) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


@pytest.mark.parametrize("timezone", ["Europe/Berlin", "UTC", "Etc/GMT+5"])
def test_new_month_since_build_equals_full_rebuild(small_sample, tmp_path, monkeypatch, timezone) -> None:
    lake_file = _setup(small_sample, tmp_path, months=11, timezone=timezone)
    project = load_project(lake_file)
    store = Store(tmp_path / "store")
    assert build_weather(project, store).reason == "full build"
    base = store.part_files("drivers_daily", "tallow")[0]
    base_sha = _sha(base)
    _arrive(small_sample, tmp_path, "2022-12")
    read_from = []
    real = weather.hourly_drivers
    monkeypatch.setattr(
        weather,
        "hourly_drivers",
        lambda grid, *a, **k: read_from.append(grid.dataset["time"].values[0]) or real(grid, *a, **k),
    )
    result = build_weather(project, store, since="2022-12-01")
    # UTC files: the step ending 2022-12-01 00 UTC belongs to the local day of 2022-11-30 23 UTC (FAO/CF
    # convention of amounts labelled at the end of their step; see lakefeed.extract.daily)
    first = {"Europe/Berlin": date(2022, 12, 1), "UTC": date(2022, 11, 30), "Etc/GMT+5": date(2022, 11, 30)}[timezone]
    assert result.reason == f"incremental from {first}"
    assert pd.Timestamp(read_from[0]) >= pd.Timestamp(first) - pd.Timedelta(days=2)  # only the window was read
    got = store.read_table("drivers_daily", "tallow")
    assert result.tables["drivers_daily"] == (got["date"] >= first).sum()
    assert _sha(base) == base_sha and base in store.part_files("drivers_daily", "tallow")  # older part untouched
    expected = _full(lake_file, tmp_path / "reference")
    pd.testing.assert_frame_equal(got, expected, check_exact=True)
    assert got.attrs["units"] == expected.attrs["units"]
    # nothing new: recomputing from the last month again leaves the same table
    build_weather(project, store, since="2022-12-01")
    pd.testing.assert_frame_equal(store.read_table("drivers_daily", "tallow"), expected, check_exact=True)


def test_corrected_month_is_found_by_its_hash_and_rewritten(small_sample, tmp_path) -> None:
    lake_file = _setup(small_sample, tmp_path, months=12)
    project = load_project(lake_file)
    store = Store(tmp_path / "store")
    build_weather(project, store)
    link = tmp_path / "weather" / "reanalysis_2022-06.nc"
    with xr.open_dataset(link.resolve()) as ds:
        fixed = ds.load()
    fixed["air_temp"] = (fixed["air_temp"] + 1.5).assign_attrs(fixed["air_temp"].attrs)
    link.unlink()
    fixed.to_netcdf(link)
    # the caller names only the newest month: the stored file hashes move the start back to June
    result = build_weather(project, store, since="2022-12-01")
    assert result.reason == "incremental from 2022-06-01"
    expected = _full(lake_file, tmp_path / "reference")
    pd.testing.assert_frame_equal(store.read_table("drivers_daily", "tallow"), expected, check_exact=True)
    june = expected[(expected["date"] >= date(2022, 6, 2)) & (expected["date"] < date(2022, 7, 1))]
    assert june["air_temperature_mean"].notna().all()


def test_falls_back_to_a_full_build(small_sample, tmp_path) -> None:
    lake_file = _setup(small_sample, tmp_path, months=3)
    project = load_project(lake_file)
    store = Store(tmp_path / "store")
    assert build_weather(project, store, since="2022-03-01").reason == "full build (no stored table)"
    got = build_weather(project, store, since="2022-01-01").reason
    assert got == "full build (changes reach back to 2022-01-01, the start of the stored record)"
    lake_file.write_text(lake_file.read_text() + "# edited\n")
    assert build_weather(load_project(lake_file), store, since="2022-03-01").reason == (
        "full build (configuration changed)"
    )
    (tmp_path / "weather" / "reanalysis_2022-03.nc").unlink()
    before = store.read_table("drivers_daily", "tallow")
    # the last month removed shortens the record: refused unless the removal is declared (lakefeed.stages._guard)
    with pytest.raises(
        ShrinkError, match=r"(?s)drivers_daily/lake=tallow.*would end on 2022-03-01 instead of 2022-04-01"
    ):
        build_weather(load_project(lake_file), store, since="2022-02-01")
    pd.testing.assert_frame_equal(store.read_table("drivers_daily", "tallow"), before, check_exact=True)
    got = build_weather(load_project(lake_file), store, since="2022-02-01", allow_shrink=True)
    assert got.reason == "full build (a weather file recorded in the table is gone)"
    assert any("written although it loses stored data (--allow-shrink)" in w for w in got.warnings)
    pd.testing.assert_frame_equal(
        store.read_table("drivers_daily", "tallow"), _full(lake_file, tmp_path / "reference"), check_exact=True
    )


def test_refresh_start_checks_the_stored_entry(small_sample) -> None:
    from lakefeed.sources.grids import open_grid

    grid = open_grid(sorted((small_sample / "weather").glob("reanalysis_*.nc"))[:2])
    inputs = {str(Path(f).absolute()): "h" for f in grid.files}
    entry = {
        "parts": [{"file": "part-0.parquet"}],
        "config_hash": "c",
        "columns": ["zone", "date"],
        "metadata": {"grid_signature": grid.signature},
        "inputs": inputs,
        "time_range": ["2022-01-01T00:00:00", "2022-03-01T00:00:00"],
    }
    kw = dict(grid=grid, inputs=inputs, config_hash="c", columns=["zone", "date"], signature=grid.signature)
    assert refresh_plan(entry, since="2022-02-01", tz="Europe/Berlin", **kw).day == date(2022, 2, 1)
    assert refresh_plan(entry, since="2022-02-01", tz="UTC", **kw).day == date(2022, 1, 31)
    # the files' own calendar: midnight in UTC+2 is 22 UTC of the day before
    assert refresh_plan(entry, since="2022-02-01", tz="UTC", source_tz="Etc/GMT-2", **kw).day == date(2022, 1, 31)
    assert refresh_plan(entry, since="2022-09-01", tz="UTC", **kw).day == date(2022, 3, 1)  # never past the record
    assert refresh_plan({**entry, "columns": ["zone"]}, since="2022-02-01", tz="UTC", **kw).reason == (
        "stored columns differ"
    )
    assert refresh_plan({**entry, "metadata": {}}, since="2022-02-01", tz="UTC", **kw).reason == (
        "weather grid changed"
    )
    layers = {**inputs, "/x/lake.gpkg": "a"}
    moved = refresh_plan(
        {**entry, "inputs": layers}, since="2022-02-01", tz="UTC", **{**kw, "inputs": {**layers, "/x/lake.gpkg": "b"}}
    )
    assert moved.reason == "a geometry layer changed"


def test_a_build_stopped_between_its_two_writes_is_marked_and_completed(small_sample, tmp_path, monkeypatch) -> None:
    from lakefeed.flows._state import table_complete

    lake_file = _setup(small_sample, tmp_path, months=12)
    project = load_project(lake_file)
    store = Store(tmp_path / "store")

    def stop(*args, **kwargs):  # the process stops before the tail part is written
        raise KeyboardInterrupt

    monkeypatch.setattr(Store, "append_arrow", stop)
    with pytest.raises(KeyboardInterrupt):
        build_weather(project, store)
    monkeypatch.undo()
    assert store.has_table("drivers_daily", "tallow") and not table_complete(store, "drivers_daily", "tallow")
    assert store.read_table("drivers_daily", "tallow")["date"].max() == date(2022, 12, 31)  # the tail is missing
    assert build_weather(project, store, since="2022-12-01").reason == "incremental from 2022-12-01"
    assert table_complete(store, "drivers_daily", "tallow")
    expected = _full(lake_file, tmp_path / "reference")
    pd.testing.assert_frame_equal(store.read_table("drivers_daily", "tallow"), expected, check_exact=True)
