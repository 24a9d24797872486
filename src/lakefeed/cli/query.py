"""`lakefeed query "SQL" [--store DIR | --config FILE] [--csv]`: one read-only SQL statement over the store.

Every store table is a view by its name (Hive-partitioned, so ``lake`` is a column), e.g.
``lakefeed query "SELECT aoi, count(*) FROM features GROUP BY aoi" --store store``. Accepts one
SELECT / WITH / DESCRIBE / SHOW / SUMMARIZE / EXPLAIN statement and runs it on a connection that can
read only the store's part files (:func:`lakefeed.store.query`); anything else is refused. Lakes with a
damaged part file are left out and named on stderr. The store is ``--store``, else the ``store:`` of the
sources file of ``--config`` (a lake config or a sources.yaml), else ``./store``; the command says which it read.
Prints a rich table, or CSV with ``--csv``, and the caution line when the answer holds trophic classes,
threshold flags or screening marks. Holds no science; never writes to the store.
"""

from __future__ import annotations

import sys
from pathlib import Path

import typer
from rich.markup import escape
from rich.table import Table

from lakefeed.cli._app import app, console, err_console
from lakefeed.exceptions import ConfigError, StoreError

__all__ = ["caution_for", "query_command", "query_store"]


@app.command("query")
def query_command(
    sql: str = typer.Argument(
        ...,
        help="One read-only statement (SELECT, WITH, DESCRIBE, SHOW, SUMMARIZE, EXPLAIN); store tables are "
        "views by name (features, diagnostics, ...).",
    ),
    store: str | None = typer.Option(
        None, "--store", help="Store folder or fsspec URL [default: store: of --config's sources file, else ./store]."
    ),
    config: Path | None = typer.Option(
        None, "--config", help="A lake config or sources.yaml whose 'store:' is the store to read."
    ),
    csv: bool = typer.Option(False, "--csv", help="Print CSV instead of a table."),
    limit: int = typer.Option(200, "--max-rows", min=1, help="Rows shown in the table view (CSV prints all)."),
) -> None:
    """Run one read-only SQL statement over the store's tables through DuckDB."""
    from lakefeed.store import Store, query

    root, why = query_store(store, config)
    st = Store(root)
    err_console.print(f"store {escape(root)} ({why})", highlight=False)
    if not st.tables():
        st.check_version()
        raise StoreError(f"store {root!r} ({why}) holds no tables; build some first (e.g. lakefeed demo DIR)")
    frame = query(st, sql)
    for message in frame.attrs.get("damaged", []):
        err_console.print(
            f"[yellow]warning:[/] {escape(message)}; this lake is left out of the answer", highlight=False
        )
    caution = caution_for(list(frame.columns))
    if csv:
        frame.to_csv(sys.stdout, index=False)
        if caution:
            print(caution, file=sys.stderr)
        return
    table = Table(title=f"{len(frame)} row(s)")
    for c in frame.columns:
        table.add_column(str(c), justify="right" if frame[c].dtype.kind in "iuf" else "left")
    for row in frame.head(limit).itertuples(index=False):
        table.add_row(*("" if v is None else str(v) for v in row))
    console.print(table)
    if len(frame) > limit:
        console.print(f"({len(frame) - limit} more rows; use --csv to see all)")
    if caution:
        console.print(f"[yellow]{caution}[/]", highlight=False)


def query_store(store: str | None, config: Path | None) -> tuple[str, str]:
    """The store to read and why: ``--store``, else ``store:`` of the config's sources file, else ``./store``."""
    from lakefeed.config import find_lake_files, load_project, load_sources

    if store:
        return store, "--store"
    if config is not None:
        config = Path(config)
        is_lake = not config.name.lower().startswith("sources") and config.resolve() in {
            f.resolve() for f in find_lake_files([config])
        }
        sources = load_project(config).sources if is_lake else load_sources(config)
        if not sources.store:
            raise ConfigError(f"{config}: its sources configuration sets no 'store:'; pass --store DIR")
        return str(sources.store), f"store: of {config}"
    return "store", "default ./store"


def caution_for(columns: list[str]) -> str:
    """The caution printed beside trophic classes, thresholds and screening marks (empty without them)."""
    from lakefeed.extract.trophic import CAUTION, UNSCREENED

    shown = {str(c) for c in columns}
    if not shown & {"tsi", "oecd_class", "carlson_class", "trophic_class", "screened", "flags"} and not any(
        c.startswith("exceeds_") for c in shown
    ):
        return ""
    return (
        f"{CAUTION} Days with screened = false ('{UNSCREENED}' in flags) could not be screened for outliers: "
        "their classes and exceedances may come from an undetected outlier scene."
    )
