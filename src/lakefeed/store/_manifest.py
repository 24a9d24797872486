"""The store manifest ``<store>/_manifest.json``: provenance of every table partition.

One JSON document per store: ``schema_version`` (of the store layout and manifest),
``package_version`` (lakefeed that last wrote), and per table and lake: rows, columns, time
column and time range, config hash, content hashes of every input file, the content hash of
the written file, and free-form metadata. No timestamps, so the same inputs give the same
manifest (idempotent writes). A store with a newer schema version than this lakefeed knows is
refused.
"""

from __future__ import annotations

import json
import os
import uuid
from typing import Any

from lakefeed import __version__
from lakefeed.exceptions import StoreError

__all__ = ["MANIFEST_NAME", "SCHEMA_VERSION", "check_schema_version", "read_manifest", "write_manifest"]

#: Version of the store layout and manifest this lakefeed writes and reads.
SCHEMA_VERSION = 1
MANIFEST_NAME = "_manifest.json"


def empty_manifest() -> dict[str, Any]:
    """A manifest for a new store."""
    return {"schema_version": SCHEMA_VERSION, "package_version": __version__, "tables": {}}


def check_schema_version(manifest: dict[str, Any], root: str) -> None:
    """Raise :class:`StoreError` when the store was written by a newer schema version."""
    version = manifest.get("schema_version")
    if not isinstance(version, int):
        raise StoreError(f"store {root!r}: manifest has no valid schema_version ({version!r}); the store is damaged")
    if version > SCHEMA_VERSION:
        raise StoreError(
            f"store {root!r} was written with store schema version {version} by lakefeed "
            f"{manifest.get('package_version', '?')}; this lakefeed ({__version__}) reads up to version "
            f"{SCHEMA_VERSION}. Upgrade lakefeed, or use a new store folder."
        )


_CACHE: dict[str, tuple[tuple[int, int, int], dict[str, Any]]] = {}


def read_manifest(fs: Any, root: str, *, shared: bool = False) -> dict[str, Any]:
    """The store's manifest (an empty one when the store has none); checks the schema version.

    Local manifests are parsed once per version (cached on inode, size and modification time; the
    manifest is always replaced by a rename, so a new version has a new inode). ``shared=True`` returns
    the cached object itself (read-only use: do not modify it); otherwise a fresh copy.
    """
    path = f"{root}/{MANIFEST_NAME}"
    key = None
    if _is_local(fs):
        try:
            st = os.stat(path)
        except FileNotFoundError:
            return empty_manifest()
        key = (st.st_ino, st.st_size, st.st_mtime_ns)
        hit = _CACHE.get(path)
        if hit is not None and hit[0] == key:
            return hit[1] if shared else _copy(hit[1])
    elif not fs.exists(path):
        return empty_manifest()
    try:
        with fs.open(path, "rb") as f:
            manifest = json.loads(f.read())
    except (OSError, ValueError) as err:
        raise StoreError(f"store manifest {path} cannot be read ({err}); restore it or rebuild the store") from err
    check_schema_version(manifest, root)
    if key is not None:
        _CACHE[path] = (key, manifest)
        return manifest if shared else _copy(manifest)
    return manifest


def _copy(manifest: dict[str, Any]) -> dict[str, Any]:
    """A copy whose top level, ``tables`` and per-table dicts are new: a writer replaces a partition's
    entry (never edits one in place), so the entries themselves can be shared."""
    tables = {t: dict(v) for t, v in manifest.get("tables", {}).items()}
    return {**manifest, "tables": tables}


def _is_local(fs: Any) -> bool:
    from lakefeed.store._fs import is_local

    return is_local(fs)


def write_manifest(fs: Any, root: str, manifest: dict[str, Any], *, local: bool) -> None:
    """Write the manifest atomically (aside, then replace); keys sorted for stable bytes."""
    manifest = dict(manifest, schema_version=SCHEMA_VERSION, package_version=__version__)
    data = json.dumps(manifest, sort_keys=True, separators=(",", ":"), default=str).encode()  # C encoder: fast
    path = f"{root}/{MANIFEST_NAME}"
    tmp = f"{root}/.tmp-manifest-{uuid.uuid4().hex}.json"
    with fs.open(tmp, "wb") as f:
        f.write(data)
    if local:
        os.replace(tmp, path)
        st = os.stat(path)
        _CACHE[path] = ((st.st_ino, st.st_size, st.st_mtime_ns), manifest)
    else:
        fs.mv(tmp, path)
