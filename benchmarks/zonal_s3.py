"""`lakefeed zonal` on the zonal benchmark grid read from a loopback S3 bucket vs from local disk.

Usage::

    .venv/bin/python benchmarks/zonal_s3.py --months 2 --repeat 1

Takes the first ``--months`` monthly files of ``benchmarks/zonal.py``'s grid (generated there if
missing), starts moto's S3 server on 127.0.0.1 (the test suite's ``tests/s3server.py``, with its
byte-counting proxy), uploads the files to a bucket and runs ``lakefeed zonal`` as a separate process
on the local glob and on the ``s3://`` glob (weights cached first, so both runs only read and
average). Prints wall times, bytes served and the ratio s3/local. Needs the ``s3`` and ``test``
extras (s3fs, moto). Not part of the test suite.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE), str(HERE.parent / "tests")]

import zonal as bench  # noqa: E402  (benchmarks/zonal.py: the grid and the zones)
from s3server import REGION, ByteCounter, _credentials, _free_port, _proxy, _start_moto  # noqa: E402


def _run(grid: str, out: Path, cache: Path, env: dict[str, str]) -> float:
    cmd = [
        sys.executable,
        "-c",
        "from lakefeed.cli import main; main()",
        "zonal",
        grid,
        "--zones",
        str(bench.ZONES),
        "--id-field",
        "zone",
    ]
    t = time.perf_counter()
    subprocess.run([*cmd, "--out", str(out), "--weights-cache", str(cache)], check=True, env=env, capture_output=True)
    return time.perf_counter() - t


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--months", type=int, default=2)
    ap.add_argument("--repeat", type=int, default=1)
    args = ap.parse_args()
    files = sorted(bench.GRID.glob("*.nc"))
    if len(files) < args.months:
        files = bench.generate(1)
    files = sorted(files)[: args.months]
    port = _free_port()
    proc = _start_moto(port)
    counter = ByteCounter()
    proxy = _proxy(port, counter)
    threading.Thread(target=proxy.serve_forever, daemon=True).start()
    try:
        import boto3

        key, secret = _credentials(f"http://127.0.0.1:{port}")
        endpoint = f"http://127.0.0.1:{proxy.server_address[1]}"
        env = {
            **os.environ,
            "AWS_ENDPOINT_URL": endpoint,
            "AWS_ACCESS_KEY_ID": key,
            "AWS_SECRET_ACCESS_KEY": secret,
            "AWS_DEFAULT_REGION": REGION,
        }
        s3 = boto3.client(
            "s3", endpoint_url=endpoint, region_name=REGION, aws_access_key_id=key, aws_secret_access_key=secret
        )
        s3.create_bucket(Bucket="bench")
        for f in files:
            s3.upload_file(str(f), "bench", f"grid/{f.name}")
        local = [str(f) for f in files]
        remote = [f"s3://bench/grid/{f.name}" for f in files]
        with tempfile.TemporaryDirectory() as tmp:
            out, cache = Path(tmp) / "out.parquet", Path(tmp) / "weights"
            env["LAKEFEED_CACHE_DIR"] = str(Path(tmp) / "cache")
            _run(local[0], out, cache, env)  # weights into the cache
            times: dict[str, list[float]] = {"local": [], "s3": []}
            for _ in range(args.repeat):
                for label, grids in (("local", local), ("s3", remote)):
                    counter.reset()
                    t = 0.0
                    for g in grids:  # one call per file: the same work on both sides
                        t += _run(g, out, cache, env)
                    times[label].append(t)
                    if label == "s3":
                        served = counter.bytes_served
        size = sum(f.stat().st_size for f in files)
        lo, hi = min(times["local"]), min(times["s3"])
        print(f"{len(files)} monthly file(s), {size / 2**20:.1f} MiB on disk")
        print(f"local disk : {lo:7.2f} s")
        print(f"loopback s3: {hi:7.2f} s  ({served / 2**20:.1f} MiB served)")
        print(f"ratio s3/local: {hi / lo:.2f}")
    finally:
        proxy.shutdown()
        proc.terminate()
        proc.wait(timeout=10)


if __name__ == "__main__":
    main()
