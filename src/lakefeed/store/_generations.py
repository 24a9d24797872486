"""Store generations: what readers see, advanced by one atomic step per run, old ones kept then collected.

Writers change the entry files (``_manifest/<table>/<lake>.json``, the writers' view) and add part files;
readers never look at those. They read one published generation:

- ``_generations/<n>.json`` (immutable): for every table and lake, the version of its manifest entry and
  the live part files with their SHA-256;
- ``_generations/entries/<table>/<lake>/<id>.json`` (immutable, content-named): the entry versions;
- ``_generations/CURRENT.json``: the number of the current generation, replaced in one step (a rename
  locally, one PUT on an object store). Publishing a generation is writing that pointer.

A write first leaves a marker ``_generations/pending/<table>.<lake>`` (the partition has unpublished
changes); :func:`publish` turns the writers' entries of the marked partitions into the next generation,
moves the pointer, removes the markers and collects what the oldest generations no longer need: a
generation beyond the ``keep`` newest, part files and entry versions no kept generation and no writer's
entry lists, and temporary files of writers that died. A run killed before its publish leaves the
current generation as it was (its part files are never overwritten or removed: a writer gives a new part
a new name when a kept generation lists the old one); the next publish includes what it wrote.

A store without a generation (written by lakefeed before generations, schema version 2 or 1) is read
through its entry files as before, and gets its first generation, listing every entry, at its first publish.
Must not compute any science; the caller holds the store's writer lock for :func:`publish`.
"""

from __future__ import annotations

import hashlib
import json
import re
from collections.abc import Collection, Iterable, Mapping
from typing import Any

from lakefeed import __version__
from lakefeed.exceptions import StoreError
from lakefeed.store._manifest import (
    MANIFEST_NAME,
    SCHEMA_VERSION,
    check_schema_version,
    load_json,
    read_entry,
    read_manifest,
    write_json,
)
from lakefeed.store._parts import folder_names, glob_parts, live_parts, pending_files
from lakefeed.store.layout import partition_path

__all__ = [
    "DEFAULT_KEEP",
    "GEN_DIR",
    "collect",
    "current_generation",
    "generation_entry",
    "generations",
    "mark_pending",
    "protected_parts",
    "publish",
    "read_generation",
]

GEN_DIR = "_generations"
POINTER = "CURRENT.json"
#: Generations kept by default (the current one and the two before it) before they are collected.
DEFAULT_KEEP = 3
_NUMBER = re.compile(r"^(\d{8,})\.json$")

Key = tuple[str, str]


def _gen_path(root: str, n: int) -> str:
    return f"{root}/{GEN_DIR}/{n:08d}.json"


def _version_path(root: str, table: str, lake: str, ref: str) -> str:
    return f"{root}/{GEN_DIR}/entries/{table}/{lake}/{ref}.json"


def _pending_dir(root: str) -> str:
    return f"{root}/{GEN_DIR}/pending"


def current_generation(fs: Any, root: str) -> int | None:
    """Number of the store's current generation, or None for a store that has none yet."""
    doc = load_json(fs, f"{root}/{GEN_DIR}/{POINTER}")
    if doc is None:
        return None
    n = doc.get("generation") if isinstance(doc, dict) else None
    if not isinstance(n, int) or n < 1:
        raise StoreError(
            f"store {root!r}: {GEN_DIR}/{POINTER} names no valid generation ({doc!r}); the store is "
            "damaged: restore the file or run 'lakefeed verify --repair'"
        )
    return n


def read_generation(fs: Any, root: str, n: int) -> dict[str, Any]:
    """Generation ``n`` (read-only: shared with the cache)."""
    doc = load_json(fs, _gen_path(root, n), immutable=True)
    if doc is None:
        raise StoreError(
            f"store {root!r}: generation {n} is gone (collected after newer runs published); "
            "read the current generation"
        )
    check_schema_version(doc, root)
    return doc


