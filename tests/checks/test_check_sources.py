"""Hydrology, sample and scene checks on tiny files: the formats and the clear messages."""

from __future__ import annotations

import json
from pathlib import Path

import _mini
import pandas as pd
import pytest
from pydantic import ValidationError

from lakefeed.checks import CheckResult
from lakefeed.checks.sources import check_hydrology, check_samples, check_scenes
from lakefeed.config import HydrologySource, LakeConfig, SampleStation, SceneSource, load_lake
from lakefeed.exceptions import SourceError
from lakefeed.sources.samples import read_samples
from lakefeed.sources.scenes import list_scenes

DAYS = pd.date_range("2024-01-01", periods=5, freq="D")


def bad(results: list[CheckResult]) -> list[str]:
    return [r.message for r in results if not r.ok]


def test_dsg_ids_variables_units_and_period(tmp_path: Path) -> None:
    ds = _mini.hydrology_dataset(["a", "b"], DAYS)
    ds["tp"].attrs["units"] = "mmol m-3"  # molar concentrations are accepted (converted with a molar mass)
    ds["tn"].attrs["units"] = "m s-1"
    ds.to_netcdf(tmp_path / "h.nc")
    res, period = check_hydrology(HydrologySource(path=str(tmp_path / "h.nc")), required_ids=["a", "b", "c"])
    msgs = bad(res)
    assert len(msgs) == 2
    assert "h.nc: sub-basin(s) of the network missing from the hydrology outputs: ['c']" in msgs
    assert "h.nc: tn has units 'm s-1' (units attribute), not convertible to mg L-1 or mmol m-3" in msgs
    assert str(period) == "2024-01-01 .. 2024-01-05"


def test_dsg_char_array_ids(tmp_path: Path) -> None:
    ds = _mini.hydrology_dataset(["a1", "b2"], DAYS)
    ds["station_id"] = (("station",), ds["station_id"].values.astype("S2"), {"cf_role": "timeseries_id"})
    ds.to_netcdf(tmp_path / "h.nc", encoding={"station_id": {"dtype": "S1"}})
    res, _ = check_hydrology(HydrologySource(path=str(tmp_path / "h.nc")), required_ids=["a1", "b2"])
    assert not bad(res)


def test_dsg_missing_file_and_variable(tmp_path: Path) -> None:
    res, _ = check_hydrology(HydrologySource(path=str(tmp_path / "none.nc")), required_ids=[])
    assert bad(res) == [f"hydrology.path: file not found: {tmp_path / 'none.nc'}"]
    _mini.hydrology_dataset(["a"], DAYS).drop_vars("tp").to_netcdf(tmp_path / "h.nc")
    res, _ = check_hydrology(HydrologySource(path=str(tmp_path / "h.nc")), required_ids=["a"])
    assert any("variable 'tp' for 'tp' (hydrology.variables.tp) not in the file" in m for m in bad(res))


def test_wide_csv_needs_units_and_columns(tmp_path: Path) -> None:
    frame = pd.DataFrame({"date": DAYS.strftime("%Y-%m-%d"), "a": 1.0, "b": 2.0})
    for role in ("discharge", "tn", "tp"):
        frame.to_csv(tmp_path / f"{role}.csv", index=False)
    files = {r: str(tmp_path / f"{r}.csv") for r in ("discharge", "tn", "tp")}
    src = HydrologySource(format="wide_csv", files=files, units={"discharge": "m3 s-1", "tn": "mg L-1"})
    res, period = check_hydrology(src, required_ids=["a", "b"])
    assert bad(res) == ["tp.csv: tp has no units"]
    assert str(period) == "2024-01-01 .. 2024-01-05"


def test_long_table(tmp_path: Path) -> None:
    rows = [(d, s, v, 1.0) for d in DAYS for s in ("a", "b") for v in ("discharge", "tn")]
    pd.DataFrame(rows, columns=["date", "subbasin", "variable", "value"]).to_parquet(tmp_path / "h.parquet")
    units = {"discharge": "m3 s-1", "tn": "mg L-1"}
    src = HydrologySource(format="long", path=str(tmp_path / "h.parquet"), units=units)
    res, _ = check_hydrology(src, required_ids=["a", "b", "c"])
    assert sorted(bad(res)) == [
        "h.parquet: no rows for variable 'tp' (tp); variables are ['discharge', 'tn']",
        "h.parquet: sub-basin(s) of the network missing from the hydrology outputs: ['c']",
    ]


