"""What `lakefeed build` and `lakefeed refresh` share: running a flow with progress bars and the run summary."""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import typer
from rich.markup import escape
from rich.table import Table

from lakefeed.cli._app import console

__all__ = ["print_summary", "run_flow", "stage_bars"]


@contextlib.contextmanager
def stage_bars(sequential: bool) -> Iterator[None]:
    """Progress bars when stages run in this process; on Dask workers the flows log per-lake progress."""
    if not sequential:
        yield
        return
    from lakefeed.cli.demo import progress_bars
    from lakefeed.flows.runtime import set_progress

    with progress_bars() as bar:
        set_progress(bar)
        try:
            yield
        finally:
            set_progress(None)


def print_summary(summaries: list[dict]) -> bool:
    """Print one row per lake (and each lake's error); True when no lake failed."""
    table = Table(title="run summary")
    for c in ("lake", "status", "new rows", "stages run", "skipped / error"):
        table.add_column(c)
    for s in summaries:
        colour = {"failed": "red", "ok": "green"}.get(s["status"], "yellow")
        why = s.get("error") or s.get("skipped") or ""
        table.add_row(
            s["lake"],
            f"[{colour}]{s['status']}[/]",
            str(s.get("new_rows", 0)),
            escape(s.get("stages_run", "")),
            escape(why if len(why) <= 60 else why[:57] + "..."),
        )
    console.print(table)
    for s in summaries:
        if s.get("error"):
            console.print(f"[red]{escape(s['lake'])}[/]: {escape(s['error'])}")
    return all(s["status"] != "failed" for s in summaries)


def run_flow(
    flow: Callable[..., list[dict]], configs: list[str], *, store: Path | None, sequential: bool, **options: Any
) -> None:
    """Run ``flow`` (:func:`lakefeed.flows.refresh.build_lake` or :func:`~lakefeed.flows.refresh.refresh`) on the
    lake configs, print the run summary and exit with status 1 when a lake failed."""
    with stage_bars(sequential):
        summaries = flow(configs, store=str(store) if store else None, sequential=sequential, **options)
    if not print_summary(summaries):
        raise typer.Exit(1)
