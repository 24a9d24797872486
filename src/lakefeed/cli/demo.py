"""`lakefeed demo [DIR]`: the sample scenario end to end, through the Prefect demo flow (local mode).

Generates the scenario into ``DIR/sample`` (or reuses it), runs every existing stage through
:func:`lakefeed.flows.demo.demo` (no server to start), writes ``DIR/store`` and ``DIR/report-<lake>.html``,
and prints a summary: tables, rows, columns, paths; then the diagnostics and the forecast bias tables when
present. Also provides :func:`progress_bars`, the rich progress callback the other run commands share.
"""

from __future__ import annotations

import contextlib
import os
import time
from collections.abc import Iterator
from pathlib import Path

import typer
from rich.markup import escape
from rich.progress import BarColumn, MofNCompleteColumn, Progress, SpinnerColumn, TextColumn, TimeElapsedColumn
from rich.table import Table

from lakefeed.cli._app import app, console
from lakefeed.cli.query import caution_for
from lakefeed.progress import Progress as ProgressFn

__all__ = ["StepClock", "demo_command", "forecast_lead_notes", "print_store_summary", "progress_bars"]


class StepClock:
    """Wraps a progress callback and records, per step (text before ':'), when it ran: from the previous step's
    last report (a step computes before its first report) to its own last report."""

    def __init__(self, progress: ProgressFn) -> None:
        self._progress = progress
        self.spans: dict[str, list[float]] = {}
        self._last: float | None = None

    def __call__(self, description: str, done: int, total: int) -> None:
        import time

        now = time.perf_counter()
        start = self._last if self._last is not None else now
        self.spans.setdefault(description.split(":", 1)[0], [start, now])[1] = now
        self._last = now
        self._progress(description, done, total)

    def table(self, total_s: float, *, title: str) -> Table:
        """Seconds per step (first to last report) and the rest of ``total_s`` (start-up, planning)."""
        table = Table(title=title)
        for col in ("step", "seconds", "share"):
            table.add_column(col, justify="left" if col == "step" else "right")
        steps = {k: b - a for k, (a, b) in self.spans.items()}
        steps["other (start-up, planning, between steps)"] = max(0.0, total_s - sum(steps.values()))
        for name, sec in steps.items():
            table.add_row(escape(name), f"{sec:.1f}", f"{sec / total_s:.0%}" if total_s > 0 else "-")
        table.add_row("[bold]total[/]", f"[bold]{total_s:.1f}[/]", "100%")
        return table


def forecast_lead_notes(
    configured: list[int], evaluated: list[int], features: object | None, *, archive_hours: int | None = None
) -> list[str]:
    """One line per configured forecast lead longer than the archive's longest full local day (evaluated leads).

    ``features``: the lake's features frame with ``lead_days`` and ``forecast_days`` (or None);
    ``archive_hours``: the archive's longest forecast period in hours (``forecast_drivers_daily`` metadata).
    """
    import pandas as pd

    if not evaluated:
        return []
    longest = max(evaluated)
    notes = []
    for lead in sorted(h for h in configured if h > longest):
        used = longest
        if isinstance(features, pd.DataFrame) and "forecast_days" in features:
            days = features.loc[features["lead_days"] == lead, "forecast_days"].dropna()
            used = int(days.max()) if len(days) else used
        notes.append(
            f"lead {lead} uses forecast days 1-{used}: the "
            + (f"{archive_hours} h archive ends" if archive_hours else "archive's forecasts end")
            + f" inside day {longest + 1} "
            f"(longest full local day: {longest}); its bias is shown at lead {longest}"
        )
    return notes


