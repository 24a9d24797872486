"""Prefect flows: thin orchestration over lakefeed.stages (installed as lakefeed.flows)."""
