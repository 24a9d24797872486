"""Integrity of the store's part files: Parquet footer checks and content hashes against the manifest.

Takes a filesystem, a part file and the SHA-256 its manifest entry records; returns the file's
problem (None when intact) or its rows, read after the check. A damaged file raises
:class:`~lakefeed.exceptions.DamagedPartError` naming the table, lake and file.

- :func:`footer_problem` is cheap (the file's first and last bytes and its footer): it finds a
  truncated or overwritten end, not a damaged block inside the data;
- :func:`hash_problem` and :func:`read_checked` compare every byte with the manifest's hash.
  The bytes are read once (hashed, then parsed from memory), and a file already verified in this
  process is not hashed again while its inode, size and modification time are unchanged (a part is
  always replaced by a rename, so a new version has a new inode; writing into a file changes its
  modification time).

Must not compute any science.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Sequence
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq

from lakefeed.exceptions import DamagedPartError

__all__ = ["damaged", "footer_problem", "hash_problem", "mark_verified", "read_checked"]

_MAGIC = b"PAR1"
_VERIFIED: dict[str, tuple[Any, str]] = {}  # path -> (file stamp, sha256) of a version checked in this process


def damaged(path: str, problem: str) -> DamagedPartError:
    """The error for a damaged part file, with table and lake taken from its path (``<table>/lake=<id>/``)."""
    parts = path.replace("\\", "/").split("/")
    lake = parts[-2].split("=", 1)[-1] if len(parts) >= 2 else "?"
    table = parts[-3] if len(parts) >= 3 else "?"
    return DamagedPartError(table, lake, path, problem)


def _stamp(fs: Any, local: bool, f: Any, path: str) -> Any:
    """Identity of the version of an open file: (inode, size, mtime) locally; size and mtime/ETag elsewhere."""
    if local:
        st = os.fstat(f.fileno())
        return (st.st_ino, st.st_size, st.st_mtime_ns)
    info = fs.info(path)
    tag = info.get("mtime") or info.get("LastModified") or info.get("ETag") or info.get("created")
    return (info.get("size"), str(tag)) if tag else None


def mark_verified(fs: Any, local: bool, path: str, sha256: str) -> None:
    """Record a file this process has just written (and hashed) as verified."""
    if local:
        st = os.stat(path)
        _VERIFIED[path] = ((st.st_ino, st.st_size, st.st_mtime_ns), sha256)


def footer_problem(fs: Any, path: str) -> str | None:
    """What is wrong with a part file's Parquet framing and footer, or None (cheap: a few KB are read)."""
    try:
        with fs.open(path, "rb") as f:
            size = f.seek(0, 2)
            if size < 12:
                return f"{size} bytes, too short for a Parquet file (truncated)"
            f.seek(0)
            head = f.read(4)
            f.seek(size - 8)
            tail = f.read(8)
            if head != _MAGIC or tail[4:] != _MAGIC:
                return "the Parquet magic bytes are missing at the start or end (truncated or overwritten)"
            length = int.from_bytes(tail[:4], "little")
            if length <= 0 or length > size - 12:
                return f"its footer length ({length} bytes) does not fit in the file ({size} bytes): truncated"
            f.seek(0)
            pq.ParquetFile(f).metadata  # noqa: B018 (parses the footer)
    except FileNotFoundError:
        return "the file is missing (listed in the manifest)"
    except (OSError, pa.ArrowException) as err:
        return f"its footer cannot be read ({err})"
    return None


def _hex(data: bytes | None, f: Any) -> str:
    h = hashlib.sha256()
    if data is not None:
        h.update(data)
    else:
        while block := f.read(1 << 20):
            h.update(block)
    return h.hexdigest()


def _mismatch(actual: str, expected: str) -> str:
    return (
        f"content hash {actual[:12]}... differs from the manifest's {expected[:12]}... "
        "(the bytes changed after the write)"
    )


def hash_problem(fs: Any, local: bool, path: str, sha256: str) -> str | None:
    """What is wrong with a part file's bytes (hash against the manifest's ``sha256``), or None."""
    try:
        with fs.open(path, "rb") as f:
            stamp = _stamp(fs, local, f, path)
            if stamp is not None and _VERIFIED.get(path) == (stamp, sha256):
                return None
            actual = _hex(None, f)
    except FileNotFoundError:
        return "the file is missing (listed in the manifest)"
    except OSError as err:
        return f"the file cannot be read ({err})"
    if actual != sha256:
        return _mismatch(actual, sha256)
    if stamp is not None:
        _VERIFIED[path] = (stamp, sha256)
    return None


def read_checked(fs: Any, local: bool, path: str, sha256: str | None, columns: Sequence[str] | None) -> pa.Table:
    """A part file's rows after checking its bytes against ``sha256`` (None: no hash recorded, only parsed).

    Raises :class:`DamagedPartError` when the bytes differ or the file is not valid Parquet, and
    ``FileNotFoundError`` when the file is gone (a concurrent rewrite: the caller re-reads the manifest).
    """
    cols = list(columns) if columns else None
    with fs.open(path, "rb") as f:
        try:
            stamp = _stamp(fs, local, f, path) if sha256 else None
            data = f.read()  # once: hashed (unless this version was checked already), then parsed from memory
            if sha256 and not (stamp is not None and _VERIFIED.get(path) == (stamp, sha256)):
                actual = _hex(data, None)
                if actual != sha256:
                    raise damaged(path, _mismatch(actual, sha256))
                if stamp is not None:
                    _VERIFIED[path] = (stamp, sha256)
            return pq.read_table(pa.BufferReader(data), columns=cols)
        except FileNotFoundError:
            raise
        except (OSError, pa.ArrowException) as err:
            raise damaged(path, f"not readable as Parquet ({err})") from err
