"""The typer application shared by all subcommand modules."""

from __future__ import annotations

import typer
from rich.console import Console

app = typer.Typer(
    name="lakefeed",
    help="Prepare model-ready data for lakes and reservoirs: weather drivers, inflows and loads, "
    "chlorophyll-a targets, point-in-time-correct feature tables.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
console = Console(stderr=False)
err_console = Console(stderr=True)
