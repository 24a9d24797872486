"""Read one YAML configuration file: data, the line of every key, and duplicate keys.

Takes a path; returns plain Python data plus a map from key path (tuple of keys and list
indices) to its 1-based line number, so validation problems can point at a line. Raises
:class:`~lakefeed.exceptions.ConfigError` for missing files, syntax errors (with line and
column) and duplicate keys (which plain YAML loaders silently collapse to the last value).
Must not validate content: that is the models' job.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import yaml

from lakefeed.exceptions import ConfigError

__all__ = ["KeyLines", "line_of", "read_yaml"]

#: Key path (keys and list indices) -> 1-based line number in the file.
KeyLines = dict[tuple[Any, ...], int]


def _walk(node: yaml.Node, prefix: tuple[Any, ...], lines: KeyLines, dups: list[str]) -> None:
    if isinstance(node, yaml.MappingNode):
        seen: dict[str, int] = {}
        for key_node, value_node in node.value:
            key = key_node.value
            line = key_node.start_mark.line + 1
            if key in seen:
                where = ".".join(str(p) for p in (*prefix, key))
                dups.append(f"{where} (line {line}): duplicate key; it was already given on line {seen[key]}")
            seen[key] = line
            lines[(*prefix, key)] = line
            _walk(value_node, (*prefix, key), lines, dups)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            lines[(*prefix, i)] = item.start_mark.line + 1
            _walk(item, (*prefix, i), lines, dups)


def read_yaml(path: Path, *, what: str = "config file") -> tuple[dict[str, Any], KeyLines]:
    """Parse a YAML mapping and index the line of every key.

    Parameters
    ----------
    path
        The YAML file.
    what
        What the file is, for messages (``"lake config"``, ``"sources config"``).

    Returns
    -------
    (data, lines)
        The mapping and a map from key path to 1-based line number.

    Raises
    ------
    ConfigError
        File missing or unreadable, YAML syntax error (line, column), duplicate keys, empty
        file, or a top level that is not a mapping.
    """
    if not path.exists():
        raise ConfigError(f"{what} not found: {path}; check the path (relative paths start at the current folder)")
    if path.is_dir():
        raise ConfigError(f"{what} {path} is a folder; give a YAML file")
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise ConfigError(f"{path}: cannot read the {what}: {err}") from err
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
        data = yaml.safe_load(text)
    except yaml.MarkedYAMLError as err:
        mark = err.problem_mark or err.context_mark
        at = f" line {mark.line + 1}, column {mark.column + 1}:" if mark else ""
        problem = err.problem or err.context or "invalid YAML"
        raise ConfigError(f"{path}:{at} YAML syntax error: {problem}; fix the YAML there") from err
    except yaml.YAMLError as err:
        raise ConfigError(f"{path}: YAML error: {err}") from err
    if data is None:
        raise ConfigError(f"{path}: the {what} is empty; see config/ for an example")
    if not isinstance(data, dict):
        raise ConfigError(f"{path}: the top level must be a mapping of keys, got {type(data).__name__}")
    lines: KeyLines = {}
    dups: list[str] = []
    if node is not None:
        _walk(node, (), lines, dups)
    if dups:
        raise ConfigError(f"{path}: {len(dups)} duplicate key(s)", [f"{path}: {d}" for d in dups])
    return data, lines


def line_of(lines: KeyLines, loc: tuple[Any, ...]) -> int | None:
    """Line of the deepest key of ``loc`` found in ``lines`` (None if none is)."""
    for n in range(len(loc), 0, -1):
        line = lines.get(tuple(loc[:n]))
        if line is not None:
            return line
    return None
