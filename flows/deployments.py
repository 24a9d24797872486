"""Deployment of the monthly ``refresh``, kept apart from the flow code.

Default schedule: the 5th of every month at 03:00 in a configured time zone (``--timezone``, else the
time zone shared by the lakes in the config folder, else UTC). Cron schedules need a running Prefect
server (the temporary server of Prefect's local mode does not schedule); ``lakefeed schedule serve``
documents and scripts that. Must not hold flow logic.

Usage::

    prefect server start --host 127.0.0.1 &                  # or any Prefect server
    export PREFECT_API_URL=http://127.0.0.1:4200/api
    lakefeed schedule serve config/ --store store/           # registers and serves; Ctrl-C stops
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from lakefeed.config import find_lake_files, load_lake

__all__ = ["DEFAULT_CRON", "DEPLOYMENT_NAME", "default_timezone", "refresh_deployment", "register", "serve"]

#: 03:00 on the 5th of every month (minute hour day-of-month month day-of-week).
DEFAULT_CRON = "0 3 5 * *"
DEPLOYMENT_NAME = "monthly-refresh"


def default_timezone(config_dir: str | Path) -> str:
    """The time zone shared by all lakes of ``config_dir``; UTC when they differ or none is found."""
    zones = set()
    for f in find_lake_files([Path(config_dir)]):
        try:
            zones.add(load_lake(f).timezone)
        except Exception:  # a broken lake config must not stop the schedule; check reports it
            continue
    return zones.pop() if len(zones) == 1 else "UTC"


def refresh_deployment(
    config_dir: str | Path,
    *,
    store: str | None = None,
    cron: str = DEFAULT_CRON,
    timezone: str | None = None,
    dask_address: str | None = None,
    name: str = DEPLOYMENT_NAME,
) -> Any:
    """A ``RunnerDeployment`` of :func:`lakefeed.flows.refresh.refresh` with its monthly cron schedule."""
    from prefect.schedules import Cron

    from lakefeed.flows.refresh import refresh

    tz = timezone or default_timezone(config_dir)
    params: dict[str, Any] = {"configs": [str(Path(config_dir).resolve())]}
    if store:
        params["store"] = str(Path(store).resolve())
    if dask_address:
        params["dask_address"] = dask_address
    return refresh.to_deployment(
        name=name,
        schedule=Cron(cron, timezone=tz),
        parameters=params,
        description=f"Monthly refresh of the lakes in {config_dir} ({cron}, {tz}).",
        tags=["lakefeed", "refresh"],
    )


def register(config_dir: str | Path, **kwargs: Any) -> str:
    """Register the deployment with the Prefect server at ``PREFECT_API_URL``; returns its id."""
    deployment = refresh_deployment(config_dir, **kwargs)
    return str(deployment.apply())


def serve(config_dir: str | Path, *, pause_on_shutdown: bool = False, **kwargs: Any) -> None:
    """Register and serve the deployment (blocks; runs the refresh on schedule). Ctrl-C stops serving.

    Prefect pauses a served schedule when serving stops unless told otherwise; here the schedule stays
    active by default (a reboot must not silently stop the monthly refresh): runs due while nothing serves
    wait as late runs and start when serving resumes. ``pause_on_shutdown=True`` gives Prefect's behaviour.
    One run at a time: a second run on the same store waits or refuses (store lock).
    """
    from prefect import serve as prefect_serve

    prefect_serve(refresh_deployment(config_dir, **kwargs), pause_on_shutdown=pause_on_shutdown, limit=1)
