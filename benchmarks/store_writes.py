"""Benchmark: the cost of one store write as the store grows to many lakes.

Workload: a store of N lakes, each with a ``target_obs`` partition whose manifest entry lists the
content hashes of K scene files (the demo's target tables list about 5,000 per lake), plus a small
``features`` and ``diagnostics`` partition. Measured: the wall time of writing one lake's small
``diagnostics`` table (5 rows) once the store holds N lakes, median of R writes, and the bytes of
manifest written per write. With one manifest document for the whole store every write rewrites all
lakes' entries; with one entry file per table and lake it rewrites only its own.

Run: ``.venv/bin/python benchmarks/store_writes.py [--lakes 1 50 200 --inputs 5000]``.
Not part of the test suite.
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

import pandas as pd

from lakefeed.store import Store


def _frame(n: int = 5) -> pd.DataFrame:
    return pd.DataFrame({"aoi": ["a"] * n, "first_date": pd.date_range("2024-01-01", periods=n), "n_obs": range(n)})


def _manifest_bytes(root: Path) -> int:
    return sum(p.stat().st_size for p in root.rglob("*.json") if p.is_file())


def measure(lakes: int, inputs: int, repeats: int) -> tuple[float, int]:
    """Median seconds of one small write in a store of ``lakes`` lakes; manifest bytes of the store."""
    with tempfile.TemporaryDirectory() as tmp:
        store = Store(tmp)
        for i in range(lakes):
            lake = f"lake-{i:03d}"
            hashes = {f"scenes/{lake}/scene-{k:05d}.tif": f"{k:064x}" for k in range(inputs)}
            store.write_table("target_obs", lake, _frame(), inputs=hashes, time_column="first_date")
            store.write_table("diagnostics", lake, _frame(), time_column="first_date")
        times = []
        for r in range(repeats):
            t0 = time.perf_counter()
            store.write_table("diagnostics", "lake-000", _frame().assign(n_obs=r), time_column="first_date")
            times.append(time.perf_counter() - t0)
        return statistics.median(times), _manifest_bytes(Path(tmp))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--lakes", type=int, nargs="+", default=[1, 50, 200])
    ap.add_argument("--inputs", type=int, default=5000, help="input files listed per lake's target table")
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args()
    for n in args.lakes:
        t, size = measure(n, args.inputs, args.repeats)
        print(f"{n:4d} lakes: one small write {t * 1e3:8.1f} ms | manifest on disk {size / 1e6:7.1f} MB")


if __name__ == "__main__":
    main()
