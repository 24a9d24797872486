"""Store locks: a run lock (one run or writing command per store) and a writer lock (one write at a time).

:func:`run_lock` (``<store>/.run.lock``) is held for a whole run or command that writes (``build``,
``refresh``, ``features``, ``forecast``, ``verify --repair``): a second one waits, then refuses naming the
holder. It is an OS file lock, released when the holding process dies; it is not re-entrant (a second
hold in the same process is refused too). A store that cannot be written gets one clear message here,
before any work.

:func:`writer_lock` (``<store>/.lock``) is taken by every single store write. Local stores use
``fcntl.flock`` on ``<store>/.lock`` (released by the OS if the writer
dies) plus a per-process re-entrant lock (threads of one process, nested use). Other fsspec
filesystems (object stores) get a lock object created by a conditional PUT (only if absent), naming its
holder and an expiry (``stale_after`` seconds), removed on release; an expired lock (a writer that died) is
taken over by a PUT conditional on its ETag, so a dead writer never blocks the store for ever.
A second writer waits up to ``timeout`` seconds,
then gets a :class:`StoreError` naming the holder.
"""

from __future__ import annotations

import json
import os
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from lakefeed.exceptions import StoreError
from lakefeed.store._fs import is_local
from lakefeed.store.location import store_location_problem

__all__ = ["LOCK_NAME", "RUN_LOCK_NAME", "run_lock", "writer_lock"]

LOCK_NAME = ".lock"
RUN_LOCK_NAME = ".run.lock"
_REGISTRY: dict[str, list[Any]] = {}  # lock path -> [RLock, depth, fd]
_REGISTRY_GUARD = threading.Lock()


def _holder(fs: Any, path: str) -> str:
    try:
        with fs.open(path, "rb") as f:
            info = json.loads(f.read() or b"{}")
        return f"pid {info.get('pid')} on {info.get('host')} since {info.get('since')}"
    except (OSError, ValueError):
        return "another writer"


def _stamp(expire_after: float | None = None) -> bytes:
    doc: dict[str, Any] = {
        "pid": os.getpid(),
        "host": os.uname().nodename,
        "since": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
    }
    if expire_after is not None:
        doc["expires"] = time.time() + expire_after
    return json.dumps(doc).encode()


@contextmanager
def writer_lock(fs: Any, root: str, *, timeout: float = 300.0, stale_after: float = 3600.0) -> Iterator[None]:
    """Hold the store's writer lock for the duration of the block (re-entrant within a process)."""
    path = f"{root}/{LOCK_NAME}"
    with _REGISTRY_GUARD:
        entry = _REGISTRY.setdefault(path, [threading.RLock(), 0, None])
    rlock: threading.RLock = entry[0]
    if not rlock.acquire(timeout=timeout):
        raise StoreError(f"store {root!r} is locked by another writer in this process; waited {timeout:.0f} s")
    try:
        if entry[1] == 0:
            if is_local(fs):
                entry[2] = _acquire_local(path, root, timeout)
            else:
                entry[2] = _acquire_remote(fs, path, root, timeout, stale_after)
        entry[1] += 1
        try:
            yield
        finally:
            entry[1] -= 1
            if entry[1] == 0:
                _release(fs, path, entry[2])
                entry[2] = None
    finally:
        rlock.release()


def _acquire_local(path: str, root: str, timeout: float) -> int:
    import fcntl

    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    deadline = time.monotonic() + timeout
    while True:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            break
        except BlockingIOError:
            if time.monotonic() >= deadline:
                holder = _read_fd(fd)
                os.close(fd)
                raise StoreError(
                    f"store {root!r} is being written by {holder}; waited {timeout:.0f} s. "
                    "Wait for that run to finish (only one writer per store at a time)."
                ) from None
            time.sleep(0.05)
    os.ftruncate(fd, 0)
    os.pwrite(fd, _stamp(), 0)
    return fd


def _read_fd(fd: int) -> str:
    try:
        info = json.loads(os.pread(fd, 4096, 0) or b"{}")
        return f"pid {info.get('pid')} on {info.get('host')} since {info.get('since')}"
    except (OSError, ValueError):
        return "another writer"


def _acquire_remote(fs: Any, path: str, root: str, timeout: float, stale_after: float) -> None:
    """Take the lock object on a filesystem without rename or OS locks (an object store).

    The lock is created only if absent (a conditional PUT, ``If-None-Match: *``); it names its holder and
    an expiry. An expired lock (its writer died) is taken over only if unchanged since it was read (a PUT
    conditional on its ETag), so two writers never both take it. Filesystems without conditional writes
    fall back to an advisory lock file (check, then write)."""
    deadline = time.monotonic() + timeout
    conditional = hasattr(fs, "_call_s3")  # s3fs: conditional PUTs (If-None-Match / If-Match)
    while True:
        info = _lock_info(fs, path)
        if info is None:
            if not conditional:
                fs.pipe_file(path, _stamp(stale_after))
                return None
            try:
                fs.pipe_file(path, _stamp(stale_after), mode="create")
                return None
            except (FileExistsError, OSError) as err:
                if not _precondition(err):
                    raise
        elif info["expires"] < time.time():
            if not conditional:
                fs.pipe_file(path, _stamp(stale_after))
                return None
            try:
                fs.pipe_file(path, _stamp(stale_after), IfMatch=info["etag"])
                return None
            except (FileNotFoundError, OSError) as err:
                if not _precondition(err) and not isinstance(err, FileNotFoundError):
                    raise
        if time.monotonic() >= deadline:
            raise StoreError(
                f"store {root!r} is being written by {_holder(fs, path)}; waited {timeout:.0f} s. "
                f"Wait for that run to finish; a lock of a writer that died expires by itself ({stale_after:.0f} s)."
            )
        time.sleep(0.2)


