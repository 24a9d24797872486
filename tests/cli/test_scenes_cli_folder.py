"""`lakefeed scenes` on a plain GeoTIFF folder (--filename-pattern), with --bad-quality-bits, and on an
integer-coded scene; outputs compared with rasterstats (centre rule, ``all_touched=False``) on the same
decoded pixels. Regression tests for gaps found in review."""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from affine import Affine
from scene_factory import write_tif
from typer.testing import CliRunner

from lakefeed.cli import app
from lakefeed.exceptions import ConfigError

X0, Y0 = 300_000.0, 5_000_000.0
TRANSFORM = Affine(20.0, 0, X0, 0, -20.0, Y0)
PATTERN = r"(?P<sensor>[a-z]+)_(?P<date>\d{8})T(?P<time>\d{6})_(?P<asset>[a-z]+)\.tif"


def _tif(path: Path, data: np.ndarray, nodata: float | None, scale: float | None = None) -> Path:
    return write_tif(path, data, res=20.0, crs="EPSG:32631", nodata=nodata, origin=(X0, Y0), scale=scale)


def _setup(tmp: Path) -> tuple[Path, Path, dict[str, np.ndarray]]:
    rng = np.random.default_rng(9)
    folder = tmp / "tifs"
    folder.mkdir()
    decoded = {}
    for sensor, stamp in (("reed", "20240701T233000"), ("moth", "20240702T100000")):
        v = rng.lognormal(2.0, 0.4, (80, 80)).astype("float32")
        v[30:34, :] = -9999.0
        q = np.where(rng.random((80, 80)) < 0.2, 4, 0).astype("uint8")  # bit 2
        q[rng.random((80, 80)) < 0.1] |= 1  # bit 0
        _tif(folder / f"{sensor}_{stamp}_chl.tif", v, -9999.0)
        _tif(folder / f"{sensor}_{stamp}_quality.tif", q, None)
        decoded[sensor] = (np.where(v == -9999.0, np.nan, v), q)
    (folder / "notes.txt").write_text("not a scene")
    aois = gpd.GeoDataFrame(
        {"site": ["east", "west"]},
        geometry=[shapely.Point(X0 + 1100, Y0 - 700).buffer(300), shapely.box(X0 + 100, Y0 - 1500, X0 + 700, Y0 - 300)],
        crs=32631,
    ).to_crs(3035)
    aois.to_file(tmp / "aois.gpkg")
    return folder, tmp / "aois.gpkg", decoded


def _reference(values: np.ndarray, geom: shapely.Geometry) -> dict:
    """rasterstats with the centre rule on an array whose invalid pixels are set to its nodata."""
    from rasterstats import zonal_stats

    with np.errstate(invalid="ignore"):
        arr = np.where(np.isfinite(values) & (values >= 0.01) & (values <= 1000), values, -1.0)
    return zonal_stats(
        geom,
        arr,
        affine=TRANSFORM,
        nodata=-1.0,
        all_touched=False,
        stats="count nodata median mean std percentile_10 percentile_90",
    )[0]


