"""The typer application shared by all subcommand modules."""

from __future__ import annotations

import os
import sys
from pathlib import Path
from typing import Any

import typer
from rich.console import Console
from typer.core import TyperArgument

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

#: Metavars in a person's words, by parameter name (exact), then by name ending, then by type.
_METAVAR_BY_NAME = {
    "store": "DIR",
    "directory": "DIR",
    "folder": "DIR",
    "config_dir": "DIR",
    "weights_cache": "DIR",
    "config": "FILE",
    "sources": "FILE",
    "catalog": "PATH",
    "sql": "SQL",
    "timezone": "ZONE",
    "tz": "ZONE",
    "cron": "CRON",
    "dask_address": "ADDRESS",
    "filename_pattern": "REGEX",
    "wait": "SECONDS",
    "port": "PORT",
    "seed": "N",
    "years": "YEARS",
    "reset_hour": "HOUR",
    "shore_buffer": "METRES",
    "min_valid_fraction": "FRACTION",
    "limit": "ROWS",
    "units": "UNIT",
    "column": "ROLE=HEADER",
}
_METAVAR_BY_ENDING = (("_days", "DAYS"), ("_id", "ID"), ("_field", "FIELD"), ("_fraction", "FRACTION"))
_METAVAR_BY_TYPE = {Path: "PATH", int: "N", float: "NUMBER", str: "TEXT"}


def _metavar(name: str, annotation: object) -> str | None:
    """A person's word for a parameter's value (None: leave typer's own, e.g. for choices)."""
    import typing

    args = [a for a in typing.get_args(annotation) if a is not type(None)]
    if len(args) == 1 and typing.get_origin(annotation) is not list:  # X | None
        return _metavar(name, args[0])
    if typing.get_origin(annotation) is list:
        inner = (_metavar(name, args[0]) if args else None) or "VALUE"
        return f"{'FILE' if args and args[0] is Path else inner}..."
    if annotation is bool:
        return ""  # a flag takes no value
    if name in _METAVAR_BY_NAME:
        return _METAVAR_BY_NAME[name]
    for ending, word in _METAVAR_BY_ENDING:
        if name.endswith(ending):
            return word
    return _METAVAR_BY_TYPE.get(annotation)  # type: ignore[call-overload]


def _argument_type(self: TyperArgument, ctx: Any) -> str | None:
    """The type column of an argument in a person's words (typer shows the annotation, e.g. ``<list[str]>``)."""
    return _metavar(self.name or "", self.type_descriptor.annotation) or _TYPER_ARGUMENT_TYPE(self, ctx)


# typer 0.29 takes an argument's type column from its annotation and ignores its metavar: name it ourselves
_TYPER_ARGUMENT_TYPE = TyperArgument.display_type_rich
TyperArgument.display_type_rich = _argument_type  # type: ignore[method-assign]


def finish_help(application: typer.Typer) -> None:
    """Make every command's help print what the code says: rich markup in help texts escaped (so ``[a-z]`` and
    ``[default: ...]`` show), and option values named in a person's words (``DIR``, ``FILE...``, ``DAYS``).

    Call once, after every command is registered.
    """
    import inspect
    import typing

    from rich.markup import escape
    from typer.models import ArgumentInfo, OptionInfo

    for group in application.registered_groups:
        if group.typer_instance is not None:
            finish_help(group.typer_instance)
    for info in application.registered_commands:
        callback = info.callback
        if callback is None:
            continue
        doc = info.help or inspect.getdoc(callback)
        if doc:
            info.help = escape(doc)
        hints = typing.get_type_hints(callback)
        for name, param in inspect.signature(callback).parameters.items():
            spec = param.default
            if not isinstance(spec, OptionInfo | ArgumentInfo):
                continue
            if spec.help:
                spec.help = escape(spec.help)
            if spec.metavar is None:
                word = _metavar(name, hints.get(name))
                if isinstance(spec, ArgumentInfo):
                    word = name.upper()  # typer adds "..." to one taking many values
                if word is not None:
                    spec.metavar = word