def _precondition(err: BaseException) -> bool:
    text = f"{type(err).__name__} {err} {getattr(err, '__cause__', '')}"
    return isinstance(err, FileExistsError) or "PreconditionFailed" in text or "412" in text


def _lock_info(fs: Any, path: str) -> dict[str, Any] | None:
    """The lock object's expiry (seconds since the epoch) and ETag, or None when there is no lock."""
    try:
        fs.invalidate_cache(path)
        meta = fs.info(path)
        with fs.open(path, "rb") as f:
            doc = json.loads(f.read() or b"{}")
    except FileNotFoundError:
        return None
    except ValueError:
        doc = {}
    expires = doc.get("expires")
    if not isinstance(expires, (int, float)):
        modified = meta.get("LastModified") or meta.get("mtime") or meta.get("created")
        try:
            base = modified.timestamp() if hasattr(modified, "timestamp") else float(modified)
        except (TypeError, ValueError):
            base = time.time()
        expires = base + 3600.0
    return {"expires": float(expires), "etag": meta.get("ETag")}


def _release(fs: Any, path: str, fd: int | None) -> None:
    if fd is not None:
        import fcntl

        os.ftruncate(fd, 0)
        fcntl.flock(fd, fcntl.LOCK_UN)
        os.close(fd)
    else:
        try:
            fs.rm(path)
        except (OSError, FileNotFoundError):
            pass


@contextmanager
def run_lock(root: str | os.PathLike[str], *, wait: float = 0.0, what: str = "refresh") -> Iterator[str]:
    """Hold a local store's run lock (``<root>/.run.lock``) for a whole run or writing command.

    Parameters
    ----------
    root
        Store folder (created if absent).
    wait
        Seconds to wait for another holder before refusing with :class:`StoreError` naming it.
    what
        What holds the lock (``refresh``, ``features``...), written into the lock file for the message.

    Yields
    ------
    str
        The lock file's path.
    """
    import fcntl
    import socket

    if problem := store_location_problem(root):
        raise StoreError(problem)
    if "://" in str(root) and not str(root).startswith("file://"):
        with _remote_run_lock(str(root), wait) as held:
            yield held
        return
    path = os.path.join(os.fspath(root), RUN_LOCK_NAME)
    try:
        os.makedirs(os.fspath(root), exist_ok=True)
        _check_writable(os.fspath(root))
        fh = open(path, "a+")
    except OSError as err:
        raise StoreError(_unwritable(root, err)) from None
    deadline = time.monotonic() + max(0.0, wait)
    held = False
    try:
        while True:
            try:
                fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
                held = True
                break
            except BlockingIOError:
                if time.monotonic() >= deadline:
                    fh.seek(0)
                    holder = fh.read().strip() or "unknown process"
                    raise StoreError(
                        f"store {root} is in use by another run ({holder}); two runs must not write one store at "
                        f"once. Wait for it to finish, or pass a longer --wait (waited {wait:g} s)."
                    ) from None
                time.sleep(0.2)
        started = time.strftime("%Y-%m-%dT%H:%M:%S+00:00", time.gmtime())
        try:
            fh.seek(0)
            fh.truncate()
            fh.write(f"{what}: pid {os.getpid()} on {socket.gethostname()} since {started}")
            fh.flush()
        except OSError as err:
            raise StoreError(_unwritable(root, err)) from None
        yield path
    finally:
        if held:  # a refused run must not clear the holder's note
            try:
                fh.seek(0)
                fh.truncate()
                fcntl.flock(fh.fileno(), fcntl.LOCK_UN)
            except OSError:
                pass
        fh.close()


#: Seconds after which the run lock of a remote store is taken as left by a run that died.
RUN_LOCK_EXPIRY = 24 * 3600.0


@contextmanager
def _remote_run_lock(url: str, wait: float) -> Iterator[str]:
    """The run lock of a store on an object store: a lock object (conditional PUT, expiry), as the writer lock."""
    from lakefeed.store._fs import resolve

    fs, root = resolve(url)
    path = f"{root}/{RUN_LOCK_NAME}"
    _acquire_remote(fs, path, url, max(0.0, wait), RUN_LOCK_EXPIRY)
    try:
        yield fs.unstrip_protocol(path)
    finally:
        _release(fs, path, None)


#: Free space below which a run is refused at the start (a write would fail part-way).
MIN_FREE_BYTES = 1 << 20


def _check_writable(root: str) -> None:
    """Raise the OSError a write would raise later: a read-only or unwritable folder, or a full disk."""
    import errno

    if not os.access(root, os.W_OK):
        raise OSError(errno.EACCES, "Permission denied", root)
    st = os.statvfs(root)
    if st.f_flag & os.ST_RDONLY:
        raise OSError(errno.EROFS, "Read-only file system", root)
    if st.f_bavail * st.f_frsize < MIN_FREE_BYTES:
        raise OSError(errno.ENOSPC, "No space left on device", root)


def _unwritable(root: str | os.PathLike[str], err: OSError) -> str:
    import errno

    reasons = {
        errno.ENOSPC: "the disk is full",
        errno.EDQUOT: "the disk quota is exceeded",
        errno.EROFS: "the file system is read-only",
        errno.EACCES: "no write permission",
        errno.EPERM: "no write permission",
        errno.ENOTDIR: "a part of the path is a file",
    }
    why = reasons.get(err.errno or 0)
    return (
        f"store {os.fspath(root)!r} cannot be written ({why or err.strerror or err}: {err.filename or root}); "
        "free space, fix its permissions or choose another folder (--store DIR or 'store:' in sources.yaml)"
    )
