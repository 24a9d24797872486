"""Benchmark: windowed AOI extraction (lakefeed) vs whole-scene read + rioxarray clip, same scenes.

Writes N tiled, deflate-compressed GeoTIFF scenes (value float32 + quality uint8) of SIZE x SIZE
pixels to ``benchmarks/_data/scenes/`` (gitignored; reused when present) and three small AOIs, then
runs each route in its own subprocess (so that peak memory, VmHWM, belongs to one route):

- ``lakefeed``: :class:`lakefeed.sources.scenes.SceneReader` (one windowed read per band for the union
  of the AOIs) + :func:`lakefeed.extract.scene_stats.aoi_statistics`;
- ``rioxarray``: ``open_rasterio(masked=True).squeeze()`` then ``.rio.clip`` per AOI (reads the whole
  scene, the general-purpose route) and the same statistics with numpy.

Both routes use the pixel-centre rule; their medians are compared. Never part of the test suite.

Usage: ``python benchmarks/scenes.py [--n 200] [--size 2000]``
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).parent
RES = 20.0
X0, Y0 = 500_000.0, 5_300_000.0


def make_data(n: int, size: int) -> Path:
    import geopandas as gpd
    import rasterio
    import shapely
    from affine import Affine

    folder = HERE / "_data" / f"scenes_{size}"
    if len(list(folder.glob("*_chla.tif"))) >= n:
        return folder
    folder.mkdir(parents=True, exist_ok=True)
    profile = dict(
        driver="GTiff",
        width=size,
        height=size,
        count=1,
        crs="EPSG:32632",
        tiled=True,
        blockxsize=256,
        blockysize=256,
        compress="deflate",
        transform=Affine(RES, 0, X0, 0, -RES, Y0),
    )
    rng = np.random.default_rng(0)
    templates = []
    for k in range(4):  # four distinct scenes, copied to n files
        yy, xx = np.mgrid[0:size, 0:size]
        smooth = 5 + 3 * np.sin(xx / (50 + 10 * k)) * np.cos(yy / 70)
        value = (smooth * rng.lognormal(0, 0.2, (size, size))).astype("float32")
        quality = (rng.random((size, size)) < 0.1).astype("uint8")
        v, q = folder / f"t{k}_chla.tif", folder / f"t{k}_quality.tif"
        with rasterio.open(v, "w", dtype="float32", nodata=-9999.0, predictor=3, **profile) as dst:
            dst.write(value, 1)
        with rasterio.open(q, "w", dtype="uint8", predictor=2, **profile) as dst:
            dst.write(quality, 1)
        templates.append((v, q))
    for i in range(n):
        v, q = templates[i % 4]
        shutil.copyfile(v, folder / f"s{i:04d}_chla.tif")
        shutil.copyfile(q, folder / f"s{i:04d}_quality.tif")
    cx, cy = X0 + RES * size * 0.45, Y0 - RES * size * 0.55  # near the middle of the scene
    aois = [
        shapely.Point(cx, cy).buffer(250),
        shapely.box(cx + 600, cy - 200, cx + 1000, cy + 300),
        shapely.Polygon([(cx - 900, cy + 500), (cx - 300, cy + 800), (cx - 500, cy + 1200)]),
    ]
    gpd.GeoDataFrame({"aoi_id": ["intake", "bay", "open"]}, geometry=aois, crs=32632).to_file(folder / "aois.gpkg")
    return folder


def _stats(v: np.ndarray) -> float:
    return float(np.median(v)) if v.size else float("nan")


def run_lakefeed(folder: Path, n: int) -> dict:
    import geopandas as gpd

    from lakefeed.extract.scene_stats import aoi_statistics
    from lakefeed.sources.scenes import SceneReader

    aois = gpd.read_file(folder / "aois.gpkg")
    reader = SceneReader(aois, id_field="aoi_id")
    medians, pixels = [], 0
    t0 = time.perf_counter()
    for i in range(n):
        v, q = folder / f"s{i:04d}_chla.tif", folder / f"s{i:04d}_quality.tif"
        win = reader.read(f"s{i}", str(v), str(q), None, shore_buffer_m=0)
        pixels = win.pixels_read
        for aoi in ("intake", "bay", "open"):
            px = win.pixels[aoi]
            medians.append(aoi_statistics(px.values, px.quality, nodata=win.nodata)["median"])
    return {"seconds": time.perf_counter() - t0, "medians": medians, "pixels_read_per_band": pixels}


def run_rioxarray(folder: Path, n: int) -> dict:
    import geopandas as gpd
    import rioxarray

    aois = gpd.read_file(folder / "aois.gpkg")
    medians = []
    t0 = time.perf_counter()
    for i in range(n):
        v = rioxarray.open_rasterio(folder / f"s{i:04d}_chla.tif", masked=True).squeeze("band", drop=True)
        q = rioxarray.open_rasterio(folder / f"s{i:04d}_quality.tif").squeeze("band", drop=True)
        for geom in aois.geometry:
            cv = v.rio.clip([geom], aois.crs, all_touched=False, drop=True)
            cq = q.rio.clip([geom], aois.crs, all_touched=False, drop=True)
            vals, flags = cv.values, cq.values
            ok = np.isfinite(vals) & (flags == 0) & (vals >= 0.01) & (vals <= 1000)
            medians.append(_stats(vals[ok]))
    return {"seconds": time.perf_counter() - t0, "medians": medians, "pixels_read_per_band": int(v.size)}


def _peak_rss_mib() -> float:
    """Peak resident memory of this process (VmHWM; ru_maxrss can carry the parent's peak over exec)."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _warm(folder: Path) -> None:
    """Read every scene file once (in 8 MiB chunks) so both routes start from the same page cache."""
    for f in sorted(folder.glob("s*.tif")):
        with f.open("rb") as fh:
            while fh.read(8 << 20):
                pass


def _child(route: str, folder: Path, n: int) -> None:
    out = run_lakefeed(folder, n) if route == "lakefeed" else run_rioxarray(folder, n)
    out["peak_rss_mib"] = _peak_rss_mib()
    print(json.dumps(out))


def _spawn(route: str, folder: Path, n: int) -> dict:
    cmd = [sys.executable, __file__, "--child", route, "--folder", str(folder), "--n", str(n)]
    res = subprocess.run(cmd, capture_output=True, text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--n", type=int, default=200)
    p.add_argument("--size", type=int, default=2000)
    p.add_argument(
        "--big", type=int, default=0, help="also run lakefeed on min(n, 50) scenes of this size (memory check)"
    )
    p.add_argument("--child", choices=["lakefeed", "rioxarray"])
    p.add_argument("--folder", type=Path)
    a = p.parse_args()
    if a.child:
        _child(a.child, a.folder, a.n)
        return
    t0 = time.perf_counter()
    folder = make_data(a.n, a.size)
    print(f"data: {a.n} scenes of {a.size}x{a.size} px in {folder} ({time.perf_counter() - t0:.0f} s to prepare)")
    _warm(folder)
    lf = _spawn("lakefeed", folder, a.n)
    rx = _spawn("rioxarray", folder, a.n)
    agree = np.allclose(lf["medians"], rx["medians"], rtol=1e-6, equal_nan=True)
    print(f"{'route':<12}{'scenes/s':>10}{'s total':>10}{'peak RSS MiB':>14}{'px read/band':>14}")
    for name, r in (("lakefeed", lf), ("rioxarray", rx)):
        print(
            f"{name:<12}{a.n / r['seconds']:>10.1f}{r['seconds']:>10.2f}{r['peak_rss_mib']:>14.0f}"
            f"{r['pixels_read_per_band']:>14}"
        )
    print(f"speed ratio lakefeed / rioxarray: {rx['seconds'] / lf['seconds']:.1f}x; medians agree: {agree}")
    if a.big:
        nb = min(a.n, 50)
        big = make_data(nb, a.big)
        _warm(big)
        lb = _spawn("lakefeed", big, nb)
        print(
            f"lakefeed on {nb} scenes of {a.big}x{a.big} px: {nb / lb['seconds']:.1f} scenes/s, "
            f"peak RSS {lb['peak_rss_mib']:.0f} MiB "
            f"(vs {lf['peak_rss_mib']:.0f} MiB at {a.size} px)"
        )


if __name__ == "__main__":
    main()
