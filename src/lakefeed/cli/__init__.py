"""Command-line interface: thin typer layer over the same library calls the flows use.

One module per subcommand; each parses arguments and calls :mod:`lakefeed.stages` or the
library. Errors derived from :class:`lakefeed.exceptions.LakefeedError` are printed as one
clear message and exit with status 1; any other error is printed as one line too (what failed and
that ``lakefeed --verbose ...`` shows the traceback). A Ctrl-C exits with 130. Commands that start
processes (Prefect's temporary server, Dask workers, forked pools) run under
:func:`lakefeed.cli.children.guard_children`, so none of them outlives the command.
"""

from __future__ import annotations

import importlib
import logging
import sys

import typer
from rich.markup import escape

from lakefeed import __version__, show_versions
from lakefeed.cli._app import app, err_console, finish_help
from lakefeed.cli.children import guard_children
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
    "skill",
)
for _name in _COMMANDS:
    importlib.import_module(f"lakefeed.cli.{_name}")

#: ``lakefeed --help`` lists the commands in the order of the workflow; commands not named here follow.
WORKFLOW_ORDER = (
    "init",
    "check",
    "build",
    "refresh",
    "report",
    "query",
    "verify",
    "zonal",
    "loads",
    "scenes",
    "features",
    "forecast",
    "sample",
    "demo",
    "schedule",
)


def _workflow_rank(info: typer.models.CommandInfo) -> int:
    name = info.name or (info.callback.__name__ if info.callback else "")
    return WORKFLOW_ORDER.index(name) if name in WORKFLOW_ORDER else len(WORKFLOW_ORDER)


app.registered_commands.sort(key=_workflow_rank)  # stable: unknown commands keep their order at the end
finish_help(app)


#: commands that may start other processes (servers, Dask workers, process pools)
_STARTS_PROCESSES = frozenset(
    {"build", "refresh", "demo", "schedule", "zonal", "scenes", "features", "forecast", "verify"}
)


class _Options:
    verbose = False


@app.callback(invoke_without_command=True)
def _root(
    version: bool = typer.Option(False, "--version", help="Print the version and exit."),
    verbose: bool = typer.Option(
        False, "--verbose", help="Show the full traceback of an error; with --version: versions of dependencies."
    ),
) -> None:
    _Options.verbose = verbose
    if not verbose:
        _quiet_run_tracebacks()
    if version:
        typer.echo(show_versions() if verbose else f"lakefeed {__version__}")
        raise typer.Exit(0)


class _NoTraceback(logging.Filter):
    """Keep a flow or task run's failure message but drop its traceback (``--verbose`` keeps it)."""

    def filter(self, record: logging.LogRecord) -> bool:
        if record.exc_info and record.levelno >= logging.ERROR:
            err = record.exc_info[1]
            record.exc_info, record.exc_text = None, None
            if err is not None and not isinstance(err, LakefeedError):
                record.msg = f"{record.msg} (run again as `lakefeed --verbose ...` for the traceback)"
        return True


def _quiet_run_tracebacks() -> None:
    """Prefect logs each failed flow and task run with its traceback; on the command line the error
    itself is printed once as one line at the end, so the run logs keep only their message."""
    for name in ("prefect.flow_runs", "prefect.task_runs"):
        logging.getLogger(name).addFilter(_NoTraceback())


def _command(argv: list[str]) -> str | None:
    """The subcommand named on the command line (the first word that is not an option)."""
    return next((a for a in argv if not a.startswith("-")), None)


def _fail(err: BaseException, *, expected: bool) -> None:
    if _Options.verbose:
        import traceback

        err_console.print(escape("".join(traceback.format_exception(err))), highlight=False)
    name = type(err).__name__
    text = escape(str(err)) or "(no message)"
    if expected:
        err_console.print(f"[bold red]error:[/] {name}: {text}", highlight=False, soft_wrap=True)
    else:
        hint = "" if _Options.verbose else " Run again as `lakefeed --verbose ...` for the traceback."
        err_console.print(
            f"[bold red]error:[/] unexpected {name}: {text}.{hint} This is a lakefeed bug unless the message "
            "names a file or setting of yours: please report it.",
            highlight=False,
            soft_wrap=True,
        )


def main() -> None:
    """Console-script entry point."""
    if _command(sys.argv[1:]) in _STARTS_PROCESSES:
        guard_children()
    try:
        app()
    except LakefeedError as err:
        _fail(err, expected=True)
        sys.exit(1)
    except KeyboardInterrupt:
        err_console.print(
            "[bold red]interrupted[/] by Ctrl-C: parts written so far are complete; run the command again to finish."
        )
        sys.exit(130)
    except Exception as err:
        _fail(err, expected=False)
        sys.exit(1)


__all__ = ["app", "main"]
