"""The typer application shared by all subcommand modules."""

from __future__ import annotations

import os
import sys

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
#: Help of the --allow-shrink option of the commands that write stage tables.
SHRINK_HELP = (
    "Write even when a stage's new rows shorten a table's stored date range or turn stored values into missing "
    "ones (a source file removed on purpose); without it such a lake fails and its tables stay as they were."
)
# Without a terminal (logs, CI, pipes) rich would wrap tables at 80 columns; use a wider page.
_WIDTH = None if sys.stdout.isatty() or "COLUMNS" in os.environ else 160
console = Console(stderr=False, width=_WIDTH)
err_console = Console(stderr=True)
