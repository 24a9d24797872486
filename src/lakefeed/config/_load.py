"""Load configuration YAML into validated models, reporting every problem at once.

The only module of :mod:`lakefeed.config` that reads files. Paths in the YAML are resolved
relative to the YAML file; ``$VAR``, ``${VAR}`` and ``${VAR:-default}`` are expanded.
Unknown keys are rejected with a did-you-mean suggestion; each problem names the file, the
key path and (for YAML syntax errors) the line.
"""

from __future__ import annotations

import difflib
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import yaml
from pydantic import BaseModel, ValidationError

from lakefeed.config.lake import LakeConfig
from lakefeed.config.sources import SourcesConfig
from lakefeed.exceptions import ConfigError

__all__ = ["Project", "expand_env", "load_lake", "load_project", "load_projects", "load_sources"]

_ENV = re.compile(
    r"\$(?:\{(?P<braced>[A-Za-z_][A-Za-z0-9_]*)(?::-(?P<default>[^}]*))?\}|(?P<bare>[A-Za-z_][A-Za-z0-9_]*))"
)


@dataclass(frozen=True)
class Project:
    """A lake with its sources, as the stages receive it.

    ``lake_file`` and ``sources_file`` are kept for provenance (config hash) and messages.
    """

    lake: LakeConfig
    sources: SourcesConfig
    lake_file: Path
    sources_file: Path

    @property
    def id(self) -> str:
        """The lake's id (a plain slug)."""
        return self.lake.id


def expand_env(text: str, *, where: str = "") -> str:
    """Expand ``$VAR``, ``${VAR}`` and ``${VAR:-default}``; an unset variable without default is an error."""

    def repl(m: re.Match[str]) -> str:
        name = m.group("braced") or m.group("bare")
        if name in os.environ:
            return os.environ[name]
        if m.group("default") is not None:
            return m.group("default")
        raise ConfigError(
            f"{where}: environment variable {name!r} is not set; set it or write ${{{name}:-default}} in the config"
        )

    return _ENV.sub(repl, text)


def _read_yaml(path: Path) -> dict[str, Any]:
    if not path.exists():
        raise ConfigError(f"config file not found: {path}; check the path (relative paths start at the current folder)")
    try:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
    except yaml.MarkedYAMLError as err:
        mark = err.problem_mark
        line = f" line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        raise ConfigError(f"{path}:{line}: YAML syntax error: {err.problem}; fix the YAML there") from err
    except yaml.YAMLError as err:
        raise ConfigError(f"{path}: YAML error: {err}") from err
    if data is None:
        raise ConfigError(f"{path}: the file is empty; see config/ for an example")
    if not isinstance(data, dict):
        raise ConfigError(f"{path}: the top level must be a mapping of keys, got {type(data).__name__}")
    return data


def _fields_at(model: type[BaseModel], loc: tuple[Any, ...]) -> list[str]:
    """Field names allowed at ``loc`` (for did-you-mean), walking nested models."""
    current: Any = model
    for part in loc[:-1]:
        if isinstance(part, int):
            continue
        if not (isinstance(current, type) and issubclass(current, BaseModel)):
            return []
        field = current.model_fields.get(str(part))
        if field is None:
            return []
        current = _inner_model(field.annotation)
        if current is None:
            return []
    if isinstance(current, type) and issubclass(current, BaseModel):
        return list(current.model_fields)
    return []


def _inner_model(annotation: Any) -> type[BaseModel] | None:
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in getattr(annotation, "__args__", ()) or ():
        found = _inner_model(arg)
        if found is not None:
            return found
    return None


def _problems(err: ValidationError, model: type[BaseModel], path: Path) -> list[str]:
    out = []
    for e in err.errors():
        loc = tuple(e["loc"])
        key = ".".join(str(p) for p in loc) or "(top level)"
        if e["type"] == "extra_forbidden":
            allowed = _fields_at(model, loc)
            guess = difflib.get_close_matches(str(loc[-1]), allowed, n=1)
            hint = f"; did you mean {guess[0]!r}?" if guess else f"; allowed keys: {', '.join(allowed)}"
            out.append(f"{path}: {key}: unknown key{hint}")
        elif e["type"] == "missing":
            out.append(f"{path}: {key}: required key is missing")
        else:
            msg = e["msg"].removeprefix("Value error, ")
            out.append(f"{path}: {key}: {msg} (got {e.get('input')!r})")
    return out


