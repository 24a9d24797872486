"""`lakefeed refresh CONFIG_DIR`: new or changed source months of every lake (:func:`lakefeed.flows.refresh.refresh`).

Parses arguments, draws progress and prints the run summary. Holds no logic.
"""

from __future__ import annotations

from pathlib import Path

import typer

from lakefeed.cli._app import SHRINK_HELP, app
from lakefeed.cli._runs import run_flow

__all__ = ["refresh_command"]


@app.command("refresh")
def refresh_command(
    config_dir: Path = typer.Argument(..., help="Folder of lake YAML files (or one file)."),
    store: Path | None = typer.Option(None, "--store", help="Store folder; default 'store:' of sources.yaml."),
    dask_address: str | None = typer.Option(None, "--dask-address", help="Existing Dask scheduler address."),
    sequential: bool = typer.Option(False, "--sequential", help="No Dask: lakes one after the other here."),
    wait: float = typer.Option(0.0, "--wait", help="Seconds to wait if another run holds the store."),
    allow_shrink: bool = typer.Option(False, "--allow-shrink", help=SHRINK_HELP),
    lakes_per_task: int = typer.Option(
        32, "--lakes-per-task", min=1, help="Most lakes naming the same sources computed in one task (1: each alone)."
    ),
    verify_hashes: bool = typer.Option(
        False, "--verify-hashes", help="Hash every source file in full, not only those whose size or time changed."
    ),
) -> None:
    """Process only new or changed source months of every lake; one lake's failure never stops the others."""
    from lakefeed.flows.refresh import refresh

    run_flow(
        refresh,
        [str(config_dir)],
        store=store,
        sequential=sequential,
        dask_address=dask_address,
        wait=wait,
        allow_shrink=allow_shrink,
        lakes_per_task=lakes_per_task,
        verify_hashes=verify_hashes,
    )
