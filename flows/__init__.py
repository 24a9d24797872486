"""Prefect flows: thin orchestration over lakefeed.stages (installed as lakefeed.flows).

- :mod:`lakefeed.flows.refresh`: ``refresh`` (incremental, many lakes), ``build_lake`` / ``onboard_lake``;
- :mod:`lakefeed.flows.demo`: ``demo`` (the sample lake, for ``lakefeed demo``);
- :mod:`lakefeed.flows.deployments`: the monthly deployment of ``refresh`` (kept apart from flow code);
- :mod:`lakefeed.flows.tasks`: coarse tasks, one per lake per stage.

Importing this package before Prefect gives Prefect's temporary local server (local mode) time to start
on a busy machine and turns off its usage analytics (runs must work offline).
"""

import os

os.environ.setdefault("PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS", "180")
os.environ.setdefault("PREFECT_SERVER_ANALYTICS_ENABLED", "false")