@contextlib.contextmanager
def progress_bars() -> Iterator[ProgressFn]:
    """A ``progress(description, done, total)`` callback drawing one rich bar per step (text before ':')."""
    columns = (
        SpinnerColumn(),
        TextColumn("{task.description:<34}"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
    )
    with Progress(*columns, console=console, transient=False) as bars:
        ids: dict[str, int] = {}

        def update(description: str, done: int, total: int) -> None:
            key = description.split(":", 1)[0]
            if key not in ids:
                ids[key] = bars.add_task(description, total=max(total, 1))
            bars.update(ids[key], description=description, completed=done, total=max(total, 1))

        yield update


def print_store_summary(store_root: str | Path, lake: str | None = None) -> None:
    """Table of the store's tables: rows, columns, units recorded, path of each Parquet file."""
    import pyarrow.parquet as pq

    from lakefeed.store import Store, read_units

    store = Store(store_root)
    table = Table(title=f"store {store_root}", show_lines=False)
    for col in ("table", "lake", "rows", "columns", "with units", "file"):
        table.add_column(col, justify="right" if col in ("rows", "columns", "with units") else "left")
    for name in store.tables():
        for lk in store.lakes(name):
            if lake is not None and lk != lake:
                continue
            files = store.part_files(name, lk)
            schema = pq.ParquetFile(files[0]).schema_arrow
            where = files[0] if len(files) == 1 else f"{files[0]} (+{len(files) - 1} part files)"
            table.add_row(
                name,
                lk,
                str(store.num_rows(name, lk)),
                str(len(schema)),
                str(len(read_units(schema))),
                escape(str(where)),
            )
    console.print(table)


def _print_frame(title: str, frame: object, columns: list[str]) -> None:
    import pandas as pd

    assert isinstance(frame, pd.DataFrame)
    cols = [c for c in columns if c in frame.columns] or list(frame.columns)[:8]
    table = Table(title=title)
    for c in cols:
        table.add_column(c)
    for _, row in frame[cols].head(40).iterrows():
        table.add_row(*(f"{v:.3g}" if isinstance(v, float) else escape(str(v)) for v in row))
    console.print(table)


@app.command("demo")
def demo_command(
    directory: Path = typer.Argument(Path("demo"), help="Folder for the sample scenario, the store and the report."),
    seed: int = typer.Option(42, help="Seed of the sample scenario (used when generating it)."),
    small: bool = typer.Option(False, "--small", help="Reduced scenario (one year, fewer scenes) for a quick look."),
) -> None:
    """Generate (or reuse) the sample scenario, run every pipeline stage on it and summarise the store."""
    os.environ.setdefault("PREFECT_LOGGING_LEVEL", "WARNING")  # the bars show progress; warnings still print
    from lakefeed.flows.demo import demo, demo_lake_file  # after the setting above (Prefect reads it on import)
    from lakefeed.flows.runtime import set_progress
    from lakefeed.sample import generate
    from lakefeed.store import Store

    sample = directory / "sample"
    store = directory / "store"
    if (sample / "config" / "lake-tallow.yaml").exists():
        console.print(f"reusing the sample scenario in {escape(str(sample))} (delete it to regenerate)")
    else:
        console.print(f"generating the sample scenario into {escape(str(sample))} (seed {seed})")
        with progress_bars() as bar:
            generate(sample, seed=seed, small=small, progress=bar)
    lake_file = demo_lake_file(sample)
    console.print(
        f"running the pipeline for {escape(str(lake_file))} into {escape(str(store))} (Prefect local mode): "
        "one bar per stage, then the report"
    )
    started = time.perf_counter()
    with progress_bars() as bar:
        clock = StepClock(bar)
        set_progress(clock)
        try:
            result = demo(str(sample.resolve()), str(store.resolve()))
        finally:
            set_progress(None)
    elapsed = time.perf_counter() - started
    summary = result["summary"]
    print_store_summary(store)
    s = Store(store)
    lake = summary["lake"]
    if s.has_table("diagnostics", lake):
        _print_frame(
            "diagnostics (accepted chlorophyll-a observations per AOI)",
            s.read_table("diagnostics", lake),
            ["aoi", "n_obs", "obs_per_year", "gap_median_days", "gap_max_days", "warnings"],
        )
    if s.has_table("forecast_evaluation", lake):
        from lakefeed.cli.forecast import bias_rich_table
        from lakefeed.config import load_project

        ev = s.read_table("forecast_evaluation", lake)
        configured = list(load_project(lake_file).lake.features.forecast_leads)
        evaluated = sorted(int(h) for h in set(ev["lead_days"]))
        # the configured re-forecast leads the archive covers, and its longest lead for those beyond it
        leads = sorted({h for h in configured if h in evaluated} | {max(evaluated)})
        ev = ev[ev["lead_days"].isin(leads) & (ev["method"] == ev["method"].iloc[0])]
        title = f"forecast bias before/after quantile mapping, leads {', '.join(map(str, leads))} (days)"
        if configured != leads:
            title += f"; configured leads {', '.join(map(str, configured))}"
        console.print(bias_rich_table(ev, title=title))
        feats = (
            s.read_table("features", lake, columns=["lead_days", "forecast_days"])
            if s.has_table("features", lake)
            else None
        )
        hours = ((s.entry("forecast_drivers_daily", lake) or {}).get("metadata") or {}).get("archive_hours")
        notes = forecast_lead_notes(configured, evaluated, feats, archive_hours=int(hours) if hours else None)
        for note in notes:
            console.print(f"[yellow]{escape(note)}[/]", highlight=False)
    status = summary["status"]
    colour = {"failed": "red", "ok": "green"}.get(status, "yellow")
    console.print(
        f"lake [bold]{lake}[/]: [{colour}]{status}[/]; stages run: {summary['stages_run'] or 'none'}; "
        f"{summary['rows_written']} rows written"
    )
    for key in ("skipped", "error"):
        if summary.get(key):
            console.print(f"  {key}: {escape(summary[key])}")
    if result.get("report"):
        console.print(f"quality report: {escape(result['report'])}")
    console.print(clock.table(elapsed, title="time per stage (seconds, wall clock)"))
    console.print(
        "read it with lakefeed.store.Store(...).read_table, or give pandas or DuckDB the file list of the current "
        f"generation: lakefeed.store.snapshot('{escape(str(store))}').tables['features']"
    )
    caution = caution_for((s.entry("target_daily", lake) or {}).get("columns", []))
    if caution:
        console.print(f"[yellow]{escape(caution)}[/]", highlight=False)
