"""`lakefeed features CONFIG... [--store DIR] [--full | --rebuild] [--compact]`: build feature tables and
print the sampling diagnostics.

Parses arguments, loads the lake configurations and calls
:func:`lakefeed.stages.features.build_features_many` for the lakes of each store: their rows are computed
together, each lake is read and written on its own, and a lake that fails is reported while the others
are written (the exit code is then 1). Incremental by default: only new dates are computed and appended
as one part file; ``--full`` and ``--rebuild`` recompute every row (folds are calendar blocks: a row's
fold is the same either way); ``--compact`` merges the table's part
files into one. Prints the diagnostics as a rich table. Holds no science.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import typer

from lakefeed.cli._app import app, console
from lakefeed.exceptions import ConfigError

if TYPE_CHECKING:  # heavy libraries are imported inside the functions (short CLI start-up)
    import pandas as pd
    from rich.table import Table

    from lakefeed.config import Project
    from lakefeed.store import Store

__all__ = ["diagnostics_table", "features", "store_for"]


def store_for(project: Project, store: str | None) -> Store:
    """The store given on the command line, else ``store:`` of the project's sources.yaml."""
    from lakefeed.store import Store

    root = store or project.sources.store
    if not root:
        raise ConfigError(
            f"{project.sources_file}: no store given; pass --store DIR or set 'store:' in the sources configuration"
        )
    return Store(root)


def diagnostics_table(diag: pd.DataFrame, *, title: str) -> Table:
    """A rich table of sampling diagnostics (one row per lake and AOI); warnings as short codes."""
    import pandas as pd
    from rich.table import Table

    t = Table(title=title, caption="few obs: < min_observations accepted; season: one season under-represented")
    for col in ("lake", "aoi", "obs", "DJF/MAM/JJA/SON", "median gap d", "longest gap d", "months covered", "warn"):
        t.add_column(col, justify="left" if col in ("lake", "aoi", "warn") else "right")
    for _, r in diag.iterrows():
        seasons = "/".join(str(int(r[f"n_obs_{s}"])) for s in ("djf", "mam", "jja", "son"))
        gap_max = "-" if pd.isna(r["gap_max_days"]) else f"{r['gap_max_days']:.0f}"
        if pd.notna(r["longest_gap_start"]):
            gap_max += f" from {pd.Timestamp(r['longest_gap_start']).date()}"
        warn = [w for w, on in (("few obs", r["warn_few_observations"]), ("season", r["warn_season_under_represented"]))
                if on]  # fmt: skip
        t.add_row(
            str(r.get("lake", "")),
            str(r["aoi"]),
            str(int(r["n_obs"])),
            seasons,
            "-" if pd.isna(r["gap_median_days"]) else f"{r['gap_median_days']:.0f}",
            gap_max,
            f"{r['coverage_fraction']:.0%}",
            f"[yellow]{', '.join(warn)}[/]" if warn else "ok",
        )
    return t


@app.command("features")
def features(
    configs: list[Path] = typer.Argument(..., help="Lake configuration files or folders of them."),
    store: str | None = typer.Option(None, "--store", help="Store folder or fsspec URL [default: sources.yaml store]."),
    full: bool = typer.Option(False, "--full", help="Recompute every row."),
    rebuild: bool = typer.Option(False, "--rebuild", help="Same as --full (folds are calendar blocks)."),
    compact: bool = typer.Option(False, "--compact", help="Merge the feature table's part files into one."),
) -> None:
    """Build point-in-time feature tables, folds and sampling diagnostics; print the diagnostics."""
    from lakefeed.config import load_projects
    from lakefeed.stages.features import build_features_many

    projects = load_projects(list(configs))
    stores: dict[str, tuple[Store, list[Project]]] = {}
    for project in projects:  # lakes of one store are computed together
        st = store_for(project, store)
        stores.setdefault(st.url, (st, []))[1].append(project)
    failed = []
    for st, group in stores.values():
        results = build_features_many(group, st, full=full, rebalance_folds=rebuild)
        for project in group:
            result = results[project.id]
            if isinstance(result, Exception):
                failed.append(project.id)
                console.print(f"[red]{project.id}: features failed[/]: {result}", highlight=False)
                continue
            if compact and st.has_table("features", project.id):
                st.compact("features", project.id)
            if result.skipped:
                console.print(f"[yellow]{project.id}: features skipped[/]: {result.reason}")
                continue
            console.print(
                f"{project.id}: features {result.tables.get('features', 0)} rows, "
                f"diagnostics {result.tables.get('diagnostics', 0)} rows -> {st.url}"
            )
            diag = st.read_table("diagnostics", project.id)
            console.print(diagnostics_table(diag, title=f"Sampling diagnostics: {project.lake.name}"))
            for w in result.warnings:
                console.print(f"[yellow]warning:[/] {w}", highlight=False)
    if failed:
        console.print(
            f"[red]features failed for {len(failed)} lake(s): {', '.join(failed)}[/] (the others are written)"
        )
        raise typer.Exit(1)
