"""Every command's --help prints what the code says: bracketed text of the help strings survives the console
markup, option values are named in a person's words, and commands are listed in the order of the workflow."""

from __future__ import annotations

import re

import pytest
import typer
from typer.testing import CliRunner

from lakefeed.cli import WORKFLOW_ORDER, app

runner = CliRunner()
_BRACKETED = re.compile(r"\[[^\]\n]*\]")


def _commands() -> list[str]:
    """Every command as its words on the command line (``schedule show`` for a group's command)."""
    names = [info.name or info.callback.__name__ for info in app.registered_commands]
    for group in app.registered_groups:
        names += [f"{group.name} {c.name}" for c in group.typer_instance.registered_commands]
    return names


def _top_level() -> list[str]:
    return [info.name or info.callback.__name__ for info in app.registered_commands] + [
        g.name for g in app.registered_groups
    ]


def _help(*args: str) -> str:
    done = runner.invoke(app, [*args, "--help"], env={"COLUMNS": "400", "TERMINAL_WIDTH": "400"})
    assert done.exit_code == 0, done.output
    # undo the help box's layout: frame characters and line wrapping
    return " ".join(re.sub(r"[│╭╮╰╯─]", " ", done.output).split())


def _bracketed(text: str | None) -> list[str]:
    """Bracketed pieces of a help string as the code writes it (markup escapes undone)."""
    plain = (text or "").replace("\\[", "[")
    return [" ".join(m.split()) for m in _BRACKETED.findall(plain)]


@pytest.mark.parametrize("name", _commands())
def test_help_keeps_every_bracketed_piece(name: str) -> None:
    command = typer.main.get_command(app)
    for word in name.split():
        command = command.commands[word]  # type: ignore[attr-defined]
    shown = _help(*name.split())
    pieces = _bracketed(command.help) + [p for param in command.params for p in _bracketed(param.help)]
    for piece in pieces:
        assert piece in shown, f"`lakefeed {name} --help` lost {piece!r}"
    assert not re.search(r"[\w)] \.( |$)", shown), f"`lakefeed {name} --help` has a help text ending in ' .'"


@pytest.mark.parametrize("name", _commands())
def test_help_names_values_in_words(name: str) -> None:
    shown = _help(*name.split())
    for python_name in ("<list[", "<int", "<float", "<str>", "<bool>"):
        options_part = shown.split("Options", 1)[-1].replace("--help <bool>", "")
        assert python_name not in options_part, f"`lakefeed {name} --help` shows {python_name!r}"


def test_scenes_help_shows_the_pattern_example() -> None:
    """The example pattern of --filename-pattern keeps its character classes."""
    assert r"'(?P<sensor>[a-z]+)_(?P<date>\d{8})_(?P<asset>[a-z]+)\.tif'" in _help("scenes")


def test_commands_listed_in_workflow_order() -> None:
    names = _top_level()
    known = [n for n in names if n in WORKFLOW_ORDER]
    assert known == [n for n in WORKFLOW_ORDER if n in names]
    assert names[:6] == ["init", "check", "build", "refresh", "report", "query"]
    done = runner.invoke(app, ["--help"], env={"COLUMNS": "400", "TERMINAL_WIDTH": "400"})
    listed = [m.group(1) for m in re.finditer(r"^│ (\w+) +\S", done.output.split("Commands", 1)[1], re.M)]
    assert listed == names


@pytest.mark.parametrize("command", _commands())
def test_arguments_are_named_in_words_too(command: str) -> None:
    """Arguments as well as options: no Python type names such as <list[Path]>, <path> or <str>."""
    text = _help(*command.split())
    assert not re.search(r"<(list\[|path|str|int|float)", text), text
