"""Command-line interface: thin typer layer over the same library calls the flows use.

One module per subcommand; each parses arguments and calls :mod:`lakefeed.stages` or the
library. Errors derived from :class:`lakefeed.exceptions.LakefeedError` are printed as one
clear message and exit with status 1 (no traceback).
"""

from __future__ import annotations

import importlib
import sys

import typer
from rich.markup import escape

from lakefeed import __version__, show_versions
from lakefeed.cli._app import app, err_console
from lakefeed.exceptions import LakefeedError

_COMMANDS = (
    "check",
    "sample",
    "demo",
    "zonal",
    "loads",
    "scenes",
    "features",
    "query",
    "forecast",
    "onboard",
    "schedule",
    "report",
    "verify",
)
for _name in _COMMANDS:
    importlib.import_module(f"lakefeed.cli.{_name}")


@app.callback(invoke_without_command=True)
def _root(
    version: bool = typer.Option(False, "--version", help="Print the version and exit."),
    verbose: bool = typer.Option(False, "--verbose", help="With --version: versions of dependencies too."),
) -> None:
    if version:
        typer.echo(show_versions() if verbose else f"lakefeed {__version__}")
        raise typer.Exit(0)


def main() -> None:
    """Console-script entry point."""
    try:
        app()
    except LakefeedError as err:
        err_console.print(f"[bold red]error:[/] {type(err).__name__}: {escape(str(err))}", highlight=False)
        sys.exit(1)


__all__ = ["app", "main"]