def test_samples(tmp_path: Path) -> None:
    pd.DataFrame({"date": ["2024-01-02", "2024-03-01"], "nutrient": "tp", "concentration": 0.1}).to_csv(
        tmp_path / "s.csv", index=False
    )
    ok = SampleStation(id="st", path=str(tmp_path / "s.csv"), subbasin="a")
    res, period = check_samples([ok], subbasin_ids=["a"])
    assert not bad(res) and str(period) == "2024-01-02 .. 2024-03-01"
    wrong = SampleStation(id="st", path=str(tmp_path / "s.csv"), subbasin="q")
    missing = SampleStation(id="gone", path=str(tmp_path / "none.csv"))
    res, _ = check_samples([wrong, missing], subbasin_ids=["a"])
    assert bad(res) == [
        "samples[0].subbasin: 'q' is not a sub-basin id of the network",
        f"samples[1].path: file not found: {tmp_path / 'none.csv'}",
    ]


BAD_SHEETS = {  # sheets the build refuses: check must refuse them with the build's words
    "header_only.csv": ("date,tp\n", {}),
    "day_month.csv": ("date,tp\n03/04/2023,0.1\n05/06/2023,0.2\n", {}),
    "not_number.csv": ("date,tp\n2023-01-02,n.d.\n", {}),
    "bad_unit.csv": ("date,nutrient,concentration,unit\n2023-01-02,tp,5,m s-1\n", {}),
    "unmapped.csv": ("Datum;TP\n01.02.2023;0,1\n", {"columns": {"date": "Date"}}),
    "stations.csv": ("date,station,tp\n2023-01-02,A,0.1\n2023-01-02,B,0.2\n", {}),
}


def test_samples_check_reports_what_the_build_refuses(tmp_path: Path) -> None:
    """One function reads the sheets for both: each refused sheet fails the check with the build's message,
    and a lab sheet the build reads (';', decimal comma, day-first, '<' value) passes with its counts."""
    for name, (text, options) in BAD_SHEETS.items():
        (tmp_path / name).write_text(text)
        st = SampleStation(id="st", path=str(tmp_path / name), **options)
        with pytest.raises(SourceError) as build_error:
            read_samples(st.path, st, station_hint=st.id)  # what the hydrology stage calls
        res, _ = check_samples([st], subbasin_ids=[])
        assert bad(res) == [f"samples[0]: {build_error.value}"], name
    (tmp_path / "lab.csv").write_text("Day;TP;TN\n13.01.2024;<0,005;1,2\n27.01.2024;0,04;\n")
    st = SampleStation(id="st", path=str(tmp_path / "lab.csv"), columns={"date": "Day"})
    res, period = check_samples([st], subbasin_ids=[])
    assert not bad(res) and "3 samples (1 tn, 2 tp; 1 censored)" in res[0].message
    assert str(period) == "2024-01-13 .. 2024-01-27"


def _lake(tmp_path: Path, sensors: dict) -> LakeConfig:
    import yaml

    cfg = {**_mini.LAKE_YAML, "sensors": sensors}
    path = tmp_path / "lake.yaml"
    path.write_text(yaml.safe_dump(cfg))
    return load_lake(path)


def test_stac_catalogue_sensors_and_assets(tmp_path: Path) -> None:
    _mini.write_scenes(tmp_path / "scenes", [("2024-01-02", "kite"), ("2024-01-04", "dune"), ("2024-01-09", "kite")])
    lake = _lake(tmp_path, {"kite": {"pixel_size_m": 20}, "owl": {"pixel_size_m": 10}})
    res, period = check_scenes(SceneSource(catalog=str(tmp_path / "scenes" / "catalog.json")), lake)
    assert "catalog.json: 3 items" in res[0].message
    assert bad(res) == ["catalog.json: configured sensor(s) ['owl'] have no scenes; found dune: 1, kite: 2"]
    assert [r.message for r in res if r.status == "warning"] == [
        "catalog.json: scenes of sensor(s) ['dune'] are not configured and will be ignored"
    ]
    assert str(period) == "2024-01-02 .. 2024-01-09"
    # sensor_map renames labels
    src = SceneSource(catalog=str(tmp_path / "scenes" / "catalog.json"), sensor_map={"dune": "owl"})
    res, _ = check_scenes(src, lake)
    assert not bad(res)


def test_stac_unreadable_and_missing_asset(tmp_path: Path) -> None:
    lake = _lake(tmp_path, {"kite": {"pixel_size_m": 20}})
    (tmp_path / "broken.json").write_text("{not json")
    res, _ = check_scenes(SceneSource(catalog=str(tmp_path / "broken.json")), lake)
    assert bad(res)[0].startswith("broken.json: not a readable STAC file")
    _mini.write_scenes(tmp_path / "scenes", [("2024-01-02", "kite")])
    for f in (tmp_path / "scenes" / "data").rglob("*.tif"):
        f.unlink()
    res, _ = check_scenes(SceneSource(catalog=str(tmp_path / "scenes" / "catalog.json")), lake)
    assert any("asset file not found" in m for m in bad(res))


