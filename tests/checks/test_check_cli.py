"""`lakefeed check` end to end: passes on a good config, fails naming the reason on broken copies, writes nothing."""

from __future__ import annotations

import os
import warnings
from collections.abc import Callable
from pathlib import Path

import _mini
import geopandas as gpd
import pandas as pd
import pytest
import shapely
import yaml
from shapely.geometry import box
from typer.testing import CliRunner

from lakefeed.cli import app

runner = CliRunner()


def snapshot(root: Path) -> dict[str, tuple[int, int]]:
    return {str(p): (p.stat().st_size, p.stat().st_mtime_ns) for p in root.rglob("*")}


def check(*args: str) -> tuple[int, str]:
    result = runner.invoke(app, ["check", *args])
    return result.exit_code, result.output


def edit_yaml(path: Path, change: Callable[[dict], None]) -> None:
    data = yaml.safe_load(path.read_text())
    change(data)
    path.write_text(yaml.safe_dump(data, sort_keys=False))


def test_check_passes_on_the_mini_config(mini: Path) -> None:
    code, out = check(str(mini))
    assert code == 0, out
    assert "passed:" in out and "0 problem, 0 warning, 0 skipped" in out
    assert "all 1 lake config(s) passed" in out
    code, out = check(str(mini.parent))  # a folder: the sources file is not taken for a lake config
    assert code == 0, out


def _break_missing_layer(root: Path) -> None:
    (root / "geometry" / "aois.gpkg").unlink()


def _break_missing_weather(root: Path) -> None:
    for f in (root / "weather").glob("*.nc"):
        f.unlink()


def _break_yaml(root: Path) -> None:
    p = root / "config" / "lake-mini.yaml"
    p.write_text(p.read_text().replace("name: Mini Reservoir", "name: [Mini Reservoir"))


def _break_unknown_key(root: Path) -> None:
    edit_yaml(root / "config" / "lake-mini.yaml", lambda d: d["aois"].update(id_feild="aoi_id"))


def _break_id(bad: str) -> Callable[[Path], None]:
    return lambda root: edit_yaml(root / "config" / "lake-mini.yaml", lambda d: d.update(id=bad))


def _break_tz(root: Path) -> None:
    edit_yaml(root / "config" / "lake-mini.yaml", lambda d: d.update(timezone="Europe/Tallow"))


def _break_env(root: Path) -> None:
    edit_yaml(root / "config" / "sources.yaml", lambda d: d["weather"].update(paths=["${LAKEFEED_NO_SUCH_VAR}/*.nc"]))


def _break_crs(root: Path) -> None:
    lake = _mini.lake_layer()
    lake = gpd.GeoDataFrame(lake.drop(columns="geometry"), geometry=list(lake.geometry))  # no CRS
    (root / "geometry" / "lake.gpkg").unlink()
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="'crs' was not provided")
        _mini.write_layer(lake, root / "geometry" / "lake.gpkg")


def _break_empty(root: Path) -> None:
    aois = _mini.aoi_layer().iloc[:0]
    (root / "geometry" / "aois.gpkg").unlink()
    _mini.write_layer(aois, root / "geometry" / "aois.gpkg")


def _break_aoi_outside(root: Path) -> None:
    aois = _mini.aoi_layer()
    aois.loc[1, "geometry"] = box(_mini.X0 + 2500, _mini.Y0 + 1500, _mini.X0 + 3500, _mini.Y0 + 2500)
    _mini.write_layer(aois, root / "geometry" / "aois.gpkg")


def _break_network(down: list[str]) -> Callable[[Path], None]:
    def f(root: Path) -> None:
        sb = _mini.subbasin_layer()
        sb["downstream_id"] = down
        _mini.write_layer(sb, root / "geometry" / "subbasins.gpkg")

    return f


def _break_lake_off_grid(root: Path) -> None:
    lake = _mini.lake_layer()
    lake["geometry"] = lake.geometry.translate(200_000, 0)  # about 2.7 degrees east
    _mini.write_layer(lake, root / "geometry" / "lake.gpkg")


def _break_variable(root: Path) -> None:
    edit_yaml(root / "config" / "sources.yaml", lambda d: d["weather"].update(units={"air_temperature": "m s-1"}))


def _break_sensors(root: Path) -> None:
    edit_yaml(root / "config" / "lake-mini.yaml", lambda d: d["sensors"].update(owl={"pixel_size_m": 10}))


def _break_hydrology_ids(root: Path) -> None:
    ds = _mini.hydrology_dataset(["b", "c", "d"], pd.date_range("2024-01-01", "2024-03-31", freq="D"))
    ds.to_netcdf(root / "hydrology" / "subbasin_daily.nc")


