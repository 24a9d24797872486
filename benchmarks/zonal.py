"""Zonal means of a long hourly grid: lakefeed vs exactextract vs xagg, side by side in one run.

Usage::

    .venv/bin/python benchmarks/zonal.py              # generate data (once) and run everything
    .venv/bin/python benchmarks/zonal.py --repeat 3 --years 2

Data (generated once into ``benchmarks/_data``, gitignored): a 120 x 120 grid at 0.1 degree,
hourly for ``--years`` years in monthly CF NetCDF files, int16-packed with scale/offset and
zlib-compressed in (24, 60, 60) chunks as reanalysis downloads are, with a NaN (fill) region;
25 catchment-like polygons from smaller than a cell to several hundred cells.

Every tool runs in its own process (``--child TOOL``); the parent measures whole-process wall
time (imports included) and the child reports its peak resident memory (``ru_maxrss``, the
larger of itself and its largest worker process), in-process time and CPU time (user + system,
its worker processes included: on a shared machine the CPU time shows the work done when the
wall time mostly shows the neighbours). ``floor`` reads only the
needed cells (the window holding every zone) single-threaded with netCDF4 and does nothing else
(``floor`` decodes to float as netCDF4 does by default; ``floor-raw`` keeps the packed integers:
bare I/O and decompression). ``lakefeed`` reads its time chunks in forked worker processes
(``lakefeed.stages.weather.compute_by_time``, as ``lakefeed zonal`` does); it reads the NetCDF-4
chunks as stored and inflates them with libdeflate when the ``deflate`` package is installed
(``lakefeed.sources._h5grid``), so it can beat the netCDF4 floors.
``lakefeed-cached`` reuses the weights cached by ``lakefeed``. ``lakefeed-1y`` runs on the first
half of the record (memory must not grow with the record length). Not part of the test suite.
"""

from __future__ import annotations

import argparse
import json
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
DATA = HERE / "_data"
GRID = DATA / "grid"
ZONES = DATA / "zones.geojson"
CACHE = DATA / "weights_cache"
N = 120
RES = 0.1
LAT0, LON0 = 45.0, 5.0


