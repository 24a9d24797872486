"""`lakefeed init` on a lake and sub-basin layer kept apart from the project; field detection."""

from __future__ import annotations

import shutil

import geopandas as gpd
import pytest
from shapely.geometry import box
from typer.testing import CliRunner

from lakefeed.cli import app
from lakefeed.config import load_project
from lakefeed.exceptions import GeometryError
from lakefeed.geometry.onboard import detect_fields


def _layer(**columns: list[object]) -> gpd.GeoDataFrame:
    n = len(next(iter(columns.values())))
    return gpd.GeoDataFrame(columns, geometry=[box(i, 0, i + 1, 1) for i in range(n)], crs="EPSG:32632")


def test_detect_fields_unambiguous() -> None:
    subs = _layer(code=["A", "B", "C"], name=["x", "y", "z"], to=["B", "LAKE", "B"], area=[1.0, 2.0, 3.0])
    assert detect_fields(subs) == ("code", "to")


def test_detect_fields_ambiguous_asks_for_names() -> None:
    subs = _layer(a=["1", "2", "3"], b=["2", "3", "1"])  # each could be the other's downstream
    with pytest.raises(GeometryError, match="--id-field NAME --downstream-field NAME"):
        detect_fields(subs)


def test_init_writes_a_ready_config(small_sample, tmp_path) -> None:
    work = tmp_path / "elsewhere"
    work.mkdir()
    shutil.copy(small_sample / "geometry" / "lake.gpkg", work / "pond.gpkg")
    shutil.copy(small_sample / "geometry" / "subbasins.gpkg", work / "basins.gpkg")
    out = tmp_path / "cfg"
    result = CliRunner().invoke(
        app,
        [
            "init",
            "pond",
            "--lake",
            str(work / "pond.gpkg"),
            "--subbasins",
            str(work / "basins.gpkg"),
            "--sources",
            str(small_sample / "config" / "sources.yaml"),
            "--out",
            str(out),
        ],
    )
    assert result.exit_code == 0, result.output
    text = " ".join(result.output.split())
    assert "subbasin_id" in text and "downstream_id" in text
    for sb in ("SB01", "SB02", "SB03"):  # the sample's direct inflows (sample scenario README)
        assert sb in text
    assert "Europe/Berlin" in text  # from the lake centroid
    assert "whole lake is proposed" in text
    project = load_project(out / "lake-pond.yaml")
    assert project.lake.timezone == "Europe/Berlin"
    assert project.lake.subbasins.lake_id == "LAKE"
    aois = gpd.read_file(project.lake.aois.path)
    assert list(aois["aoi_id"]) == ["whole_lake"]


def test_init_rejects_a_bad_id(tmp_path) -> None:
    result = CliRunner().invoke(app, ["init", "../up", "--lake", "x.gpkg", "--subbasins", "y.gpkg"])
    assert result.exit_code != 0
    assert "plain slug" in str(result.exception) + result.output


def test_detect_fields_when_most_basins_drain_straight_to_the_lake() -> None:
    """Few chains: most downstream values are outlet codes, not ids; the content still tells the pair."""
    subs = _layer(BASIN=["A", "B", "C", "D", "E"], DOWN=["LAKE", "LAKE", "A", "C", "SEA"], area=[1.0, 2, 3, 4, 5])
    assert detect_fields(subs) == ("BASIN", "DOWN")
    only_lake = _layer(code=["A", "B", "C"], drains_to=["LAKE", "LAKE", "LAKE"])  # no chain at all: the name tells
    assert detect_fields(only_lake) == ("code", "drains_to")


