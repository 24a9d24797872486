"""`lakefeed build CONFIG...`: full build of lakes through the Prefect flow :func:`lakefeed.flows.refresh.build_lake`.

Parses arguments, draws progress and prints the run summary. Holds no logic.
"""

from __future__ import annotations

from pathlib import Path

import typer

from lakefeed.cli._app import SHRINK_HELP, app
from lakefeed.cli._runs import run_flow

__all__ = ["build_command"]


@app.command("build")
def build_command(
    configs: list[Path] = typer.Argument(..., help="Lake YAML files or folders of them."),
    store: Path | None = typer.Option(None, "--store", help="Store folder; default 'store:' of sources.yaml."),
    dask_address: str | None = typer.Option(None, "--dask-address", help="Existing Dask scheduler address."),
    sequential: bool = typer.Option(False, "--sequential", help="No Dask: lakes one after the other here."),
    wait: float = typer.Option(0.0, "--wait", help="Seconds to wait if another run holds the store."),
    report: bool = typer.Option(True, "--report/--no-report", help="Write each lake's quality report."),
    allow_shrink: bool = typer.Option(False, "--allow-shrink", help=SHRINK_HELP),
    lakes_per_task: int = typer.Option(
        32, "--lakes-per-task", min=1, help="Most lakes naming the same sources computed in one task (1: each alone)."
    ),
) -> None:
    """Full build: validate, derive geometry and weights, backfill the whole record, write the reports."""
    from lakefeed.flows.refresh import build_lake

    run_flow(
        build_lake,
        [str(c) for c in configs],
        store=store,
        sequential=sequential,
        dask_address=dask_address,
        wait=wait,
        report=report,
        allow_shrink=allow_shrink,
        lakes_per_task=lakes_per_task,
    )
