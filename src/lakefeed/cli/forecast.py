"""`lakefeed forecast CONFIG... [--store DIR]`: forecast drivers by lead, bias adjustment, re-forecast rows.

Parses arguments, loads the lake configurations and calls :func:`lakefeed.stages.forecast.build_forecast`
for each lake; prints the before/after bias table (out-of-sample) as a rich table. Holds no science.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import typer

from lakefeed.cli._app import SHRINK_HELP, app, console
from lakefeed.cli.features import held, store_for

if TYPE_CHECKING:  # heavy libraries are imported inside the functions (short CLI start-up)
    import pandas as pd
    from rich.table import Table

__all__ = ["bias_rich_table", "forecast"]


def _num(value: float, digits: int = 2) -> str:
    import pandas as pd

    return "-" if pd.isna(value) else f"{value:.{digits}f}"


def bias_rich_table(evaluation: pd.DataFrame, *, title: str) -> Table:
    """A rich table of the before/after evaluation: one row per variable, lead and method."""
    from rich.table import Table

    t = Table(
        title=title,
        caption="bias = mean(forecast - reanalysis); KS = two-sample Kolmogorov-Smirnov statistic; "
        "q-RMSE = RMSE of the 1st..99th percentiles. Adjusted values come from fits on earlier data only.",
    )
    for col in (
        "variable",
        "lead d",
        "method",
        "n",
        "bias raw",
        "bias adj",
        "KS raw",
        "KS adj",
        "q-RMSE raw",
        "q-RMSE adj",
        "unit",
    ):
        t.add_column(col, justify="left" if col in ("variable", "method", "unit") else "right")
    for _, r in evaluation.sort_values(["method", "variable", "lead_days"]).iterrows():
        better = abs(r["mean_bias_adjusted"]) <= abs(r["mean_bias_raw"])
        t.add_row(
            str(r["variable"]),
            str(int(r["lead_days"])),
            str(r["method"]),
            str(int(r["n"])),
            _num(r["mean_bias_raw"]),
            ("[green]" if better else "[yellow]") + _num(r["mean_bias_adjusted"]) + "[/]",
            _num(r["ks_raw"], 3),
            _num(r["ks_adjusted"], 3),
            _num(r["quantile_rmse_raw"]),
            _num(r["quantile_rmse_adjusted"]),
            str(r["unit"]),
        )
    return t


@app.command("forecast")
def forecast(
    configs: list[Path] = typer.Argument(..., help="Lake configuration files or folders of them."),
    store: str | None = typer.Option(None, "--store", help="Store folder or fsspec URL [default: sources.yaml store]."),
    allow_shrink: bool = typer.Option(False, "--allow-shrink", help=SHRINK_HELP),
) -> None:
    """Build forecast drivers per lead, fit and apply the bias adjustment, append re-forecast feature rows."""
    from lakefeed.config import load_projects
    from lakefeed.stages.forecast import build_forecast

    for project in load_projects(list(configs)):
        st = store_for(project, store)
        with held(st, what="forecast"):
            result = build_forecast(project, st, allow_shrink=allow_shrink)
        if result.skipped:
            console.print(f"[yellow]{project.id}: forecast skipped[/]: {result.reason}")
            continue
        parts = ", ".join(f"{k} {v} rows" for k, v in result.tables.items())
        console.print(f"{project.id}: {parts} -> {st.url}")
        evaluation = st.read_table("forecast_evaluation", project.id)
        console.print(bias_rich_table(evaluation, title=f"Forecast bias before/after adjustment: {project.lake.name}"))
        for w in result.warnings:
            console.print(f"[yellow]warning:[/] {w}", highlight=False)
