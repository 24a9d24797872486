"""The store manifest: provenance of every table partition, one small file per table and lake.

- ``<store>/_manifest.json``: ``schema_version`` (of the store layout and manifest) and
  ``package_version`` (lakefeed that created or migrated the store).
- ``<store>/_manifest/<table>/<lake>.json``: the partition's entry: rows, columns, time column
  and range, config hash, content hashes of every input file, the live part files with their
  content hashes, and free-form metadata; plus the schema and package version that wrote it.

A write replaces one entry file (aside, then one rename; on an object store one PUT, which replaces an
object whole), so its cost does not grow with the number of lakes or tables in the store: with one
document for the whole store, a store of 200 lakes whose target tables list thousands of scene
files each would rewrite hundreds of MB at every
write. No timestamps, so the same inputs give the same bytes (idempotent writes). A store with a
newer schema version than this lakefeed knows is refused. Stores of schema version 1 (every entry
in ``_manifest.json``) are read as they are and split into entry files at their first write.

The entry files are the writers' view of the store. Readers read a published generation
(:mod:`lakefeed.store._generations`, schema version 3), which pins one version of every entry.
"""

from __future__ import annotations

import json
import os
import uuid
from typing import Any

from lakefeed import __version__
from lakefeed.exceptions import StoreError

__all__ = [
    "ENTRY_DIR",
    "MANIFEST_NAME",
    "SCHEMA_VERSION",
    "check_schema_version",
    "load_json",
    "read_entry",
    "read_head",
    "read_manifest",
    "write_entry",
    "write_json",
]

#: Version of the store layout and manifest this lakefeed writes and reads (2: one entry file per partition;
#: 3: published generations that readers read).
SCHEMA_VERSION = 3
MANIFEST_NAME = "_manifest.json"
ENTRY_DIR = "_manifest"


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


_CACHE: dict[str, tuple[tuple[int, int, int], Any]] = {}
_IMMUTABLE: dict[str, Any] = {}


def load_json(fs: Any, path: str, *, immutable: bool = False) -> Any | None:
    """A JSON file (None when absent). Local files are parsed once per version (cached on inode, size and
    modification time; files are always replaced by a rename, so a new version has a new inode); files that
    are never rewritten once written (``immutable``: generations, entry versions) once per process."""
    if immutable and path in _IMMUTABLE:
        return _IMMUTABLE[path]
    key = None
    if _is_local(fs):
        try:
            st = os.stat(path)
        except FileNotFoundError:
            return None
        key = (st.st_ino, st.st_size, st.st_mtime_ns)
        hit = _CACHE.get(path)
        if hit is not None and hit[0] == key:
            return hit[1]
    try:
        if key is None:  # one GET, no listing or version check (another process may have replaced the object)
            try:
                data = json.loads(fs.cat_file(path))
            except FileNotFoundError:
                return None
        else:
            with fs.open(path, "rb") as f:
                data = json.loads(f.read())
    except (OSError, ValueError) as err:
        raise StoreError(f"store manifest {path} cannot be read ({err}); restore it or rebuild the store") from err
    if immutable:
        if len(_IMMUTABLE) > 4096:
            _IMMUTABLE.clear()
        _IMMUTABLE[path] = data
    elif key is not None:
        if len(_CACHE) > 4096:
            _CACHE.clear()
        _CACHE[path] = (key, data)
    return data


def read_head(fs: Any, root: str) -> dict[str, Any]:
    """The top-level manifest (checked; an empty one when the store has none). Shared: do not modify."""
    head = load_json(fs, f"{root}/{MANIFEST_NAME}")
    if head is None:
        return empty_manifest()
    check_schema_version(head, root)
    return head


