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

from lakefeed.config._yaml import KeyLines, line_of, read_yaml
from lakefeed.config.lake import LakeConfig
from lakefeed.config.sources import SourcesConfig
from lakefeed.exceptions import ConfigError

__all__ = ["Project", "expand_env", "find_lake_files", "load_lake", "load_project", "load_projects", "load_sources"]

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
            continue  # a key of a dict of models (e.g. a sensor label): stay on the same model
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


def _problems(err: ValidationError, model: type[BaseModel], path: Path, lines: KeyLines | None = None) -> list[str]:
    out = []
    for e in err.errors():
        loc = tuple(e["loc"])
        key = ".".join(str(p) for p in loc) or "(top level)"
        line = line_of(lines or {}, loc)
        if line is not None:
            key = f"{key} (line {line})"
        if e["type"] == "extra_forbidden":
            allowed = _fields_at(model, loc)
            guess = difflib.get_close_matches(str(loc[-1]), allowed, n=1)
            hint = f"; did you mean {guess[0]!r}?" if guess else f"; allowed keys: {', '.join(allowed)}"
            out.append(f"{path}: {key}: unknown key{hint}")
        elif e["type"] == "missing":
            out.append(f"{path}: {key}: required key is missing")
        else:
            msg = e["msg"].removeprefix("Value error, ")
            got = e.get("input")
            shown = "" if isinstance(got, dict | list) else f" (got {got!r})"
            out.append(f"{path}: {key}: {msg}{shown}")
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
            value = os.path.normpath(p if p.is_absolute() else (base / p))
        return value
    return data


_PATH_KEYS = {"path", "paths", "sources", "catalog", "folder", "flow_path", "store"}


def _resolve_file_maps(data: dict[str, Any], base: Path) -> None:
    hyd = data.get("hydrology")
    if isinstance(hyd, dict) and isinstance(hyd.get("files"), dict):
        hyd["files"] = {
            k: os.path.normpath(Path(v) if Path(v).is_absolute() else base / v)
            if isinstance(v, str) and "://" not in v
            else v
            for k, v in hyd["files"].items()
        }


def _validate(
    model: type[BaseModel], data: dict[str, Any], path: Path, problems: list[str], lines: KeyLines | None = None
) -> Any:
    try:
        return model.model_validate(data)
    except ValidationError as err:
        problems.extend(_problems(err, model, path, lines))
        return None


def load_sources(path: str | Path) -> SourcesConfig:
    """Load and validate a sources YAML file. Raises :class:`ConfigError` listing all problems."""
    path = Path(path).resolve()
    data, lines = read_yaml(path, what="sources config")
    problems: list[str] = []
    data = _resolve_paths(data, path.parent, str(path), problems)
    _resolve_file_maps(data, path.parent)
    model = _validate(SourcesConfig, data, path, problems, lines)
    if problems:
        raise ConfigError(f"{path}: {len(problems)} problem(s) in the sources configuration", problems)
    return model


def load_lake(path: str | Path) -> LakeConfig:
    """Load and validate a lake YAML file. Raises :class:`ConfigError` listing all problems."""
    path = Path(path).resolve()
    data, lines = read_yaml(path, what="lake config")
    problems: list[str] = []
    data = _resolve_paths(data, path.parent, str(path), problems)
    model = _validate(LakeConfig, data, path, problems, lines)
    if problems:
        raise ConfigError(f"{path}: {len(problems)} problem(s) in the lake configuration", problems)
    return model


def _sources_path_of(lake_path: Path) -> Path | None:
    """The sources file a lake YAML names, read leniently (for reporting when the lake config is invalid)."""
    try:
        data, _ = read_yaml(lake_path)
    except ConfigError:
        return None
    raw = data.get("sources")
    if not isinstance(raw, str):
        return None
    try:
        raw = expand_env(raw)
    except ConfigError:
        return None
    p = Path(raw).expanduser()
    return p if p.is_absolute() else lake_path.parent / p


def load_project(lake_path: str | Path) -> Project:
    """Load a lake config and the sources file it names (``sources:`` key).

    Both files are validated even when the other one has problems, so that every problem
    is reported at once. Raises :class:`ConfigError` listing them, each with file and key path.
    """
    lake_path = Path(lake_path).resolve()
    problems: list[str] = []
    lake = sources = None
    try:
        lake = load_lake(lake_path)
    except ConfigError as err:
        problems.extend(err.problems or [str(err)])
    sources_path = Path(lake.sources) if lake is not None else _sources_path_of(lake_path)
    if sources_path is not None:
        if not sources_path.exists():
            problems.append(
                f"{lake_path}: sources: sources config not found: {sources_path}; "
                "fix the 'sources' key (relative paths start at the lake config's folder)"
            )
        else:
            try:
                sources = load_sources(sources_path)
            except ConfigError as err:
                problems.extend(err.problems or [str(err)])
    if problems or lake is None or sources is None:
        raise ConfigError(f"{lake_path}: the configuration has {len(problems)} problem(s)", problems)
    return Project(lake=lake, sources=sources, lake_file=lake_path, sources_file=Path(lake.sources))


def _looks_like_lake_config(path: Path) -> bool:
    if path.name.lower().startswith("lake"):
        return True
    try:
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
    except (yaml.YAMLError, OSError, UnicodeDecodeError):
        return False
    if not isinstance(data, dict):
        return False
    keys = set(map(str, data))
    return "id" in keys or len(keys & set(LakeConfig.model_fields)) >= 2


def find_lake_files(paths: list[str | Path]) -> list[Path]:
    """Lake config files among ``paths`` (files, or folders searched for ``*.yaml``/``*.yml``).

    In a folder, a YAML file is taken as a lake config when its name starts with ``lake``
    (``lake-<id>.yaml``, checked even if broken, so its problems are shown), or when its top
    level has an ``id`` key or at least two lake config keys. Sources files and other YAML
    files are left alone. Files named directly are always taken, even if missing (the loader
    then reports that).
    """
    files: list[Path] = []
    for p in map(Path, paths):
        if not p.is_dir():
            files.append(p)
            continue
        found = sorted({*p.glob("*.yaml"), *p.glob("*.yml")})
        files += [f for f in found if _looks_like_lake_config(f)]
    return files


def load_projects(paths: list[str | Path]) -> list[Project]:
    """Load several lake configs (files or folders of ``*.yaml`` lake files); all problems at once.

    Folders are searched as :func:`find_lake_files` says. Duplicate lake ids are an error.
    """
    files = find_lake_files(paths)
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