def generate(years: int, seed: int = 1) -> list[Path]:
    """Write monthly packed/compressed NetCDF files and the zone polygons (idempotent)."""
    import geopandas as gpd
    import netCDF4
    import pandas as pd
    import shapely

    GRID.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    lat = LAT0 + RES / 2 + RES * np.arange(N)[::-1]  # descending, as reanalysis files are
    lon = LON0 + RES / 2 + RES * np.arange(N)
    yy, xx = np.meshgrid(lat, lon, indexing="ij")
    base = 285 - 0.6 * (yy - 51) + 2 * np.sin(xx / 2)
    mask = (yy - 49) ** 2 + (xx - 15.5) ** 2 < 2.0  # a "sea" of fill values
    files = []
    for month in pd.period_range(f"{2023}-01", periods=12 * years, freq="M"):
        path = GRID / f"t2m_{month}.nc"
        files.append(path)
        if path.exists():
            continue
        t = pd.date_range(month.start_time, month.end_time.floor("h"), freq="h")
        hours = (t - pd.Timestamp("2023-01-01")) / pd.Timedelta("1h")
        season = -8 * np.cos(2 * np.pi * np.asarray(hours) / 8766)
        diurnal = 4 * np.sin(2 * np.pi * (np.asarray(hours) % 24) / 24)
        vals = base[None] + (season + diurnal)[:, None, None] + rng.normal(0, 0.3, (t.size, N, N))
        vals[:, mask] = np.nan
        tmp = path.with_suffix(".tmp")
        with netCDF4.Dataset(tmp, "w") as nc:
            nc.Conventions = "CF-1.8"
            nc.createDimension("time", None)
            nc.createDimension("latitude", N)
            nc.createDimension("longitude", N)
            v = nc.createVariable("time", "i4", ("time",))
            v.units, v.standard_name, v.calendar = "hours since 1900-01-01 00:00:00", "time", "gregorian"
            v[:] = netCDF4.date2num(t.to_pydatetime(), v.units, v.calendar)
            v = nc.createVariable("latitude", "f8", ("latitude",))
            v.units, v.standard_name = "degrees_north", "latitude"
            v[:] = lat
            v = nc.createVariable("longitude", "f8", ("longitude",))
            v.units, v.standard_name = "degrees_east", "longitude"
            v[:] = lon
            v = nc.createVariable(
                "t2m",
                "i2",
                ("time", "latitude", "longitude"),
                zlib=True,
                complevel=1,
                shuffle=True,
                chunksizes=(24, 60, 60),
                fill_value=np.int16(-32767),
            )
            v.units, v.standard_name = "K", "air_temperature"
            v.scale_factor, v.add_offset = np.float64(0.002), np.float64(280.0)
            v.set_auto_maskandscale(True)
            v[:] = np.ma.masked_invalid(vals)
        tmp.replace(path)
    if not ZONES.exists():
        polys = []
        radii = np.r_[0.02, 0.04, 0.06, np.geomspace(0.1, 1.2, 22)]
        for i, r in enumerate(radii):
            cy, cx = rng.uniform(LAT0 + 1.4, LAT0 + N * RES - 1.4), rng.uniform(LON0 + 1.4, LON0 + N * RES - 1.4)
            ang = np.sort(rng.uniform(0, 2 * np.pi, 24))
            rad = r * rng.uniform(0.6, 1.0, ang.size)
            p = shapely.Polygon(np.c_[cx + rad * np.cos(ang), cy + rad * np.sin(ang)]).buffer(0)
            polys.append((f"c{i:02d}", p))
        gpd.GeoDataFrame({"zone": [n for n, _ in polys]}, geometry=[p for _, p in polys], crs=4326).to_file(ZONES)
    return files


def _zones():
    import geopandas as gpd

    return gpd.read_file(ZONES)