def read_entry(fs: Any, root: str, table: str, lake: str) -> dict[str, Any] | None:
    """One partition's entry, or None (read-only: do not modify it); checks the schema version."""
    head = read_head(fs, root)
    if "tables" in head and head.get("schema_version", 0) < 2:  # a version-1 store: every entry in the head
        return head.get("tables", {}).get(table, {}).get(lake)
    doc = load_json(fs, _entry_path(root, table, lake))
    if doc is None:
        return None
    check_schema_version(doc, root)
    return doc.get("entry")


def read_manifest(fs: Any, root: str) -> dict[str, Any]:
    """The whole manifest: schema and package version, and ``tables`` -> lake -> entry (reads every entry
    file: for listings and reports, not for one partition; see :func:`read_entry`). The entries are shared
    with the cache: read-only."""
    head = read_head(fs, root)
    out = {k: v for k, v in head.items() if k != "tables"}
    tables: dict[str, dict[str, Any]] = {t: dict(v) for t, v in head.get("tables", {}).items()}
    base = f"{root}/{ENTRY_DIR}"
    for table in _names(fs, base):
        for name in _names(fs, f"{base}/{table}"):
            if name.endswith(".json") and not name.startswith("."):
                doc = load_json(fs, f"{base}/{table}/{name}")
                if doc is not None:
                    check_schema_version(doc, root)
                    tables.setdefault(table, {})[name[: -len(".json")]] = doc.get("entry")
    out["tables"] = tables
    return out


def write_entry(fs: Any, root: str, table: str, lake: str, entry: dict[str, Any], *, local: bool) -> None:
    """Replace one partition's entry atomically (aside, then one rename); keys sorted for stable bytes.

    The first write to a store creates ``_manifest.json``; the first write to a version-1 store moves its
    entries into entry files first (each written atomically; the head is replaced last, so a crash in
    between leaves a version-1 store that the next write migrates again)."""
    head = load_json(fs, f"{root}/{MANIFEST_NAME}")
    if head is not None:
        check_schema_version(head, root)
    if head is not None and "tables" in head and head.get("schema_version", 0) < 2:
        for t, lakes in head["tables"].items():
            for lk, e in lakes.items():
                write_json(fs, _entry_path(root, t, lk), _entry_doc(e), local=local)
        head = None
    if head is None:
        write_json(
            fs,
            f"{root}/{MANIFEST_NAME}",
            {"schema_version": SCHEMA_VERSION, "package_version": __version__},
            local=local,
        )
    write_json(fs, _entry_path(root, table, lake), _entry_doc(entry), local=local)


def _entry_doc(entry: dict[str, Any]) -> dict[str, Any]:
    return {"schema_version": SCHEMA_VERSION, "package_version": __version__, "entry": entry}


def _entry_path(root: str, table: str, lake: str) -> str:
    return f"{root}/{ENTRY_DIR}/{table}/{lake}.json"


def _names(fs: Any, folder: str) -> list[str]:
    try:
        return sorted(p.rstrip("/").rsplit("/", 1)[-1] for p in fs.ls(folder, detail=False))
    except (FileNotFoundError, NotADirectoryError):
        return []


def write_json(fs: Any, path: str, doc: dict[str, Any], *, local: bool) -> None:
    """Replace a JSON file atomically (keys sorted for stable bytes): locally aside, then one rename; on other
    filesystems one whole-object write (an object store's PUT replaces an object in one step)."""
    data = json.dumps(doc, sort_keys=True, separators=(",", ":"), default=str).encode()  # C encoder: fast
    folder = path.rsplit("/", 1)[0]
    _CACHE.pop(path, None)
    _IMMUTABLE.pop(path, None)
    if not local:
        fs.pipe_file(path, data)
        return
    fs.makedirs(folder, exist_ok=True)
    tmp = f"{folder}/.tmp-manifest-{uuid.uuid4().hex}.json"
    with fs.open(tmp, "wb") as f:
        f.write(data)
    os.replace(tmp, path)


def _is_local(fs: Any) -> bool:
    from lakefeed.store._fs import is_local

    return is_local(fs)
