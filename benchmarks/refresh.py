"""Monthly refresh of many sample-sized lakes: sequential vs local Dask cluster, incremental vs full rebuild.

Usage::

    .venv/bin/python benchmarks/refresh.py                 # 20 lakes, reduced sample scenario
    .venv/bin/python benchmarks/refresh.py --lakes 6 --stages weather,hydrology

Data (into ``benchmarks/_data/refresh``, gitignored): the sample scenario generated once; ``--lakes``
variants of its lake (other ids, the same sources) in one config folder. The newest weather and forecast
month are held back for the first build and then "arrive", as they do each month.

Runs, each a Prefect flow in this process against one temporary local Prefect server (started once,
outside the timings):

1. ``full-seq``  full build, lakes one after the other in this process (all months but the last)
2. ``full-dask`` the same on a local Dask cluster sized to the machine (one worker process per core)
3. the last month arrives
4. ``incr-seq``  incremental refresh on a copy of the store of run 1
5. ``incr-dask`` incremental refresh on the store of run 2
6. ``full-dask-again`` full rebuild of the same (now complete) record on the local Dask cluster
7. ``noop-dask`` refresh with nothing new (the cost of change detection alone)

In the incremental runs only the stages whose inputs changed run: the weather stage reads the grid from a
day before the new month and recomputes only the days from that month on (older part files untouched; the
run summary's ``mode`` says ``weather: incremental from <day>``), the features stage extends its table
from the first new date; hydrology and target find their inputs unchanged and do not run. A full rebuild
(``full``) runs every stage over the whole record.

Wall time per run, and peak resident memory of this process plus all its children (Dask workers, Prefect
server) sampled every 0.2 s. Ratios: sequential / Dask, full / incremental. Not part of the test suite.
"""

from __future__ import annotations

import argparse
import json
import shutil
import threading
import time
from pathlib import Path

import psutil
import yaml

HERE = Path(__file__).resolve().parent
DATA = HERE / "_data" / "refresh"


class PeakMemory:
    """Peak summed RSS (MiB) of this process and its descendants while the block runs."""

    def __enter__(self) -> PeakMemory:
        self.peak = 0.0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._watch, daemon=True)
        self._thread.start()
        return self

    def _watch(self) -> None:
        me = psutil.Process()
        while not self._stop.is_set():
            total = 0
            for p in [me, *me.children(recursive=True)]:
                try:
                    total += p.memory_info().rss
                except psutil.Error:
                    pass
            self.peak = max(self.peak, total / 2**20)
            time.sleep(0.2)

    def __exit__(self, *exc: object) -> None:
        self._stop.set()
        self._thread.join()


def prepare(n_lakes: int, *, small: bool) -> tuple[Path, Path, list[Path]]:
    """Generate the sample (once), hold back the last month, write ``n_lakes`` lake configs."""
    from lakefeed.sample import generate

    sample = DATA / ("sample-small" if small else "sample")
    if not (sample / "config" / "lake-tallow.yaml").exists():
        generate(sample, seed=42, small=small)
    work = DATA / f"work-{n_lakes}"
    shutil.rmtree(work, ignore_errors=True)
    held: list[Path] = []
    for kind, pattern in (("weather", "reanalysis_*.nc"), ("forecast", "forecast_*.nc")):
        (work / kind).mkdir(parents=True)
        files = sorted((sample / kind).glob(pattern))
        for f in files[:-1]:
            (work / kind / f.name).symlink_to(f)
        held.append(files[-1])
    cfg = sample / "config"
    src = yaml.safe_load((cfg / "sources.yaml").read_text())
    lake = yaml.safe_load((cfg / "lake-tallow.yaml").read_text())

    def absolute(p: str) -> str:
        return str((cfg / p).resolve())

    src["weather"]["paths"] = [str(work / "weather" / "reanalysis_*.nc")]
    src["forecast"]["paths"] = [str(work / "forecast" / "forecast_*.nc")]
    src["hydrology"]["path"] = absolute(src["hydrology"]["path"])
    src["scenes"]["catalog"] = absolute(src["scenes"]["catalog"])
    for st in src["samples"]:
        st["path"] = absolute(st["path"])
    src.pop("store", None)
    config = work / "config"
    config.mkdir()
    (config / "sources.yaml").write_text(yaml.safe_dump(src))
    for key in ("lake", "aois", "subbasins"):
        lake[key]["path"] = absolute(lake[key]["path"])
    for i in range(n_lakes):
        one = {**lake, "id": f"lake{i:02d}", "name": f"Variant {i}", "sources": "sources.yaml"}
        (config / f"lake-lake{i:02d}.yaml").write_text(yaml.safe_dump(one))
    return work, config, held


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--lakes", type=int, default=20)
    parser.add_argument("--full-sample", action="store_true", help="3-year scenario instead of the reduced one")
    parser.add_argument(
        "--stages",
        default="weather,hydrology,target,features",
        help="comma-separated stages (the reduced scenario is too short for the forecast stage)",
    )
    args = parser.parse_args()
    import lakefeed.flows  # noqa: F401  (Prefect settings before Prefect is imported)
    from lakefeed.flows.refresh import _run
    from lakefeed.flows.runtime import prefect_api

    stages = args.stages.split(",")
    work, config, held = prepare(args.lakes, small=not args.full_sample)
    results: dict[str, dict[str, float]] = {}

    def run(name: str, store: Path, *, sequential: bool, full: bool) -> None:
        with PeakMemory() as mem:
            t0 = time.perf_counter()
            summary = _run(
                [str(config)],
                store=str(store),
                dask_address=None,
                sequential=sequential,
                full=full,
                wait=0.0,
                what=name,
                stages=stages,
            )
            wall = time.perf_counter() - t0
        failed = [s["lake"] for s in summary if s["status"] == "failed"]
        results[name] = {
            "wall_s": round(wall, 1),
            "peak_mib": round(mem.peak),
            "failed": len(failed),
            "rows": sum(s.get("new_rows", 0) for s in summary),
        }
        print(f"{name:<16} {wall:8.1f} s  peak {mem.peak:7.0f} MiB  failed {len(failed)}", flush=True)

    with prefect_api():
        run("full-seq", work / "store-seq", sequential=True, full=True)
        run("full-dask", work / "store-dask", sequential=False, full=True)
        for f in held:  # the new month arrives
            kind = "weather" if f.name.startswith("reanalysis") else "forecast"
            (work / kind / f.name).symlink_to(f)
        run("incr-seq", work / "store-seq", sequential=True, full=False)
        run("incr-dask", work / "store-dask", sequential=False, full=False)
        run("full-dask-again", work / "store-dask", sequential=False, full=True)
        run("noop-dask", work / "store-dask", sequential=False, full=False)
    w = {k: v["wall_s"] for k, v in results.items()}
    ratios = {
        "full: sequential / dask": round(w["full-seq"] / w["full-dask"], 2),
        "incremental: sequential / dask": round(w["incr-seq"] / w["incr-dask"], 2),
        "dask: full rebuild / incremental": round(w["full-dask-again"] / w["incr-dask"], 2),
        "sequential: full build / incremental": round(w["full-seq"] / w["incr-seq"], 2),
        "dask: full rebuild / nothing new": round(w["full-dask-again"] / w["noop-dask"], 2),
    }
    out = {"lakes": args.lakes, "stages": stages, "cores": psutil.cpu_count(), "runs": results, "ratios": ratios}
    print(json.dumps(out, indent=1))
    (DATA / f"results-{args.lakes}.json").write_text(json.dumps(out, indent=1))


if __name__ == "__main__":
    main()
