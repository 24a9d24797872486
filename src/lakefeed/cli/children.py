"""Stop every process a command started when the command ends, however it ends.

A ``lakefeed build`` starts Prefect's temporary API server, Dask workers (through their nannies) and
forked pools. A clean exit stops them, but a failure in the wrong place, a Ctrl-C or a ``kill -9`` of the
command would leave them running. :func:`guard_children` starts one small watcher process that records the
command's descendants while the command lives and, as soon as the command is gone (its parent id changes),
asks each recorded process still alive to stop (SIGTERM), then kills what is left after a grace period.

Takes: nothing but the current process. Gives: the watcher's ``Popen`` (``None`` where it cannot run).
Must not: import lakefeed in the watcher (it starts in a few tens of milliseconds), or catch Ctrl-C itself
(the watcher ignores SIGINT so that a Ctrl-C in a terminal, sent to the whole process group, cannot stop it
before it has cleaned up).
"""

from __future__ import annotations

import os
import subprocess
import sys

__all__ = ["WATCH_INTERVAL_S", "guard_children"]

#: seconds between two looks at the command's process tree
WATCH_INTERVAL_S = 0.2
#: seconds a process gets between SIGTERM and SIGKILL
_GRACE_S = 3.0

_WATCHER = r"""
import os, signal, sys, time
import psutil

signal.signal(signal.SIGINT, signal.SIG_IGN)
parent, interval, grace = int(sys.argv[1]), float(sys.argv[2]), float(sys.argv[3])
me = os.getpid()
seen = {}

def record(procs):
    for p in procs:
        if p.pid != me and p.pid not in seen:
            seen[p.pid] = p

try:
    root = psutil.Process(parent)
except psutil.Error:
    sys.exit(0)
while os.getppid() == parent:
    try:
        record(root.children(recursive=True))
    except psutil.Error:
        break
    time.sleep(interval)

# The command is gone. Its children were re-parented; their own children still hang below them.
left = [p for p in seen.values() if p.is_running()]
for p in list(left):
    try:
        left.extend(c for c in p.children(recursive=True) if c.pid != me and c.pid not in seen)
    except psutil.Error:
        pass
for p in left:
    try:
        p.terminate()
    except psutil.Error:
        pass
_, alive = psutil.wait_procs(left, timeout=grace)
for p in alive:
    try:
        p.kill()
    except psutil.Error:
        pass
psutil.wait_procs(alive, timeout=grace)
"""


def guard_children() -> subprocess.Popen | None:
    """Start the watcher that stops this process's descendants once this process has ended.

    Returns
    -------
    subprocess.Popen or None
        The watcher process, or ``None`` where it cannot watch (no ``psutil``, or a platform where a
        re-parented process keeps its parent id, i.e. not POSIX).
    """
    if os.name != "posix":
        return None
    try:
        import psutil  # noqa: F401  (the watcher needs it; it comes with dask.distributed)
    except ImportError:
        return None
    return subprocess.Popen(
        [sys.executable, "-c", _WATCHER, str(os.getpid()), str(WATCH_INTERVAL_S), str(_GRACE_S)],
        stdin=subprocess.DEVNULL,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        close_fds=True,
    )