def child(tool: str, files: list[Path]) -> dict:
    t0 = time.perf_counter()
    if tool in ("floor", "floor-raw"):
        import netCDF4
        import shapely

        t_imp = time.perf_counter()
        gdf = _zones()
        xmin, ymin, xmax, ymax = shapely.total_bounds(gdf.geometry.values)
        with netCDF4.Dataset(files[0]) as nc:
            lat, lon = nc["latitude"][:], nc["longitude"][:]
        rows = np.nonzero((lat + RES / 2 > ymin) & (lat - RES / 2 < ymax))[0]
        cols = np.nonzero((lon + RES / 2 > xmin) & (lon - RES / 2 < xmax))[0]
        total = 0.0
        for f in files:
            with netCDF4.Dataset(f) as nc:
                nc["t2m"].set_auto_maskandscale(tool == "floor")
                a = nc["t2m"][:, rows[0] : rows[-1] + 1, cols[0] : cols[-1] + 1]
                total += float(np.sum(a[:, 0, 0]))
        out = {"cells": int(rows.size * cols.size)}
    elif tool.startswith("lakefeed"):
        from lakefeed.extract.zonal import zonal_mean
        from lakefeed.sources.grids import open_grid
        from lakefeed.stages.weather import compute_by_time, get_weights

        t_imp = time.perf_counter()
        grid = open_grid(files)
        zones = _zones()
        t_w = time.perf_counter()
        w, cached = get_weights(zones, grid, cache_dir=CACHE)
        t1 = time.perf_counter()
        # as `lakefeed zonal` does: one task per time chunk, in forked worker processes where safe
        (res,) = compute_by_time([zonal_mean(grid.dataset["t2m"], w)])
        out = {
            "cached": cached,
            "weights_s": t1 - t0,
            "weights_only_s": t1 - t_w,
            "sum": float(np.nansum(res["mean"].values)),
            "first": res["mean"].values[0].tolist(),
        }
    elif tool == "exactextract":
        # exactextract's fastest route here: read each file whole (rasterio), hand it the bands as
        # in-memory sources. Reading band windows through rasterio per feature (its default) took
        # minutes per file; strategy="raster-sequential" on the file ~6 s per file.
        import pyproj
        import rasterio
        from exactextract import exact_extract
        from exactextract.raster import NumPyRasterSource

        t_imp = time.perf_counter()
        gdf = _zones()
        wkt = pyproj.CRS("EPSG:4326").to_wkt()
        frames = []
        for f in files:
            with rasterio.open(f"netcdf:{f}:t2m") as src:
                raw = src.read()
                scale, offset, nodata = src.scales[0], src.offsets[0], src.nodata
                left, bottom, right, top = src.bounds
            vals = np.where(raw == nodata, np.nan, raw * scale + offset)
            if top < bottom:  # GDAL reports south-up netCDF this way; exactextract wants north-up
                vals, top, bottom = vals[:, ::-1], bottom, top
            bands = [
                NumPyRasterSource(vals[i], left, bottom, right, top, srs_wkt=wkt, name=f"b{i}")
                for i in range(vals.shape[0])
            ]
            frames.append(exact_extract(bands, gdf, "mean(coverage_weight=area_spherical_m2)", output="pandas"))
        out = {"first": frames[0].iloc[:, 0].tolist()}
    elif tool == "xagg":
        import xagg as xa
        import xarray as xr

        t_imp = time.perf_counter()
        # one dask chunk per file, loaded: xagg was ~2.5x slower on the lazily chunked record
        ds = xr.open_mfdataset([str(f) for f in files], combine="by_coords", chunks={"time": -1})
        ds = ds.rename({"latitude": "lat", "longitude": "lon"}).load()
        gdf = _zones()
        # xagg's default implementation: its "dot_product" option asked for 23.9 GiB here (a dense
        # zones x pixels x time product) and failed on this 24 GiB machine
        with xa.set_options(silent=True):
            wm = xa.pixel_overlaps(ds, gdf)
            agg = xa.aggregate(ds, wm)
        df = agg.to_dataframe()
        out = {"rows": len(df)}
    else:
        raise SystemExit(f"unknown tool {tool}")
    out["inner_s"] = time.perf_counter() - t0
    out["work_s"] = time.perf_counter() - t_imp  # after imports
    # the larger of this process and its largest worker process (lakefeed forks workers)
    usage = [resource.getrusage(who) for who in (resource.RUSAGE_SELF, resource.RUSAGE_CHILDREN)]
    out["maxrss_mb"] = max(u.ru_maxrss for u in usage) / 1024
    out["cpu_s"] = sum(u.ru_utime + u.ru_stime for u in usage)  # this process and its workers
    return out


