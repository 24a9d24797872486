"""`lakefeed sample DIR`: generate the invented sample scenario (thin layer over :func:`lakefeed.sample.generate`)."""

from __future__ import annotations

import time
from pathlib import Path

import typer
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

from lakefeed.cli._app import app, console


@app.command("sample")
def sample(
    folder: Path = typer.Argument(..., help="Folder to write the scenario into (created if missing)."),
    seed: int = typer.Option(42, "--seed", help="Seed of every random draw; the same seed gives identical files."),
    years: int = typer.Option(3, "--years", min=1, help="Calendar years to generate, from 1 January 2022."),
    small: bool = typer.Option(False, "--small", help="Reduced scenario (1 year, fewer scenes) as the tests use."),
) -> None:
    """Generate the invented "Tallow Reservoir" sample scenario: weather, hydrology, samples, scenes, forecasts."""
    from lakefeed.sample import LAST_TIMINGS, generate

    started = time.perf_counter()
    with Progress(
        TextColumn("{task.description:<10}"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(), console=console
    ) as bar:
        tasks: dict[str, int] = {}

        def report(description: str, done: int, total: int) -> None:
            if description == "done":
                return
            if description not in tasks:
                tasks[description] = bar.add_task(description, total=total)
            bar.update(tasks[description], completed=done, total=total)

        out = generate(folder, seed=seed, years=years, small=small, progress=report)
    parts = ", ".join(f"{k} {v:.1f} s" for k, v in LAST_TIMINGS.items())
    console.print(f"sample scenario written to [bold]{out}[/] in {time.perf_counter() - started:.1f} s ({parts})")
    console.print(
        f"configuration: {out / 'config' / 'lake-tallow.yaml'}  (check it with: lakefeed check {out / 'config'})"
    )
