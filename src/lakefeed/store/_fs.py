"""Filesystem access for the store: a local folder or any fsspec URL, and content hashes."""

from __future__ import annotations

import hashlib
import os
from typing import Any

import fsspec
from fsspec.implementations.local import LocalFileSystem

__all__ = ["file_digest", "is_local", "resolve"]


def resolve(root: str | os.PathLike[str], storage_options: dict[str, Any] | None = None) -> tuple[Any, str]:
    """(filesystem, path without protocol) for a store root (folder or fsspec URL)."""
    options = dict(storage_options or {})
    if str(root).startswith(("s3://", "s3a://")):  # other processes replace objects: no stale cached listings
        options.setdefault("use_listings_cache", False)
    fs, path = fsspec.core.url_to_fs(str(root), **options)
    return fs, path.rstrip("/") or "/"


def is_local(fs: Any) -> bool:
    """True for the local filesystem (where os.replace gives atomic moves and flock works)."""
    return isinstance(fs, LocalFileSystem)


def file_digest(path: str | os.PathLike[str], *, chunk: int = 1 << 20) -> str:
    """SHA-256 (hex) of a file's bytes (local path or fsspec URL), streamed."""
    h = hashlib.sha256()
    with fsspec.open(str(path), "rb") as f:
        while block := f.read(chunk):
            h.update(block)
    return h.hexdigest()