@pytest.mark.filterwarnings("ignore::PendingDeprecationWarning")
def test_geotiff_folder_with_pattern_and_bad_bits_matches_rasterstats(tmp_path: Path) -> None:
    folder, aois, decoded = _setup(tmp_path)
    out = tmp_path / "o.parquet"
    args = ["scenes", str(folder), "--aois", str(aois), "--id-field", "site", "--out", str(out), "--shore-buffer", "0"]
    res = CliRunner().invoke(
        app, [*args, "--filename-pattern", PATTERN, "--bad-quality-bits", "0", "--timezone", "Europe/Berlin"]
    )
    assert res.exit_code == 0, res.output
    obs = pd.read_parquet(out).set_index(["scene_id", "aoi"])
    assert sorted(obs.index.get_level_values(0).unique()) == ["moth_20240702_100000", "reed_20240701_233000"]
    assert str(obs.loc[("reed_20240701_233000", "east"), "date"]) == "2024-07-02"  # 23:30 UTC = 01:30 CEST
    layer = gpd.read_file(aois).to_crs(32631).set_index("site")
    for sensor, sid in (("reed", "reed_20240701_233000"), ("moth", "moth_20240702_100000")):
        v, q = decoded[sensor]
        values = np.where((q & 1) == 0, v, np.nan)  # only bit 0 is bad: glint (bit 2) pixels stay
        for aoi, geom in layer.geometry.items():
            ref = _reference(values, geom)
            row = obs.loc[(sid, aoi)]
            assert row["n_valid"] == ref["count"]
            assert row["valid_fraction"] == pytest.approx(ref["count"] / (ref["count"] + ref["nodata"]))
            for ours, theirs in (
                ("median", "median"),
                ("mean", "mean"),
                ("std", "std"),
                ("p10", "percentile_10"),
                ("p90", "percentile_90"),
            ):
                assert row[ours] == pytest.approx(ref[theirs], rel=1e-6)
    # without --bad-quality-bits any non-zero flag is bad: fewer valid pixels
    assert CliRunner().invoke(app, [*args, "--filename-pattern", PATTERN]).exit_code == 0
    strict = pd.read_parquet(out).set_index(["scene_id", "aoi"])
    assert (strict["n_valid"] < obs["n_valid"]).all()


def test_folder_without_pattern_says_so_and_bad_options(tmp_path: Path) -> None:
    folder, aois, _ = _setup(tmp_path)
    args = ["scenes", str(folder), "--aois", str(aois), "--id-field", "site", "--out", str(tmp_path / "o.parquet")]
    res = CliRunner().invoke(app, args)
    assert "filename_pattern" in str(res.exception)
    res = CliRunner().invoke(app, [*args, "--filename-pattern", "(?P<date>"])
    assert isinstance(res.exception, ConfigError) and "not a regular expression" in str(res.exception)
    res = CliRunner().invoke(app, [*args, "--filename-pattern", r"(?P<date>\d{8})\.tif"])  # once an IndexError
    assert isinstance(res.exception, ConfigError) and "lacks the named group(s) ['sensor']" in str(res.exception)
    res = CliRunner().invoke(app, [*args, "--filename-pattern", PATTERN, "--bad-quality-bits", "0,x"])
    assert isinstance(res.exception, ConfigError)


@pytest.mark.filterwarnings("ignore::PendingDeprecationWarning")
def test_integer_coded_scene_is_decoded(tmp_path: Path) -> None:
    """An int16 scene with a GeoTIFF scale of 0.01: statistics of the decoded values (rasterstats on them)."""
    rng = np.random.default_rng(2)
    raw = rng.integers(100, 4000, (80, 80)).astype("int16")
    raw[:5] = -1
    folder = tmp_path / "tifs"
    folder.mkdir()
    _tif(folder / "reed_20240701T100000_chl.tif", raw, -1, scale=0.01)
    aois = gpd.GeoDataFrame({"site": ["a"]}, geometry=[shapely.box(X0 + 40, Y0 - 400, X0 + 800, Y0 - 20)], crs=32631)
    aois.to_file(tmp_path / "aois.gpkg")
    out = tmp_path / "o.parquet"
    res = CliRunner().invoke(
        app,
        [
            "scenes",
            str(folder),
            "--aois",
            str(tmp_path / "aois.gpkg"),
            "--id-field",
            "site",
            "--out",
            str(out),
            "--shore-buffer",
            "0",
            "--filename-pattern",
            PATTERN,
        ],
    )
    assert res.exit_code == 0, res.output
    row = pd.read_parquet(out).iloc[0]
    ref = _reference(np.where(raw == -1, np.nan, raw * 0.01), aois.geometry.iloc[0])
    assert row["median"] == pytest.approx(ref["median"]) and row["mean"] == pytest.approx(ref["mean"])
    assert row["n_valid"] == ref["count"] and 1.0 <= row["median"] <= 40.0
