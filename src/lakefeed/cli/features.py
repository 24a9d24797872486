"""`lakefeed features CONFIG... [--store DIR] [--full | --rebuild] [--compact]`: build feature tables and
print the sampling diagnostics.

Parses arguments, loads the lake configurations and calls
:func:`lakefeed.stages.features.build_features_many` for the lakes of each store: their rows are computed
together, each lake is read and written on its own, and a lake that fails is reported while the others
are written (the exit code is then 1). Incremental by default: only new dates are computed and appended
as one part file; ``--full`` and ``--rebuild`` recompute every row (folds are calendar blocks: a row's
fold is the same either way); ``--compact`` merges the table's part
files into one. Then runs the skill stage (``feature_screening``, ``baseline_skill``; :mod:`lakefeed.stages.skill`).
Prints the diagnostics as a rich table. Holds no science.
"""

from __future__ import annotations

from contextlib import AbstractContextManager, nullcontext
from pathlib import Path
from typing import TYPE_CHECKING

import typer
from rich.markup import escape

from lakefeed.cli._app import SHRINK_HELP, app, console
from lakefeed.cli.query import caution_for
from lakefeed.exceptions import ConfigError, LakefeedError

if TYPE_CHECKING:  # heavy libraries are imported inside the functions (short CLI start-up)
    import pandas as pd
    from rich.table import Table

    from lakefeed.config import Project
    from lakefeed.store import Store

__all__ = ["diagnostics_table", "features", "held", "store_for"]


def store_for(project: Project, store: str | None) -> Store:
    """The store given on the command line, else ``store:`` of the project's sources.yaml."""
    from lakefeed.store import Store

    root = store or project.sources.store
    if not root:
        raise ConfigError(
            f"{project.sources_file}: no store given; pass --store DIR or set 'store:' in the sources configuration"
        )
    return Store(root)


def held(store: Store, *, what: str, wait: float = 0.0) -> AbstractContextManager[object]:
    """The store's run lock for a command that writes (a local store; other filesystems: each write's own
    lock only), so that it never interleaves with a build, a refresh or another writing command; what the
    command writes is published together at its end (:meth:`lakefeed.store.Store.publishing`)."""
    from contextlib import ExitStack

    from lakefeed.store import run_lock

    stack = ExitStack()
    stack.enter_context(run_lock(store.path, wait=wait, what=what) if store.local else nullcontext())
    stack.enter_context(store.publishing())
    return stack


def _content(store: Store, lake: str) -> str | None:
    return (store.entry("features", lake) or {}).get("content_hash")


def _reforecast(
    store: Store, projects: list[Project], results: dict[str, object], *, allow_shrink: bool = False
) -> list[str]:
    """Rerun the forecast stage for lakes whose feature table the features stage rewrote and whose forecast
    stage had run: its re-forecast rows (leads > 0) live in the same table and a rewrite drops them (the
    flows do the same: forecast runs whenever features did). Returns the lakes whose forecast stage failed."""
    from lakefeed.stages.forecast import build_forecast

    failed = []
    for project in projects:
        if isinstance(results.get(project.id), Exception) or project.sources.forecast is None:
            continue
        if not store.has_table("forecast_drivers_daily", project.id):
            continue
        try:
            out = build_forecast(project, store, allow_shrink=allow_shrink)
        except LakefeedError as err:
            console.print(f"[red]{project.id}: re-forecast rows not restored[/]: {err}", highlight=False)
            failed.append(project.id)
            continue
        console.print(
            f"{project.id}: forecast stage rerun: {out.tables.get('features', 0)} feature rows with re-forecast leads"
        )
    return failed


def _skill(store: Store, projects: list[Project], results: dict[str, object]) -> list[str]:
    """Run the skill stage (feature screening, baseline skill) for the lakes whose features were built, as the
    flows do after the forecast stage. Returns the lakes whose skill stage failed."""
    from lakefeed.stages.skill import build_skill

    failed = []
    for project in projects:
        result = results.get(project.id)
        if isinstance(result, Exception) or getattr(result, "skipped", False):
            continue
        try:
            out = build_skill(project, store)
        except LakefeedError as err:
            console.print(f"[red]{project.id}: feature screening and baseline skill failed[/]: {err}", highlight=False)
            failed.append(project.id)
            continue
        counts = ", ".join(f"{t} {n} rows" for t, n in out.tables.items())
        console.print(
            f"{project.id}: {counts} ({out.reason or 'computed'})"
            if counts
            else f"{project.id}: skill skipped: {out.reason}"
        )
        for w in out.warnings:
            console.print(f"[yellow]warning:[/] {project.id}: {w}", highlight=False)
    return failed


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
        warn = [
            w
            for w, on in (("few obs", r["warn_few_observations"]), ("season", r["warn_season_under_represented"]))
            if on
        ]
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
    allow_shrink: bool = typer.Option(False, "--allow-shrink", help=SHRINK_HELP),
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
        with held(st, what="features"):
            before = {p.id: _content(st, p.id) for p in group}
            results = build_features_many(group, st, full=full or rebuild, allow_shrink=allow_shrink)
            changed = [p for p in group if _content(st, p.id) != before[p.id]]
            failed += _reforecast(st, changed, results, allow_shrink=allow_shrink)
            failed += _skill(st, group, results)
            if compact:
                for project in group:
                    if not isinstance(results[project.id], Exception) and st.has_table("features", project.id):
                        st.compact("features", project.id)
        for project in group:
            result = results[project.id]
            if isinstance(result, Exception):
                failed.append(project.id)
                console.print(f"[red]{project.id}: features failed[/]: {result}", highlight=False)
                continue
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
            caution = caution_for((st.entry("features", project.id) or {}).get("columns", []))
            if caution:  # the feature table carries screening marks (flags) or trophic columns
                console.print(f"[yellow]{escape(caution)}[/]", highlight=False)
    if failed:
        failed = sorted(set(failed))
        console.print(
            f"[red]features failed for {len(failed)} lake(s): {', '.join(failed)}[/] (the others are written)"
        )
        raise typer.Exit(1)
