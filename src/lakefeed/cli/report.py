"""`lakefeed report CONFIG [--store DIR] [--out FILE.html]`: the lake's self-contained quality report."""

from __future__ import annotations

from pathlib import Path

import typer
from rich.markup import escape

from lakefeed.cli._app import app, console

__all__ = ["report_command"]


@app.command("report")
def report_command(
    config: Path = typer.Argument(..., help="Lake YAML file."),
    store: Path | None = typer.Option(None, "--store", help="Store folder; default 'store:' of sources.yaml."),
    out: Path | None = typer.Option(None, "--out", help="HTML file; default <store>/reports/<lake>.html."),
) -> None:
    """Write a lake's quality report: map, weather, loads, chlorophyll-a, sensors, sampling, forecast, runs."""
    from lakefeed.config import load_project
    from lakefeed.exceptions import ConfigError
    from lakefeed.report import write_report
    from lakefeed.store import Store

    project = load_project(config)
    root = store or (Path(project.sources.store) if project.sources.store else None)
    if root is None:
        raise ConfigError("no store folder: pass --store DIR or set 'store:' in sources.yaml")
    with console.status(f"writing the quality report of {escape(project.id)} from {escape(str(root))} ..."):
        path = write_report(project, Store(root), out or Path(root) / "reports" / f"{project.id}.html")
    console.print(f"report written: {escape(str(path))}")
