"""Weather stage for many lakes on one shared grid: grouped (one read per time chunk) vs lake by lake.

Usage::

    .venv/bin/python benchmarks/many_lakes.py --lakes 1 6 24 96 --days 1096     # the full comparison
    .venv/bin/python benchmarks/many_lakes.py --lakes 1 6 --days 365            # a small run

Data (generated once per ``--days`` into ``benchmarks/_data/many_lakes``, gitignored): an invented
hourly grid of ``--size`` x ``--size`` cells at 0.05 degree (default 200 x 200) in monthly CF NetCDF-4
files, int16-packed and zlib-compressed in (24, 100, 100) chunks, with the six weather roles (per-step
precipitation and shortwave amounts); and ``max(--lakes)`` invented lakes of different sizes (radius
0.01 to 0.3 degree, irregular outlines, two areas of interest each) scattered over the grid, half of them
on ``Europe/Berlin`` days and half on UTC days. The N-lake run takes the first N lakes.

Each measurement runs in its own process (``--child MODE N``): ``group`` is
:func:`lakefeed.stages.weather_group.build_weather_many` (the many-lakes entry point the flows call),
``each`` calls :func:`lakefeed.stages.weather.build_weather` lake after lake (what the flows did before).
Every run writes into a fresh store (zone weights computed, not cached). Printed per run: wall time of
the stage call, peak resident memory (``ru_maxrss``), bytes read through read system calls during the
call (``rchar`` of ``/proc/self/io``: grid files, layers and store; the page cache included), and the
ratio of wall time to the 1-lake run of the same mode. The ``group`` tables are compared with the ``each``
tables of the same lakes (equal, exactly). Not part of the test suite.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
DATA = HERE / "_data" / "many_lakes"
RES = 0.05
LAT0, LON0 = 44.0, 4.0
ZONES = {"lake_surface": True, "aois": True, "catchment": False, "subbasins": False}


def _grid_dir(size: int, days: int) -> Path:
    return DATA / f"grid-{size}-{days}d"


def generate_grid(size: int, days: int, seed: int = 3) -> Path:
    """Write the monthly grid files (idempotent); returns their folder."""
    import netCDF4
    import pandas as pd

    folder = _grid_dir(size, days)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    lat = LAT0 + RES / 2 + RES * np.arange(size)[::-1]
    lon = LON0 + RES / 2 + RES * np.arange(size)
    yy, xx = np.meshgrid(lat, lon, indexing="ij")
    base = 285 - 0.6 * (yy - LAT0) + 2 * np.sin(xx)
    stamps = pd.date_range("2021-01-01", periods=24 * days, freq="h")
    roles = {  # name: (standard_name, units, scale, offset)
        "t2m": ("air_temperature", "K", 0.002, 280.0),
        "d2m": ("dew_point_temperature", "K", 0.002, 275.0),
        "u10": ("eastward_wind", "m s-1", 0.001, 0.0),
        "v10": ("northward_wind", "m s-1", 0.001, 0.0),
        "ssrd": ("integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air", "J m-2", 200.0, 6.0e6),
        "tp": ("lwe_thickness_of_precipitation_amount", "m", 1e-6, 0.03),
    }
    for month in pd.period_range(stamps[0], stamps[-1], freq="M"):
        path = folder / f"grid_{month}.nc"
        if path.exists():
            continue
        t = stamps[(stamps >= month.start_time) & (stamps <= month.end_time)]
        hours = np.asarray((t - stamps[0]) / pd.Timedelta("1h"))
        season = (-8 * np.cos(2 * np.pi * hours / 8766))[:, None, None]
        diurnal = np.sin(2 * np.pi * (hours % 24) / 24)[:, None, None]
        noise = rng.normal(0, 0.3, (t.size, size, size)).astype(np.float32)
        sun = np.clip(diurnal, 0, None) * 2.5e6
        fields = {
            "t2m": base + season + 4 * diurnal + noise,
            "d2m": base + season - 5 + noise,
            "u10": 3 * diurnal + noise * 5,
            "v10": 2 - 2 * diurnal + noise * 4,
            "ssrd": sun + 0 * noise,
            "tp": np.clip(noise, 0, None) * 1e-3,
        }
        tmp = path.with_suffix(".tmp")
        with netCDF4.Dataset(tmp, "w") as nc:
            nc.Conventions = "CF-1.8"
            for dim, n in (("time", None), ("latitude", size), ("longitude", size)):
                nc.createDimension(dim, n)
            v = nc.createVariable("time", "i8", ("time",))
            v.units, v.standard_name, v.calendar = "hours since 1970-01-01 00:00:00", "time", "proleptic_gregorian"
            v[:] = netCDF4.date2num(t.to_pydatetime(), v.units, v.calendar)
            for name, values, sn, units in (("latitude", lat, "latitude", "degrees_north"),
                                            ("longitude", lon, "longitude", "degrees_east")):  # fmt: skip
                v = nc.createVariable(name, "f8", (name,))
                v.units, v.standard_name = units, sn
                v[:] = values
            for name, (sn, units, scale, offset) in roles.items():
                v = nc.createVariable(name, "i2", ("time", "latitude", "longitude"), zlib=True, complevel=1,
                                      shuffle=True, chunksizes=(24, 100, 100), fill_value=np.int16(-32767))  # fmt: skip
                v.units, v.standard_name = units, sn
                v.scale_factor, v.add_offset = np.float64(scale), np.float64(offset)
                v.set_auto_maskandscale(True)
                v[:] = fields[name]
        tmp.replace(path)
    return folder


def generate_lakes(n: int, size: int, days: int, seed: int = 5) -> list[Path]:
    """Write ``n`` lake configs (own polygons and AOIs, two time zones) over the grid; returns the config files."""
    import geopandas as gpd
    import shapely
    import yaml

    grid = generate_grid(size, days)
    folder = DATA / f"lakes-{size}-{days}d"
    (folder / "layers").mkdir(parents=True, exist_ok=True)
    sources = {"weather": {"paths": [str(grid / "grid_*.nc")], "time_zone": "UTC",
                           "accumulation": {"ssrd": {"kind": "per_step"}, "tp": {"kind": "per_step"}}}}  # fmt: skip
    (folder / "sources.yaml").write_text(yaml.safe_dump(sources))
    rng = np.random.default_rng(seed)
    span = size * RES
    files = []
    for i in range(n):
        r = float(np.geomspace(0.01, 0.3, 7)[i % 7] * rng.uniform(0.8, 1.2))
        cy = rng.uniform(LAT0 + 0.4, LAT0 + span - 0.4)
        cx = rng.uniform(LON0 + 0.4, LON0 + span - 0.4)
        ang = np.sort(rng.uniform(0, 2 * np.pi, 20))
        rad = r * rng.uniform(0.6, 1.0, ang.size)
        lake = shapely.Polygon(np.c_[cx + rad * np.cos(ang), cy + rad * np.sin(ang)]).buffer(0)
        aois = [shapely.Point(cx + dx * r * 0.3, cy).buffer(r * 0.2) for dx in (-1, 1)]
        lid = f"lake{i:03d}"
        gpd.GeoDataFrame(geometry=[lake], crs=4326).to_file(folder / "layers" / f"{lid}.gpkg")
        gpd.GeoDataFrame({"aoi_id": ["west", "east"]}, geometry=aois, crs=4326).to_file(
            folder / "layers" / f"{lid}-aois.gpkg"
        )
        layer = str(folder / "layers" / f"{lid}.gpkg")
        conf = {"id": lid, "name": f"Invented lake {i}", "timezone": "Europe/Berlin" if i % 2 else "UTC",
                "sources": "sources.yaml", "lake": {"path": layer},
                "aois": {"path": str(folder / "layers" / f"{lid}-aois.gpkg"), "id_field": "aoi_id"},
                "subbasins": {"path": layer}, "zones": ZONES}  # fmt: skip
        path = folder / f"lake-{lid}.yaml"
        path.write_text(yaml.safe_dump(conf))
        files.append(path)
    return files


def _rchar() -> int:
    for line in Path("/proc/self/io").read_text().splitlines():
        if line.startswith("rchar:"):
            return int(line.split()[1])
    return 0


def child(mode: str, n: int, size: int, days: int, store: Path) -> dict:
    """One measured run in this process (imports and config loading outside the timed call)."""
    from lakefeed.config import load_project
    from lakefeed.stages.weather import build_weather
    from lakefeed.stages.weather_group import build_weather_many
    from lakefeed.store import Store

    projects = [load_project(f) for f in generate_lakes(n, size, days)]
    target = Store(store)
    r0, t0 = _rchar(), time.perf_counter()
    if mode == "group":
        out = build_weather_many(projects, target, isolate=False)
    else:
        out = {p.id: build_weather(p, target) for p in projects}
    wall = time.perf_counter() - t0
    peak = max(
        resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    )
    rows = sum(r.tables.get("drivers_daily", 0) for r in out.values())
    return {"mode": mode, "lakes": n, "seconds": wall, "peak_mib": peak / 1024, "read_mib": (_rchar() - r0) / 2**20,
            "rows": rows}  # fmt: skip


def _same_tables(a: Path, b: Path, lakes: int, size: int, days: int) -> bool:
    import pandas as pd

    from lakefeed.store import Store

    for f in generate_lakes(lakes, size, days):
        lake = f.stem.removeprefix("lake-")
        x, y = Store(a).read_table("drivers_daily", lake), Store(b).read_table("drivers_daily", lake)
        pd.testing.assert_frame_equal(x, y, check_exact=True)
    return True


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--lakes", type=int, nargs="+", default=[1, 6, 24, 96])
    ap.add_argument("--days", type=int, default=1096, help="record length in days (default 3 years)")
    ap.add_argument("--size", type=int, default=200, help="grid cells along each axis (at least 200 for the goal)")
    ap.add_argument("--modes", nargs="+", default=["group", "each"], choices=["group", "each"])
    ap.add_argument("--child", nargs=2, metavar=("MODE", "N"), help=argparse.SUPPRESS)
    ap.add_argument("--store", type=Path, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        print(json.dumps(child(args.child[0], int(args.child[1]), args.size, args.days, args.store)))
        return
    t0 = time.perf_counter()
    generate_lakes(max(args.lakes), args.size, args.days)
    print(f"data: {args.size}x{args.size} grid, {args.days} days, {max(args.lakes)} lakes "
          f"(generated or found in {time.perf_counter() - t0:.0f} s)")  # fmt: skip
    runs = DATA / "runs"
    results = []
    for mode in args.modes:
        for n in sorted(args.lakes):
            store = runs / f"{mode}-{n}"
            subprocess.run(["rm", "-rf", str(store)], check=True)
            cmd = [sys.executable, __file__, "--child", mode, str(n), "--size", str(args.size),
                   "--days", str(args.days), "--store", str(store)]  # fmt: skip
            out = subprocess.run(cmd, check=True, capture_output=True, text=True).stdout.strip().splitlines()[-1]
            results.append(json.loads(out))
    print(f"{'mode':<6} {'lakes':>5} {'seconds':>8} {'N/1':>6} {'peak MiB':>9} {'read MiB':>9} {'rows':>8}")
    for r in results:
        one = next(x for x in results if x["mode"] == r["mode"] and x["lakes"] == min(args.lakes))
        print(f"{r['mode']:<6} {r['lakes']:>5} {r['seconds']:>8.2f} {r['seconds'] / one['seconds']:>6.2f} "
              f"{r['peak_mib']:>9.0f} {r['read_mib']:>9.0f} {r['rows']:>8}")  # fmt: skip
    if set(args.modes) == {"group", "each"}:
        n = max(args.lakes)
        ok = _same_tables(runs / f"group-{n}", runs / f"each-{n}", n, args.size, args.days)
        print(f"group tables equal lake-by-lake tables ({n} lakes): {ok}")


if __name__ == "__main__":
    main()