def _break_coverage(root: Path) -> None:
    ds = _mini.forecast_dataset(pd.date_range("2026-01-05", periods=3, freq="D"))
    ds.to_netcdf(root / "forecast" / "forecast_2024-01.nc")


def _break_store_is_file(root: Path) -> None:
    (root / "store").write_text("not a folder")


BROKEN = {
    "missing layer": (_break_missing_layer, ["areas of interest (config key 'aois.path'): file not found"]),
    "missing weather": (_break_missing_weather, ["weather.paths[0]: no file matches"]),
    "yaml syntax": (_break_yaml, ["YAML syntax error", "line "]),
    "unknown key": (_break_unknown_key, ["aois.id_feild (line", "did you mean 'id_field'?"]),
    "id slash": (_break_id("mini/../x"), ["lake id 'mini/../x' must be a plain slug"]),
    "id dots": (_break_id(".."), ["lake id '..' must be a plain slug"]),
    "id space": (_break_id("mini lake"), ["lake id 'mini lake' must be a plain slug"]),
    "time zone": (_break_tz, ["unknown time zone 'Europe/Tallow'"]),
    "env unset": (_break_env, ["weather.paths[0]: environment variable 'LAKEFEED_NO_SUCH_VAR' is not set"]),
    "no crs": (_break_crs, ["lake polygon (config key 'lake.path')", "has no CRS"]),
    "empty layer": (_break_empty, ["areas of interest", "empty layer"]),
    "aoi outside": (_break_aoi_outside, ["AOI 'bathing_bay': 75.0% of its area (75.00 ha) lies outside the lake"]),
    "cycle": (_break_network(["b", "a", "LAKE", "OUTSIDE"]), ["cycle in the sub-basin network: a -> b -> a"]),
    "dangling": (
        _break_network(["LAKE", "a", "zz", "OUTSIDE"]),
        ["dangling downstream id 'zz' (of sub-basin(s) 'c')"],
    ),
    # the run lock of build/refresh and every Store refuse it with the same words (tests/store/test_location.py)
    "store is a file": (_break_store_is_file, ["(key 'store'): store", "is a file, not a folder; choose another"]),
    "off grid": (_break_lake_off_grid, ["lake (", "is not inside the weather grid of reanalysis_2024-01-01.nc"]),
    "units": (
        _break_variable,
        ["variable 'air_temp' (air_temperature) has units 'm s-1' (weather.units.air_temperature)"],
    ),
    "sensors": (_break_sensors, ["configured sensor(s) ['owl'] have no scenes"]),
    "hydrology ids": (_break_hydrology_ids, ["missing from the hydrology outputs: ['a']"]),
    "coverage": (_break_coverage, ["the sources do not overlap in time: forecast issues starts 2026-01-05"]),
}