def generation_entry(fs: Any, root: str, doc: Mapping[str, Any], table: str, lake: str) -> dict[str, Any] | None:
    """The manifest entry of one partition as generation ``doc`` published it (None: no such partition)."""
    ref = doc.get("partitions", {}).get(table, {}).get(lake)
    if ref is None:
        return None
    version = load_json(fs, _version_path(root, table, lake, ref["entry"]), immutable=True)
    if version is None:
        raise StoreError(
            f"store {root!r}: entry version {ref['entry']} of {table}/lake={lake} (generation "
            f"{doc.get('generation')}) is missing; the store is damaged"
        )
    check_schema_version(version, root)
    return version.get("entry")


def generations(fs: Any, root: str) -> list[int]:
    """Numbers of the generations present in the store, oldest first."""
    return sorted(int(m.group(1)) for n in folder_names(fs, f"{root}/{GEN_DIR}") if (m := _NUMBER.match(n)))


def protected_parts(fs: Any, root: str, table: str, lake: str) -> dict[str, str | None]:
    """Part files of a partition that some stored generation lists (name -> SHA-256): never to be overwritten."""
    out: dict[str, str | None] = {}
    for n in generations(fs, root):
        doc = load_json(fs, _gen_path(root, n), immutable=True) or {}
        for p in doc.get("partitions", {}).get(table, {}).get(lake, {}).get("parts", []):
            out[p["file"]] = p.get("sha256")
    return out


def mark_pending(fs: Any, root: str, table: str, lake: str, *, local: bool) -> None:
    """Note that a partition is being changed (before its first file is written; cleared by :func:`publish`)."""
    path = f"{_pending_dir(root)}/{table}.{lake}"
    if local:
        fs.makedirs(_pending_dir(root), exist_ok=True)
        if fs.exists(path):
            return
    fs.pipe_file(path, b"")


def _pending(fs: Any, root: str) -> set[Key]:
    out = set()
    for name in folder_names(fs, _pending_dir(root)):
        table, _, lake = name.partition(".")
        if table and lake and not name.startswith("."):
            out.add((table, lake))
    return out


def _listing(fs: Any, root: str, table: str, lake: str, entry: Mapping[str, Any]) -> list[dict[str, Any]]:
    hashes = {p["file"]: p.get("sha256") for p in entry.get("parts") or []}
    names = live_parts(entry, fs, partition_path(root, table, lake))
    return [{"file": n, "sha256": hashes.get(n)} for n in names]


def _add_version(fs: Any, root: str, table: str, lake: str, entry: dict[str, Any], *, local: bool) -> str:
    doc = {"schema_version": SCHEMA_VERSION, "package_version": __version__, "entry": entry}
    data = json.dumps(doc, sort_keys=True, separators=(",", ":"), default=str).encode()
    ref = hashlib.sha256(data).hexdigest()[:24]
    path = _version_path(root, table, lake, ref)
    if load_json(fs, path, immutable=True) is None:
        write_json(fs, path, doc, local=local)
    return ref


def publish(
    fs: Any, root: str, *, local: bool, only: Collection[Key] | None = None, keep: int = DEFAULT_KEEP
) -> int | None:
    """Make the writers' entries of the changed partitions the next generation, in one atomic step.

    Parameters
    ----------
    only
        Publish these partitions only (a single write outside a run); default: every partition with a
        pending marker (a whole run).
    keep
        Generations kept afterwards (the newest ones); older ones are collected.

    Returns
    -------
    int or None
        The current generation afterwards (unchanged when nothing changed; None for an empty store).
    """
    n = current_generation(fs, root)
    prev = read_generation(fs, root, n) if n is not None else None
    pending = _pending(fs, root)
    changed = set(pending if only is None else only)
    if prev is None:  # the first generation (a new store, or one written before generations) lists every entry
        changed |= {(t, lk) for t, lakes in read_manifest(fs, root)["tables"].items() for lk in lakes}
    partitions = {t: dict(lakes) for t, lakes in (prev or {}).get("partitions", {}).items()}
    for table, lake in sorted(changed):
        entry = read_entry(fs, root, table, lake)
        if entry is None:
            partitions.get(table, {}).pop(lake, None)
            continue
        ref = _add_version(fs, root, table, lake, entry, local=local)
        partitions.setdefault(table, {})[lake] = {"entry": ref, "parts": _listing(fs, root, table, lake, entry)}
    partitions = {t: lakes for t, lakes in partitions.items() if lakes}
    if prev is None or partitions != prev.get("partitions"):
        _upgrade_head(fs, root, keep, local=local)
        n = (n or 0) + 1
        doc = {
            "schema_version": SCHEMA_VERSION,
            "package_version": __version__,
            "generation": n,
            "partitions": partitions,
        }
        write_json(fs, _gen_path(root, n), doc, local=local)
        write_json(fs, f"{root}/{GEN_DIR}/{POINTER}", {"generation": n}, local=local)  # the atomic step
    for table, lake in sorted(changed & pending):
        try:
            fs.rm(f"{_pending_dir(root)}/{table}.{lake}")
        except FileNotFoundError:
            pass
    collect(fs, root, keep=keep, touched=changed)
    return n