def test_init_with_an_own_outside_code(small_sample, tmp_path) -> None:
    """A layer whose basins leaving the area point to 'SEA': refused with the way out named, then accepted
    with --outside-id, which the written config keeps."""
    from lakefeed.cli._app import app as cli

    subs = gpd.read_file(small_sample / "geometry" / "subbasins.gpkg")
    subs = subs.rename(columns={"subbasin_id": "BASIN", "downstream_id": "DOWN"})
    subs["DOWN"] = subs["DOWN"].replace({"OUTSIDE": "SEA"})
    subs.to_file(tmp_path / "basins.gpkg")
    args = ["init", "pond", "--lake", str(small_sample / "geometry" / "lake.gpkg"), "--subbasins",
            str(tmp_path / "basins.gpkg"), "--sources", str(small_sample / "config" / "sources.yaml"),
            "--out", str(tmp_path / "cfg")]  # fmt: skip
    refused = CliRunner().invoke(cli, args)
    assert refused.exit_code != 0
    assert "--outside-id CODE" in " ".join((str(refused.exception) + refused.output).split())
    done = CliRunner().invoke(cli, [*args, "--outside-id", "SEA"])
    assert done.exit_code == 0, done.output
    assert "SEA" in load_project(tmp_path / "cfg" / "lake-pond.yaml").lake.subbasins.outside_ids


def _foreign_codes(small_sample, tmp_path):
    """The sample's sub-basins under a stranger's names and codes: lake '9999', leaving the area 'SEA'."""
    subs = gpd.read_file(small_sample / "geometry" / "subbasins.gpkg")
    subs = subs.rename(columns={"subbasin_id": "BASIN", "downstream_id": "DOWN"})
    subs["DOWN"] = subs["DOWN"].replace({"OUTSIDE": "SEA", "LAKE": "9999"})
    subs.to_file(tmp_path / "basins.gpkg")
    args = ["init", "pond", "--lake", str(small_sample / "geometry" / "lake.gpkg"), "--subbasins",
            str(tmp_path / "basins.gpkg"), "--sources", str(small_sample / "config" / "sources.yaml"),
            "--out", str(tmp_path / "cfg")]  # fmt: skip
    return subs, args


def test_init_with_a_lake_code_of_its_own(small_sample, tmp_path) -> None:
    """A layer whose codes differ from the sample's: refused with each code and the option declaring it, then
    accepted with --lake-id and --outside-id; the config keeps the lake's code as a string."""
    from lakefeed.cli._app import app as cli

    subs, args = _foreign_codes(small_sample, tmp_path)
    refused = CliRunner().invoke(cli, args)
    assert refused.exit_code != 0
    text = " ".join((str(refused.exception) + refused.output).split())
    lake_line = "'9999' from 3 sub-basin(s) (SB01, SB02, SB03; touching the lake): if it means 'drains into the lake'"
    assert f"{lake_line}: --lake-id 9999" in text
    assert "'SEA' from 1 sub-basin(s) (SB13; away from the lake): if it means 'drains out of the area': " in text
    assert "--outside-id SEA. Declare the lake's code with --lake-id CODE" in text
    wrong = CliRunner().invoke(cli, [*args, "--lake-id", "LAKE", "--outside-id", "SEA"])  # the sample's code
    text = " ".join((str(wrong.exception) + wrong.output).split())
    assert wrong.exit_code != 0 and "--lake-id 9999" in text and "'SEA'" in text
    done = CliRunner().invoke(cli, [*args, "--lake-id", "9999", "--outside-id", "SEA"])
    assert done.exit_code == 0, done.output
    sb = load_project(tmp_path / "cfg" / "lake-pond.yaml").lake.subbasins
    assert sb.lake_id == "9999" and "SEA" in sb.outside_ids
    direct = sorted(subs.loc[subs["DOWN"] == "9999", "BASIN"])
    assert direct == ["SB01", "SB02", "SB03"]  # the sample's direct inflows (sample scenario README)
    assert ", ".join(direct) + " (rule: lake_id)" in " ".join(done.output.split())
    found = CliRunner().invoke(cli, [*args, "--outside-id", "SEA", "--out", str(tmp_path / "cfg2")])
    assert found.exit_code == 0, found.output  # the shore's sub-basins name the lake's code: written out
    assert load_project(tmp_path / "cfg2" / "lake-pond.yaml").lake.subbasins.lake_id == "9999"