def test_scene_folder_with_pattern(tmp_path: Path) -> None:
    folder = tmp_path / "tifs"
    folder.mkdir()
    for name in ("kite_2024-01-02.tif", "kite_2024-01-07.tif", "notes.tif"):
        (folder / name).write_bytes(b"x")
    lake = _lake(tmp_path, {"kite": {"pixel_size_m": 20}})
    src = SceneSource(folder=str(folder), filename_pattern=r"(?P<sensor>[a-z]+)_(?P<date>\d{4}-\d{2}-\d{2})\.tif")
    res, period = check_scenes(src, lake)
    assert not bad(res) and "2 scenes from 3 file(s)" in res[0].message
    assert str(period) == "2024-01-02 .. 2024-01-07"
    # a pattern that matches only part of each name finds no scene in the build (whole-name match), and check
    # says so too (it once searched inside the names and counted 2)
    part = SceneSource(folder=str(folder), filename_pattern=r"(?P<sensor>[a-z]+)_(?P<date>\d{4}-\d{2}-\d{2})")
    with pytest.raises(SourceError, match="no scenes found") as refused:
        list_scenes(part)
    res, period = check_scenes(part, lake)
    assert bad(res) == [str(refused.value)] and period is None  # check says what the build says


@pytest.mark.parametrize(
    ("pattern", "words"),
    [
        (r"(?P<sensor>[a-z]+_(?P<date>\d{8})", "is not a regular expression"),
        (r"(?P<date>\d{8})\.tif", "lacks the named group(s) ['sensor']"),
        (r"([a-z]+)_(\d{8})\.tif", "lacks the named group(s) ['date', 'sensor']"),
    ],
)
def test_bad_filename_pattern_is_a_config_error(tmp_path: Path, pattern: str, words: str) -> None:
    """Refused when the sources file is read, so check and build refuse it alike (once an IndexError)."""
    with pytest.raises(ValidationError) as err:
        SceneSource(folder=str(tmp_path), filename_pattern=pattern)
    assert words in str(err.value) and "(?P<sensor>[a-z]+)" in str(err.value)


def test_catalogue_json_is_not_rewritten(tmp_path: Path) -> None:
    _mini.write_scenes(tmp_path / "scenes", [("2024-01-02", "kite")])
    cat = tmp_path / "scenes" / "catalog.json"
    before = json.loads(cat.read_text())
    check_scenes(SceneSource(catalog=str(cat)), _lake(tmp_path, {"kite": {"pixel_size_m": 20}}))
    assert json.loads(cat.read_text()) == before


def test_variables_and_units_found_as_the_reader_finds_them(tmp_path: Path) -> None:
    """Regression: check demanded a variable named 'discharge' where the reader finds it by CF standard_name,
    and ignored the unit column of a long table (and its 'subbasin_id' spelling) that the reader accepts."""
    ds = _mini.hydrology_dataset(["a", "b"], DAYS).rename({"discharge": "flow"})
    ds["flow"].attrs["standard_name"] = "water_volume_transport_in_river_channel"
    ds.to_netcdf(tmp_path / "h.nc")
    res, _ = check_hydrology(HydrologySource(path=str(tmp_path / "h.nc")), required_ids=["a", "b"])
    assert not bad(res)
    assert any(r.message.startswith("discharge: 'flow' in") for r in res)
    rows = [(d, s, v, 1.0, u) for d in DAYS for s in ("a", "b") for v, u in (("Q", "L/s"), ("tn", "ug L-1"))]
    frame = pd.DataFrame(rows, columns=["date", "subbasin_id", "variable", "value", "unit"])
    frame.to_csv(tmp_path / "h.csv", index=False)
    src = HydrologySource(format="long", path=str(tmp_path / "h.csv"), variables={"discharge": "Q"}, nutrients=["tn"])
    res, period = check_hydrology(src, required_ids=["a", "b"])
    assert not bad(res), bad(res)
    assert str(period) == "2024-01-01 .. 2024-01-05"
    frame.drop(columns="unit").to_csv(tmp_path / "h.csv", index=False)
    res, _ = check_hydrology(src, required_ids=["a", "b"])
    assert "h.csv: discharge has no units" in bad(res)


def test_truncated_hydrology_file_is_named_as_damaged(tmp_path: Path) -> None:
    """A NetCDF-4 file cut in half (an interrupted copy) is reported as damaged, not as a wrong format."""
    path = tmp_path / "h.nc"
    _mini.hydrology_dataset(["a", "b"], DAYS).to_netcdf(path, engine="netcdf4")
    path.write_bytes(path.read_bytes()[: path.stat().st_size // 2])
    with pytest.raises(SourceError, match="damaged or truncated"):  # check_project reports it as a problem line
        check_hydrology(HydrologySource(path=str(path)), required_ids=["a", "b"])