def _resolve_paths(data: Any, base: Path, where: str, problems: list[str], key: str = "") -> Any:
    """Expand env vars in every string; make values of path-like keys absolute."""
    if isinstance(data, dict):
        return {k: _resolve_paths(v, base, where, problems, f"{key}.{k}" if key else str(k)) for k, v in data.items()}
    if isinstance(data, list):
        return [_resolve_paths(v, base, where, problems, f"{key}[{i}]") for i, v in enumerate(data)]
    if isinstance(data, str):
        try:
            value = expand_env(data, where=f"{where}: {key}")
        except ConfigError as err:
            problems.append(str(err))
            return data
        last = key.rsplit(".", 1)[-1].split("[")[0]
        if last in _PATH_KEYS and "://" not in value:
            p = Path(value).expanduser()
            value = str(p if p.is_absolute() else (base / p))
        return value
    return data


_PATH_KEYS = {"path", "paths", "sources", "catalog", "folder", "flow_path", "store"}
_PATH_KEYS_IN_MAPS = {"files"}


def _resolve_file_maps(data: dict[str, Any], base: Path) -> None:
    hyd = data.get("hydrology")
    if isinstance(hyd, dict) and isinstance(hyd.get("files"), dict):
        hyd["files"] = {
            k: str(Path(v) if Path(v).is_absolute() else base / v) if isinstance(v, str) else v
            for k, v in hyd["files"].items()
        }


def _validate(model: type[BaseModel], data: dict[str, Any], path: Path, problems: list[str]) -> Any:
    try:
        return model.model_validate(data)
    except ValidationError as err:
        problems.extend(_problems(err, model, path))
        return None


def load_sources(path: str | Path) -> SourcesConfig:
    """Load and validate a sources YAML file. Raises :class:`ConfigError` listing all problems."""
    path = Path(path).resolve()
    data = _read_yaml(path)
    problems: list[str] = []
    data = _resolve_paths(data, path.parent, str(path), problems)
    _resolve_file_maps(data, path.parent)
    model = _validate(SourcesConfig, data, path, problems)
    if problems:
        raise ConfigError(f"{path}: {len(problems)} problem(s) in the sources configuration", problems)
    return model


def load_lake(path: str | Path) -> LakeConfig:
    """Load and validate a lake YAML file. Raises :class:`ConfigError` listing all problems."""
    path = Path(path).resolve()
    data = _read_yaml(path)
    problems: list[str] = []
    data = _resolve_paths(data, path.parent, str(path), problems)
    model = _validate(LakeConfig, data, path, problems)
    if problems:
        raise ConfigError(f"{path}: {len(problems)} problem(s) in the lake configuration", problems)
    return model


def load_project(lake_path: str | Path) -> Project:
    """Load a lake config and the sources file it names (``sources:`` key)."""
    lake_path = Path(lake_path).resolve()
    problems: list[str] = []
    lake = sources = None
    try:
        lake = load_lake(lake_path)
    except ConfigError as err:
        problems.extend(err.problems or [str(err)])
    if lake is not None:
        try:
            sources = load_sources(lake.sources)
        except ConfigError as err:
            problems.extend(err.problems or [str(err)])
    if problems or lake is None or sources is None:
        raise ConfigError(f"{lake_path}: the configuration has {len(problems)} problem(s)", problems)
    return Project(lake=lake, sources=sources, lake_file=lake_path, sources_file=Path(lake.sources))


def load_projects(paths: list[str | Path]) -> list[Project]:
    """Load several lake configs (files or folders of ``*.yaml`` lake files); all problems at once.

    In a folder, files whose top level has an ``id`` key are lake configs; others are skipped.
    Duplicate lake ids are an error.
    """
    files: list[Path] = []
    for p in map(Path, paths):
        if p.is_dir():
            for f in sorted(p.glob("*.y*ml")):
                try:
                    if "id" in (yaml.safe_load(f.read_text(encoding="utf-8")) or {}):
                        files.append(f)
                except yaml.YAMLError:
                    files.append(f)
        else:
            files.append(p)
    problems: list[str] = []
    projects: list[Project] = []
    for f in files:
        try:
            projects.append(load_project(f))
        except ConfigError as err:
            problems.extend(err.problems or [str(err)])
    seen: dict[str, Path] = {}
    for pr in projects:
        if pr.id in seen:
            problems.append(f"{pr.lake_file}: id: lake id {pr.id!r} is also used by {seen[pr.id]}")
        seen[pr.id] = pr.lake_file
    if not files:
        problems.append(f"no lake configuration found in {[str(p) for p in paths]}")
    if problems:
        raise ConfigError(f"{len(problems)} configuration problem(s)", problems)
    return projects
