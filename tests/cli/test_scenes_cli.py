"""`lakefeed scenes`: a STAC folder and AOIs apart from any project, checked against rasterstats."""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
import shapely
from scene_factory import TARGET_OBS_COLUMNS, write_tif
from typer.testing import CliRunner

from lakefeed.cli import app
from lakefeed.exceptions import SourceError

X0, Y0 = 400_000.0, 5_100_000.0
OBS_COLUMNS = TARGET_OBS_COLUMNS


def _tif(path: Path, data: np.ndarray, nodata: float | None) -> str:
    return str(write_tif(path, data, res=10.0, crs="EPSG:32633", nodata=nodata, origin=(X0, Y0)))


def _setup(tmp: Path) -> tuple[Path, Path]:
    rng = np.random.default_rng(5)
    items = tmp / "items"
    items.mkdir()
    for i, sensor in enumerate(["reed", "reed", "moth"]):
        v = rng.lognormal(2.0, 0.3, (200, 200)).astype("float32")
        v[:20] = -1.0  # nodata strip at the top
        q = np.zeros((200, 200), "uint8")
        q[100:, :] = 2 if i == 1 else 0  # scene 1: south half flagged
        assets = {
            "flags": {"href": _tif(tmp / f"s{i}_q.tif", q, None), "roles": ["quality"]},
            "chl": {"href": _tif(tmp / f"s{i}_v.tif", v, -1.0), "roles": ["data"]},
        }
        item = {
            "type": "Feature",
            "stac_version": "1.0.0",
            "id": f"s{i}",
            "links": [],
            "assets": assets,
            "properties": {"datetime": f"2024-07-0{i + 1}T23:30:00Z", "platform": sensor},
            "geometry": None,
        }
        (items / f"s{i}.json").write_text(json.dumps(item))
    aois = gpd.GeoDataFrame(
        {"site": ["north", "south"]},
        geometry=[
            shapely.box(X0 + 300, Y0 - 700, X0 + 1100, Y0 - 100),
            shapely.box(X0 + 400, Y0 - 1900, X0 + 1500, Y0 - 1100),
        ],
        crs=32633,
    ).to_crs(4326)  # AOIs in another CRS than the scenes
    aois.to_file(tmp / "aois.gpkg")
    return items, tmp / "aois.gpkg"


def test_scenes_command_matches_rasterstats(tmp_path: Path) -> None:
    """Reference: rasterstats zonal_stats (all_touched=False, the same pixel-centre rule) on the same
    GeoTIFF and AOI (reprojected to the scene CRS), with --shore-buffer 0 and no quality band."""
    from rasterstats import zonal_stats

    items, aois = _setup(tmp_path)
    out = tmp_path / "obs.parquet"
    res = CliRunner().invoke(
        app,
        [
            "scenes",
            str(items),
            "--aois",
            str(aois),
            "--id-field",
            "site",
            "--out",
            str(out),
            "--shore-buffer",
            "0",
            "--timezone",
            "Europe/Vienna",
            "--quality-asset",
            "flags",
        ],
    )
    assert res.exit_code == 0, res.output
    assert "reading scenes" in res.output and "accepted" in res.output
    obs = pd.read_parquet(out)
    assert list(obs.columns) == OBS_COLUMNS
    units = {f.name: (f.metadata or {}).get(b"unit", b"").decode() for f in pq.read_schema(out)}
    assert units["median"] == "mg m-3" and units["valid_fraction"] == "1"
    assert len(obs) == 6 and set(obs["sensor"]) == {"reed", "moth"}
    assert str(obs.loc[obs["scene_id"] == "s0", "date"].iloc[0]) == "2024-07-02"  # local date (UTC+2)
    poly = gpd.read_file(aois).to_crs(32633).set_index("site").geometry
    s1 = obs[(obs["scene_id"] == "s1")].set_index("aoi")
    # quality: any non-zero flag is bad without a sensor config; s1's south half is flagged
    assert not s1.loc["south", "accepted"] and s1.loc["south", "n_valid"] == 0
    row = obs[(obs["scene_id"] == "s0") & (obs["aoi"] == "north")].iloc[0]
    ref = zonal_stats(
        [poly["north"]],
        str(tmp_path / "s0_v.tif"),
        all_touched=False,
        stats="count mean median std percentile_10 percentile_90",
    )[0]
    assert row["n_valid"] == ref["count"]
    assert row["median"] == pytest.approx(ref["median"], rel=1e-6)
    assert row["mean"] == pytest.approx(ref["mean"], rel=1e-6)
    assert row["std"] == pytest.approx(ref["std"], rel=1e-5)
    assert row["p10"] == pytest.approx(ref["percentile_10"], rel=1e-6)
    assert row["p90"] == pytest.approx(ref["percentile_90"], rel=1e-6)
    # north AOI rows 10..69: rows 10..19 are nodata -> valid fraction 50/60 (pixel centres)
    assert row["valid_fraction"] == pytest.approx(50 / 60)