def _upgrade_head(fs: Any, root: str, keep: int, *, local: bool) -> None:
    head = load_json(fs, f"{root}/{MANIFEST_NAME}") or {}
    if head.get("schema_version") != SCHEMA_VERSION or "tables" in head or head.get("keep_generations") != keep:
        new = {"schema_version": SCHEMA_VERSION, "package_version": __version__, "keep_generations": keep}
        write_json(fs, f"{root}/{MANIFEST_NAME}", new, local=local)


def _names_in(docs: Iterable[Mapping[str, Any]], table: str, lake: str) -> tuple[set[str], set[str]]:
    files, refs = set(), set()
    for doc in docs:
        ref = doc.get("partitions", {}).get(table, {}).get(lake)
        if ref:
            refs.add(ref["entry"])
            files |= {p["file"] for p in ref.get("parts", [])}
    return files, refs


def collect(fs: Any, root: str, *, keep: int = DEFAULT_KEEP, touched: Collection[Key] = ()) -> list[str]:
    """Remove the generations beyond the ``keep`` newest and the files only they needed; returns the paths removed.

    Looked at: the partitions in ``touched`` and those whose entry differs between a removed generation and
    the oldest kept one. In those, a part file (or entry version) that no kept generation and no writer's entry
    lists is removed, and so are temporary files of writers that died.
    """
    numbers = generations(fs, root)
    kept, dropped = numbers[-keep:], numbers[:-keep]
    kept_docs = [read_generation(fs, root, n) for n in kept]
    dropped_docs = [load_json(fs, _gen_path(root, n), immutable=True) or {} for n in dropped]
    oldest = kept_docs[0].get("partitions", {}) if kept_docs else {}
    look = set(touched)
    for doc in dropped_docs:
        for table, lakes in doc.get("partitions", {}).items():
            look |= {(table, lk) for lk, ref in lakes.items() if oldest.get(table, {}).get(lk) != ref}
    removed: list[str] = []
    for table, lake in sorted(look):
        files, refs = _names_in(kept_docs, table, lake)
        part_dir = partition_path(root, table, lake)
        try:
            files |= set(live_parts(read_entry(fs, root, table, lake), fs, part_dir))
        except StoreError:  # an unreadable writer's entry: keep every file of the partition
            continue
        names = folder_names(fs, part_dir)
        stale = [f"{part_dir}/{n}" for n in glob_parts(fs, part_dir, names) if n not in files]
        stale += [f"{part_dir}/{n}" for n in pending_files(names)]
        vdir = f"{root}/{GEN_DIR}/entries/{table}/{lake}"
        stale += [f"{vdir}/{n}" for n in folder_names(fs, vdir) if n.endswith(".json") and n[:-5] not in refs]
        removed += _remove(fs, stale)
    removed += _remove(fs, [_gen_path(root, n) for n in dropped])
    return removed


def _remove(fs: Any, paths: list[str]) -> list[str]:
    done = []
    for path in paths:
        try:
            fs.rm(path)
            done.append(path)
        except FileNotFoundError:
            pass
    return done
