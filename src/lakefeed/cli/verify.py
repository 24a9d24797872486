"""`lakefeed verify [CONFIG...] [--store DIR] [--repair]`: check every store part file against its manifest.

Calls :func:`lakefeed.store.verify_store` (content hash and Parquet footer of every live part file) and
prints each damaged file with its table and lake; exit code 1 when any is damaged. ``--repair`` holds the
store's run lock and rebuilds the damaged partitions from the sources
(:func:`lakefeed.stages.repair.repair_store`; the lake configurations are needed for that), then checks
again. Holds no logic of its own.

Not to be confused with the Python package :mod:`lakefeed.verify`, which scores forecasts (feature screening,
baseline skill, ``lakefeed skill``); this command checks the store's files.
"""

from __future__ import annotations

from pathlib import Path

import typer
from rich.markup import escape

from lakefeed.cli._app import app, console
from lakefeed.cli.features import held
from lakefeed.exceptions import ConfigError, DamagedPartError

__all__ = ["verify_command"]


def _print_damage(damage: list[DamagedPartError]) -> None:
    console.print(f"[red]{len(damage)} damaged part file(s)[/]:")
    for err in damage:  # one line each, never wrapped (the path is what the user looks for)
        console.print(
            f"  {err.path} (table {err.table}, lake {err.lake}): {err.problem}",
            soft_wrap=True,
            markup=False,
            highlight=False,
        )


@app.command("verify")
def verify_command(
    configs: list[Path] = typer.Argument(None, help="Lake YAML files or folders (needed by --repair)."),
    store: str | None = typer.Option(None, "--store", help="Store folder or URL [default: sources.yaml store]."),
    repair: bool = typer.Option(False, "--repair", help="Rebuild the damaged partitions from the sources."),
    footers_only: bool = typer.Option(False, "--footers-only", help="Check Parquet footers only (fast)."),
    wait: float = typer.Option(0.0, "--wait", help="With --repair: seconds to wait if a run holds the store."),
) -> None:
    """Check every part file of the store against its manifest hash and Parquet footer; optionally repair."""
    from lakefeed.config import load_projects
    from lakefeed.store import Store, verify_store

    projects = load_projects(list(configs)) if configs else []
    roots = {store} if store else {p.sources.store for p in projects if p.sources.store}
    if len(roots) != 1:
        raise ConfigError(
            "no single store to verify: pass --store DIR"
            + (f" (the lakes name different stores: {sorted(map(str, roots))})" if roots else "")
        )
    st = Store(roots.pop())
    damage = verify_store(st, deep=not footers_only)
    n = sum(len(st.lakes(t)) for t in st.tables())
    if not damage:
        what = "Parquet footers" if footers_only else "part files (content hashes and Parquet footers)"
        console.print(f"store {escape(st.url)}: {n} partition(s) checked, every one's {what} intact")
        return
    _print_damage(damage)
    if not repair:
        console.print("rebuild them from the sources with: lakefeed verify CONFIG... --store STORE --repair")
        raise typer.Exit(1)
    from lakefeed.stages.repair import repair_store

    with held(st, what="verify --repair", wait=wait):
        outcomes = repair_store(st, projects, damage)
    for r in outcomes:
        colour = "green" if r.status == "repaired" else "red"
        console.print(f"[{colour}]{r.lake}: {r.status}[/] ({', '.join(r.tables)}): {escape(r.message)}")
    left = verify_store(st, deep=not footers_only)
    if left:
        _print_damage(left)
        raise typer.Exit(1)
    console.print(f"store {escape(st.url)}: repaired; every part file intact")