def run(tool: str, files: list[Path], timeout: float) -> dict:
    cmd = [sys.executable, __file__, "--child", tool, "--files", *map(str, files)]
    t0 = time.perf_counter()
    try:
        p = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, check=False)
    except subprocess.TimeoutExpired:
        return {"error": f"did not finish within {timeout:.0f} s"}
    wall = time.perf_counter() - t0
    if p.returncode != 0:
        return {"error": p.stderr.strip().splitlines()[-1] if p.stderr.strip() else f"exit {p.returncode}"}
    res = json.loads(p.stdout.strip().splitlines()[-1])
    res["wall_s"] = wall
    return res


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--years", type=int, default=2)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--repeat-slow", type=int, default=1, help="repeats of exactextract and xagg")
    ap.add_argument("--timeout", type=float, default=600)
    ap.add_argument("--tools", default="floor,floor-raw,lakefeed,lakefeed-cached,lakefeed-1y,exactextract,xagg")
    ap.add_argument("--child")
    ap.add_argument("--files", nargs="*")
    a = ap.parse_args()
    if a.child:
        print(json.dumps(child(a.child, [Path(f) for f in a.files])))
        return
    files = generate(a.years)
    raw = sum(f.stat().st_size for f in files) / 2**20
    print(f"grid {N}x{N} at {RES} deg, {len(files)} monthly files ({raw:.0f} MiB on disk), 25 zones")
    results: dict[str, list[dict]] = {}
    tools = a.tools.split(",")
    # round robin, so that drifting load on a shared machine affects every tool alike
    for rep in range(max(a.repeat, a.repeat_slow)):
        for tool in tools:
            slow = tool in ("exactextract", "xagg")
            if rep >= (a.repeat_slow if slow else a.repeat) or any("error" in r for r in results.get(tool, [])):
                continue
            fs = files[: len(files) // 2] if tool == "lakefeed-1y" else files
            if tool == "lakefeed":
                for c in CACHE.glob("*.npz"):
                    c.unlink()
            r = run(tool, fs, a.timeout)
            results.setdefault(tool, []).append(r)
            if "error" in r:
                print(f"{tool}: {r['error']}")
    med = {}
    print(f"\n{'tool':16s} {'wall s':>8s} {'inner s':>8s} {'work s':>8s} {'cpu s':>8s} {'peak MiB':>9s}")
    print("(wall: whole process; inner: in-process incl. imports; work: after imports; cpu: user+sys, workers incl.)")
    for tool, rs in results.items():
        ok = [r for r in rs if "error" not in r]
        if not ok:
            continue
        keys = ("wall_s", "inner_s", "work_s", "cpu_s", "maxrss_mb")
        med[tool] = {k: statistics.median(r[k] for r in ok) for k in keys}
        m = med[tool]
        print(
            f"{tool:16s} {m['wall_s']:8.2f} {m['inner_s']:8.2f} {m['work_s']:8.2f} {m['cpu_s']:8.2f} "
            f"{m['maxrss_mb']:9.0f}"
        )
    lf = med.get("lakefeed")
    if lf:
        print("\nratios (other / lakefeed, whole-process wall time; >1 means lakefeed is faster)")
        for tool in ("exactextract", "xagg", "lakefeed-cached"):
            if tool in med:
                print(
                    f"  {tool:16s} {med[tool]['wall_s'] / lf['wall_s']:6.2f}x whole process, "
                    f"{med[tool]['work_s'] / lf['work_s']:6.2f}x after imports"
                )
        for floor in ("floor", "floor-raw"):
            if floor in med:
                print(
                    f"  lakefeed / {floor}: {lf['wall_s'] / med[floor]['wall_s']:.2f} (whole process), "
                    f"{lf['inner_s'] / med[floor]['inner_s']:.2f} (in-process), "
                    f"{lf['work_s'] / med[floor]['work_s']:.2f} (after imports)"
                )
        wc = [r["weights_only_s"] for r in results.get("lakefeed-cached", []) if "weights_only_s" in r]
        wn = [r["weights_only_s"] for r in results.get("lakefeed", []) if not r.get("cached", True)]
        if wc and wn:
            w_new, w_cached = statistics.median(wn), statistics.median(wc)
            print(f"  weights step: computed {w_new:.3f} s, from the cache {w_cached:.3f} s")
        if "lakefeed-1y" in med:
            print(f"  peak memory 1 year / 2 years: {med['lakefeed-1y']['maxrss_mb']:.0f} / {lf['maxrss_mb']:.0f} MiB")
        ee = [r for r in results.get("exactextract", []) if "first" in r]
        lr = [r for r in results.get("lakefeed", []) if "first" in r]
        if ee and lr:
            a_, b_ = np.array(lr[0]["first"], float), np.array(ee[0]["first"], float)
            print(f"  first step, lakefeed vs exactextract: max relative difference {np.nanmax(abs(a_ / b_ - 1)):.1e}")
        record = sum(1 for _ in files) * 730 * N * N * 8 / 2**20
        print(f"  whole record decoded as float64 would need ~{record:.0f} MiB")


if __name__ == "__main__":
    main()