@pytest.mark.parametrize("case", list(BROKEN))
def test_check_fails_naming_the_reason_and_writes_nothing(
    mini: Path, case: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.delenv("LAKEFEED_NO_SUCH_VAR", raising=False)
    root = mini.parent.parent
    breaker, expected = BROKEN[case]
    breaker(root)
    before = snapshot(root)
    cwd = root.parent / "cwd"
    cwd.mkdir()
    monkeypatch.chdir(cwd)
    code, out = check(str(mini))
    assert os.listdir(cwd) == []
    assert code == 1, out
    for text in expected:
        assert text in out, out
    assert "problem" in out
    assert snapshot(root) == before


def test_missing_config_file(tmp_path: Path) -> None:
    code, out = check(str(tmp_path / "lake-none.yaml"))
    assert code == 1 and "lake config not found" in out and "lake-none.yaml" in out


def test_self_intersecting_polygon_is_a_warning_and_fails_with_strict(mini: Path) -> None:
    """Repaired, not rejected (documented in lakefeed.sources.vectors): a warning naming the feature."""
    root = mini.parent.parent
    lake = _mini.lake_layer()
    x, y = _mini.X0, _mini.Y0
    # the last edge crosses the bottom edge near the south-west corner: a small bow-tie
    ring = [(x, y), (x + 3000, y), (x + 3000, y + 2000), (x, y + 2000), (x + 20, y - 20), (x, y)]
    lake.loc[0, "geometry"] = shapely.Polygon(ring)
    _mini.write_layer(lake, root / "geometry" / "lake.gpkg")
    code, out = check(str(mini))
    assert code == 0, out
    assert "warning  lake polygon" in out
    assert "repaired invalid polygon(s) feature #0 (Self-intersection" in out
    assert "1 warning" in out
    code, out = check("--strict", str(mini))
    assert code == 1 and "fix the lines marked problem or warning" in out


def test_sources_not_configured_are_skipped(mini: Path) -> None:
    edit_yaml(mini.parent / "sources.yaml", lambda d: [d.pop(k) for k in ("hydrology", "samples", "forecast")])
    code, out = check(str(mini))
    assert code == 0, out
    assert "skipped  hydrology" in out and "no 'hydrology' section in the sources config" in out
    assert "skipped  forecast" in out


def test_all_config_problems_at_once(mini: Path) -> None:
    edit_yaml(mini, lambda d: d.update(id="Bad Id", timezone="Nowhere/Else", zonez={}))
    edit_yaml(mini.parent / "sources.yaml", lambda d: d["weather"].update(pathz=[]))
    code, out = check(str(mini))
    assert code == 1
    for text in ("lake id 'Bad Id'", "unknown time zone", "did you mean 'zones'?", "weather.pathz"):
        assert text in out
    assert "skipped  sources" in out


@pytest.mark.slow
def test_check_passes_on_the_sample_scenario(request: pytest.FixtureRequest) -> None:
    sample = pytest.importorskip("lakefeed.sample")
    if not hasattr(sample, "generate"):
        pytest.skip("lakefeed.sample.generate does not exist yet")
    root: Path = request.getfixturevalue("small_sample")
    before = snapshot(root)
    code, out = check(str(root / "config"))
    assert code == 0, out
    assert snapshot(root) == before


@pytest.mark.slow
def test_check_fails_on_a_broken_copy_of_the_sample(request: pytest.FixtureRequest, tmp_path: Path) -> None:
    sample = pytest.importorskip("lakefeed.sample")
    if not hasattr(sample, "generate"):
        pytest.skip("lakefeed.sample.generate does not exist yet")
    import shutil

    root: Path = request.getfixturevalue("small_sample")
    copy = tmp_path / "sample"
    shutil.copytree(root / "config", copy / "config")
    lake_file = next((copy / "config").glob("lake-*.yaml"))
    text = lake_file.read_text()
    lake_file.write_text(text.replace("Europe/Berlin", "Europe/Tallow"))
    code, out = check(str(lake_file))
    assert code == 1 and "unknown time zone 'Europe/Tallow'" in out


def test_several_lakes_in_a_folder(mini: Path) -> None:
    second = mini.parent / "lake-other.yaml"
    data = yaml.safe_load(mini.read_text())
    second.write_text(yaml.safe_dump({**data, "id": "other", "timezone": "Mars/Base"}))
    code, out = check(str(mini.parent))
    assert code == 1
    assert out.startswith("mini  (") and "\nlake-other.yaml  (" in out
    assert "1 of 2 lake config(s) have problems" in out
    second.write_text(yaml.safe_dump(data))  # same id as lake-mini.yaml
    code, out = check(str(mini.parent))
    assert code == 1 and "lake id 'mini' is also used by" in out


def test_sources_file_given_instead_of_the_lake_file(mini: Path) -> None:
    code, out = check(str(mini.parent / "sources.yaml"))
    assert code == 1 and "sources.yaml is a sources config, not a lake config" in out


@pytest.mark.parametrize(
    ("case", "expected"),
    [
        ("aoi outside", ["aois.gpkg (config key 'aois', field 'aoi_id'): AOI 'bathing_bay'"]),
        ("cycle", ["subbasins.gpkg (config key 'subbasins', fields 'subbasin_id' -> 'downstream_id'): cycle"]),
        ("unknown key", ["fix that key in the file named above (line given where known)"]),
    ],
)
def test_problem_lines_name_file_key_and_what_to_do(mini: Path, case: str, expected: list[str]) -> None:
    """Regression: the AOI and network problems named neither the layer file nor its config key, and config
    problems ended with the unfinished hint 'fix it in the file named'."""
    BROKEN[case][0](mini.parent.parent)
    result = runner.invoke(app, ["check", str(mini)], env={"COLUMNS": "400"})
    assert result.exit_code == 1
    for text in expected:
        assert text in result.output, result.output


def test_routed_outputs_need_only_the_direct_inflows(mini: Path) -> None:
    """Regression: with routed discharge the stage reads only the direct inflows (and station sub-basins), but
    check demanded every catchment sub-basin; with local runoff it needs them all."""
    root = mini.parent.parent
    ds = _mini.hydrology_dataset(["a", "c", "d"], pd.date_range("2024-01-01", "2024-03-31", freq="D"))  # no 'b'
    ds.to_netcdf(root / "hydrology" / "subbasin_daily.nc")
    code, out = check(str(mini))
    assert code == 0, out
    sources = next(p for p in (root / "config").glob("*.yaml") if "hydrology" in p.read_text())
    edit_yaml(sources, lambda d: d["hydrology"].update(discharge_kind="local"))
    code, out = check(str(mini))
    assert code == 1 and "missing from the hydrology outputs: ['b']" in out, out
