"""Fixtures for the flow tests: a Prefect server on loopback and several variants of the sample lake."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest
import yaml


def free_port() -> int:
    """A free TCP port on loopback."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="session")
def prefect_server(tmp_path_factory: pytest.TempPathFactory) -> str:
    """`prefect server start` on 127.0.0.1 with a temporary PREFECT_HOME; yields its API URL (then stops it)."""
    import lakefeed.flows  # noqa: F401  (sets Prefect's start-up timeout before Prefect is imported)
    from prefect.settings import PREFECT_API_URL, PREFECT_HOME, temporary_settings

    home = tmp_path_factory.mktemp("prefect_home")
    port = free_port()
    env = {**os.environ, "PREFECT_HOME": str(home), "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
           "PREFECT_UI_ENABLED": "false"}
    env.pop("PREFECT_API_URL", None)
    log = open(home / "server.log", "wb")  # noqa: SIM115
    proc = subprocess.Popen([sys.executable, "-m", "prefect", "server", "start", "--host", "127.0.0.1", "--port",
                             str(port)], env=env, stdout=log, stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}/api"
    deadline = time.monotonic() + 240
    while True:
        try:
            if httpx.get(f"{url}/health", timeout=2).status_code == 200:
                break
        except httpx.HTTPError:
            pass
        if proc.poll() is not None or time.monotonic() > deadline:
            proc.kill()
            pytest.fail(f"Prefect server did not start: {(home / 'server.log').read_text()[-2000:]}")
        time.sleep(0.5)
    try:
        with temporary_settings(updates={PREFECT_API_URL: url, PREFECT_HOME: str(home)}):
            yield url
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()


def write_variants(sample: Path, dest: Path, ids: list[str], *, broken: dict[str, str] | None = None) -> Path:
    """Copies of the sample lake config under other lake ids, with absolute paths, in ``dest``.

    ``broken`` maps a lake id to a weather glob that matches nothing (a lake whose files are missing).
    Returns ``dest``. The store is ``dest/../store``.
    """
    dest.mkdir(parents=True, exist_ok=True)
    cfg = sample / "config"
    lake = yaml.safe_load((cfg / "lake-tallow.yaml").read_text())
    src = yaml.safe_load((cfg / "sources.yaml").read_text())

    def absolute(p: str) -> str:
        return str((cfg / p).resolve()) if not Path(p).is_absolute() else p

    src["weather"]["paths"] = [absolute(p) for p in src["weather"]["paths"]]
    src["forecast"]["paths"] = [absolute(p) for p in src["forecast"]["paths"]]
    src["hydrology"]["path"] = absolute(src["hydrology"]["path"])
    src["scenes"]["catalog"] = absolute(src["scenes"]["catalog"])
    for st in src["samples"]:
        st["path"] = absolute(st["path"])
    src["store"] = str((dest.parent / "store").resolve())
    (dest / "sources.yaml").write_text(yaml.safe_dump(src))
    for key in ("lake", "aois", "subbasins"):
        lake[key]["path"] = absolute(lake[key]["path"])
    for lake_id in ids:
        one = {**lake, "id": lake_id, "name": f"Variant {lake_id}", "sources": "sources.yaml"}
        if broken and lake_id in broken:
            bad = {**src, "weather": {**src["weather"], "paths": [broken[lake_id]]}}
            (dest / f"sources-{lake_id}.yaml").write_text(yaml.safe_dump(bad))
            one["sources"] = f"sources-{lake_id}.yaml"
        (dest / f"lake-{lake_id}.yaml").write_text(yaml.safe_dump(one))
    return dest