def test_scenes_command_options(tmp_path: Path) -> None:
    items, aois = _setup(tmp_path)
    out = tmp_path / "o.parquet"
    args = ["scenes", str(items), "--aois", str(aois), "--id-field", "site", "--out", str(out)]
    assert CliRunner().invoke(app, [*args, "--shore-buffer", "0", "--min-valid-fraction", "0.9"]).exit_code == 0
    obs = pd.read_parquet(out).set_index(["scene_id", "aoi"])
    assert not obs.loc[("s0", "north"), "accepted"]  # 50 of 60 rows valid: 0.833 < 0.9
    assert obs.loc[("s0", "north"), "reason"] == "valid fraction 0.833 < 0.9"
    assert CliRunner().invoke(app, [*args, "--shore-buffer", "100", "--min-valid-fraction", "0.9"]).exit_code == 0
    obs = pd.read_parquet(out).set_index(["scene_id", "aoi"])
    # without --lake the buffer applies inside the AOI: 10 px off each side of 80 x 60 px -> 60 x 40, none nodata
    assert obs.loc[("s0", "north"), "n_valid"] == 60 * 40 and obs.loc[("s0", "north"), "accepted"]
    res = CliRunner().invoke(app, [*args, "--asset", "flags"])  # the flag band read as values (0 or 2)
    assert res.exit_code == 0
    flags = pd.read_parquet(out)
    assert flags.loc[flags["accepted"], "median"].tolist() == [2.0]  # zeros are below the valid range


def test_scenes_command_bad_input(tmp_path: Path) -> None:
    items, aois = _setup(tmp_path)
    res = CliRunner().invoke(
        app,
        [
            "scenes",
            str(tmp_path / "none"),
            "--aois",
            str(aois),
            "--id-field",
            "site",
            "--out",
            str(tmp_path / "o.parquet"),
        ],
    )
    assert isinstance(res.exception, SourceError) and "not found" in str(res.exception)
    res = CliRunner().invoke(
        app, ["scenes", str(items), "--aois", str(aois), "--id-field", "nope", "--out", str(tmp_path / "o.parquet")]
    )
    assert "has no field 'nope'" in str(res.exception)
    (tmp_path / "s2_v.tif").write_bytes(b"truncated")
    _tif(tmp_path / "s1_v.tif", np.full((200, 200), -1.0, dtype="float32"), -1.0)  # all nodata
    out = tmp_path / "o.parquet"
    res = CliRunner().invoke(app, ["scenes", str(items), "--aois", str(aois), "--id-field", "site", "--out", str(out)])
    assert res.exit_code == 0
    obs = pd.read_parquet(out)
    assert obs.loc[obs["scene_id"] == "s2", "reason"].str.contains("unreadable or corrupt").all()
    assert obs.loc[obs["scene_id"] == "s1", "reason"].str.startswith("no valid pixel").all()
    assert obs.loc[obs["scene_id"] == "s0", "accepted"].all()
