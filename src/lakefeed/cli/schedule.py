"""`lakefeed schedule show|serve`: the monthly refresh deployment and how to run it on a schedule.

Cron schedules need a running Prefect server (Prefect's temporary local server does not schedule).
``serve`` uses the server at ``PREFECT_API_URL`` when set; otherwise it starts a local one on loopback
(``prefect server start --host 127.0.0.1``), registers the deployment of ``refresh`` with its cron and
serves it until stopped (Ctrl-C; the server it started is stopped too). Manual equivalent::

    prefect server start --host 127.0.0.1 --port 4200 &
    export PREFECT_API_URL=http://127.0.0.1:4200/api
    lakefeed schedule serve config/
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from datetime import datetime
from pathlib import Path
from zoneinfo import ZoneInfo

import typer
from rich.markup import escape

from lakefeed.cli._app import app, console
from lakefeed.exceptions import LakefeedError

__all__ = ["next_runs", "start_local_server"]

schedule_app = typer.Typer(help="Monthly refresh on a schedule (Prefect deployment).", no_args_is_help=True)
app.add_typer(schedule_app, name="schedule")


def next_runs(cron: str, timezone: str, n: int = 3) -> list[datetime]:
    """The next ``n`` times a cron expression fires in ``timezone``."""
    from cronsim import CronSim

    it = CronSim(cron, datetime.now(ZoneInfo(timezone)).replace(second=0, microsecond=0))
    return [next(it) for _ in range(n)]


def start_local_server(port: int = 4200, *, timeout: float = 180.0) -> tuple[subprocess.Popen, str]:
    """Start ``prefect server start`` on 127.0.0.1:``port``; wait until healthy; return (process, API URL)."""
    import httpx

    proc = subprocess.Popen(
        [sys.executable, "-m", "prefect", "server", "start", "--host", "127.0.0.1", "--port", str(port)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        env={**os.environ, "PREFECT_SERVER_ANALYTICS_ENABLED": "false", "PREFECT_UI_ENABLED": "false"},
    )
    url = f"http://127.0.0.1:{port}/api"
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise LakefeedError(f"the Prefect server exited with code {proc.returncode}; is port {port} free?")
        try:
            if httpx.get(f"{url}/health", timeout=2).status_code == 200:
                return proc, url
        except httpx.HTTPError:
            pass
        time.sleep(0.5)
    proc.terminate()
    raise LakefeedError(f"the Prefect server on port {port} did not answer within {timeout:.0f} s")


@schedule_app.command("show")
def show_command(
    config_dir: Path = typer.Argument(..., help="Folder of lake YAML files."),
    cron: str | None = typer.Option(None, "--cron", help="Cron expression (default: 03:00 on the 5th)."),
    timezone: str | None = typer.Option(None, "--timezone", help="Time zone (default: the lakes' own)."),
) -> None:
    """Show the deployment's schedule, its next runs and how to serve it."""
    from lakefeed.flows.deployments import DEFAULT_CRON, DEPLOYMENT_NAME, default_timezone

    cron = cron or DEFAULT_CRON
    tz = timezone or default_timezone(config_dir)
    console.print(f"deployment [bold]refresh/{DEPLOYMENT_NAME}[/] of {escape(str(config_dir))}: cron {cron!r} in {tz}")
    for t in next_runs(cron, tz):
        console.print(f"  next run: {t:%Y-%m-%d %H:%M %Z}")
    console.print(
        "serve it (starts a local Prefect server unless PREFECT_API_URL is set): "
        f"lakefeed schedule serve {escape(str(config_dir))}"
    )


@schedule_app.command("serve")
def serve_command(
    config_dir: Path = typer.Argument(..., help="Folder of lake YAML files."),
    store: Path | None = typer.Option(None, "--store", help="Store folder; default 'store:' of sources.yaml."),
    cron: str | None = typer.Option(None, "--cron", help="Cron expression (default: 03:00 on the 5th)."),
    timezone: str | None = typer.Option(None, "--timezone", help="Time zone (default: the lakes' own)."),
    dask_address: str | None = typer.Option(None, "--dask-address", help="Existing Dask scheduler address."),
    port: int = typer.Option(4200, "--port", help="Port of the local Prefect server started when none is set."),
) -> None:
    """Register the monthly refresh deployment and serve it until stopped (Ctrl-C)."""
    from lakefeed.flows.deployments import DEFAULT_CRON, serve

    proc = None
    if not os.environ.get("PREFECT_API_URL"):
        console.print(f"starting a local Prefect server on 127.0.0.1:{port} (PREFECT_API_URL is not set)")
        proc, url = start_local_server(port)
        os.environ["PREFECT_API_URL"] = url
        console.print(f"Prefect server ready: {url}")
    try:
        serve(
            config_dir,
            store=str(store) if store else None,
            cron=cron or DEFAULT_CRON,
            timezone=timezone,
            dask_address=dask_address,
        )
    finally:
        if proc is not None:
            proc.terminate()
            proc.wait(timeout=30)
