"""Fixtures for the flow tests: a Prefect server on loopback and several variants of the sample lake."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time

import httpx
import pytest


def free_port() -> int:
    """A free TCP port on loopback."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="session")
def prefect_server(tmp_path_factory: pytest.TempPathFactory) -> str:
    """`prefect server start` on 127.0.0.1 with a temporary PREFECT_HOME; yields its API URL (then stops it)."""
    from prefect.settings import PREFECT_API_URL, PREFECT_HOME, temporary_settings

    import lakefeed.flows  # noqa: F401  (sets Prefect's start-up timeout before Prefect is imported)

    home = tmp_path_factory.mktemp("prefect_home")
    port = free_port()
    env = {
        **os.environ,
        "PREFECT_HOME": str(home),
        "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
        "PREFECT_UI_ENABLED": "false",
    }
    env.pop("PREFECT_API_URL", None)
    log = open(home / "server.log", "wb")
    proc = subprocess.Popen(
        [sys.executable, "-m", "prefect", "server", "start", "--host", "127.0.0.1", "--port", str(port)],
        env=env,
        stdout=log,
        stderr=subprocess.STDOUT,
    )
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
        from prefect.events.worker import EventsWorker
        from prefect.logging.handlers import APILogWorker

        # send the last logs and events while the server is up; else Prefect retries them at exit forever
        APILogWorker.drain_all(timeout=20)
        EventsWorker.drain_all(timeout=20)
        proc.terminate()
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()
