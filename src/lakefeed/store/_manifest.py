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


def read_manifest(fs: Any, root: str) -> dict[str, Any]:
    """The store's manifest (an empty one when the store has none); checks the schema version."""
    path = f"{root}/{MANIFEST_NAME}"
    if not fs.exists(path):
        return empty_manifest()
    try:
        with fs.open(path, "rb") as f:
            manifest = json.loads(f.read())
    except (OSError, ValueError) as err:
        raise StoreError(f"store manifest {path} cannot be read ({err}); restore it or rebuild the store") from err
    check_schema_version(manifest, root)
    return manifest


def write_manifest(fs: Any, root: str, manifest: dict[str, Any], *, local: bool) -> None:
    """Write the manifest atomically (aside, then replace); keys sorted for stable bytes."""
    import os

    manifest = dict(manifest, schema_version=SCHEMA_VERSION, package_version=__version__)
    data = json.dumps(manifest, indent=1, sort_keys=True, default=str).encode()
    path = f"{root}/{MANIFEST_NAME}"
    tmp = f"{root}/.tmp-manifest-{uuid.uuid4().hex}.json"
    with fs.open(tmp, "wb") as f:
        f.write(data)
    if local:
        os.replace(tmp, path)
    else:
        fs.mv(tmp, path)
