"""Provenance of a stage's tables: content hashes of the raw input files and the config hash.

Takes paths of the files a stage read and a :class:`~lakefeed.config.Project`; returns the
``inputs`` mapping (path -> SHA-256 of the file's bytes, via :func:`lakefeed.store.file_digest`) and
the ``config_hash`` (SHA-256 of the lake and sources YAML bytes) that
:meth:`lakefeed.store.Store.write_table` records in the manifest (docs/architecture.md, "Store tables": the
manifest holds input content hashes and the config hash). A directory (a Zarr store) hashes as the sorted list of its
files' relative paths and hashes. A file version already hashed in this process (same path, inode, size
and modification time, as the store does for its parts) is not read again: lakes computed together in one
process that name the same weather files hash them once. Must not: record anything but content hashes.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from lakefeed.config import Project

__all__ = ["config_hash", "input_hashes", "layer_paths"]

#: (path, inode, size, mtime ns) -> SHA-256 of the files hashed in this process (bounded).
_HASHED: dict[tuple[str, int, int, int], str] = {}
_HASHED_MAX = 100_000


def _file_hash(path: Path) -> str:
    from lakefeed.store import file_digest

    st = path.stat()
    key = (str(path), st.st_ino, st.st_size, st.st_mtime_ns)
    found = _HASHED.get(key)
    if found is None:
        if len(_HASHED) >= _HASHED_MAX:
            _HASHED.clear()
        found = _HASHED[key] = file_digest(path)
    return found


def _digest(path: Path) -> str:
    if not path.is_dir():
        return _file_hash(path)
    h = hashlib.sha256()
    for f in sorted(p for p in path.rglob("*") if p.is_file()):
        h.update(f"{f.relative_to(path).as_posix()}\0{_file_hash(f)}\n".encode())
    return h.hexdigest()


def input_hashes(paths: Iterable[str | os.PathLike[str] | None]) -> dict[str, str]:
    """Content hash (SHA-256 hex) per input file, keyed by its absolute path, sorted; None entries skipped.

    Files are hashed once each, however often they are listed; a path that does not exist is an
    error of the caller (the stage has just read it).
    """
    unique = sorted({str(Path(p).absolute()) for p in paths if p is not None})
    return {p: _digest(Path(p)) for p in unique}


def config_hash(project: Project) -> str:
    """SHA-256 (hex) of the lake YAML's bytes followed by the sources YAML's bytes."""
    h = hashlib.sha256()
    for path in (project.lake_file, project.sources_file):
        h.update(str(Path(path).name).encode() + b"\0")
        h.update(Path(path).read_bytes())
        h.update(b"\0")
    return h.hexdigest()


def layer_paths(*layers: object) -> list[Path]:
    """The ``path`` of each configured vector layer (objects with a ``path`` attribute; None skipped)."""
    out = []
    for layer in layers:
        path = getattr(layer, "path", None)
        if path is not None and "://" not in str(path):
            out.append(Path(path))
    return out
