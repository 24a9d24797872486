"""`lakefeed check CONFIG...`: validate lake configs and open every source cheaply.

Thin layer over :func:`lakefeed.checks.check_paths`: prints one aligned line per check
(ok / problem / warning / skipped, what was found) with what to do on the next line, a
summary per lake, and exits 1 when anything is a problem (warnings too with ``--strict``).
Writes nothing.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import typer
from rich.markup import escape

from lakefeed.cli._app import app, console

if TYPE_CHECKING:  # lakefeed.checks pulls in geopandas, rasterio, xarray: imported inside the command
    from lakefeed.checks import CheckResult, LakeReport

__all__ = ["check", "format_report"]

_STYLE = {"ok": "green", "problem": "bold red", "warning": "yellow", "skipped": "dim"}


def format_report(report: LakeReport, *, width: int = 0) -> list[str]:
    """Rich-markup lines for one lake's report: a header, one line per check, hints indented below."""
    name_w = width or max((len(r.name) for r in report.results), default=10)
    head = report.lake_id or report.lake_file.name
    lines = [f"[bold]{escape(head)}[/]  ({escape(str(report.lake_file))})"]
    for r in report.results:
        style = _STYLE[str(r.status)]
        lines.append(f"  [{style}]{r.status:<8}[/] {escape(r.name):<{name_w}}  {escape(r.message)}")
        if r.hint and r.status in ("problem", "warning"):
            lines.append(f"  {'':<8} {'':<{name_w}}  -> {escape(r.hint)}")
    counts = ", ".join(f"{report.count(s)} {s}" for s in ("ok", "problem", "warning", "skipped"))
    verdict = "[green]passed[/]" if report.ok else "[bold red]failed[/]"
    lines.append(f"  {verdict}: {counts}")
    return lines


def _failing(results: list[CheckResult], strict: bool) -> bool:
    return any(r.status == "problem" or (strict and r.status == "warning") for r in results)


@app.command("check")
def check(
    configs: list[Path] = typer.Argument(..., help="Lake config YAML files, or folders holding them."),
    strict: bool = typer.Option(False, "--strict", help="Warnings (e.g. repaired polygons) fail too."),
) -> None:
    """Validate the configuration and open every source cheaply (metadata only); exit 1 on any problem."""
    from lakefeed.checks import check_paths

    reports = check_paths(configs)
    width = max((len(r.name) for rep in reports for r in rep.results), default=10)
    for i, rep in enumerate(reports):
        if i:
            console.print()
        for line in format_report(rep, width=width):
            console.print(line, soft_wrap=True, highlight=False)
    bad = [rep for rep in reports if _failing(rep.results, strict)]
    if bad:
        console.print(
            f"[bold red]{len(bad)} of {len(reports)} lake config(s) have problems[/]; fix the lines marked problem"
            + (" or warning" if strict else ""),
            soft_wrap=True,
        )
        raise typer.Exit(1)
    console.print(f"[green]all {len(reports)} lake config(s) passed[/]", soft_wrap=True)
