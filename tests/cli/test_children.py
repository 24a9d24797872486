"""A command killed outright leaves none of the processes it started (lakefeed.cli.children)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time

import psutil
import pytest

pytestmark = pytest.mark.skipif(os.name != "posix", reason="the watcher relies on POSIX re-parenting")

# A stand-in for a command: it starts the watcher, then a child that would run for a minute and a
# grandchild below it (as Prefect's server and Dask's nanny -> worker do), then reports their ids.
_COMMAND = textwrap.dedent(
    """
    import subprocess, sys, time
    from lakefeed.cli.children import guard_children
    guard_children()
    child = subprocess.Popen([sys.executable, "-c",
        "import subprocess, sys, time; subprocess.Popen([sys.executable, '-c', 'import time; time.sleep(60)']);"
        " time.sleep(60)"])
    print(child.pid, flush=True)
    time.sleep(60)
    """
)


def _descendants(pid: int) -> list[psutil.Process]:
    return psutil.Process(pid).children(recursive=True)


@pytest.mark.parametrize("how", [signal.SIGKILL, signal.SIGTERM])
def test_killed_command_leaves_no_child(how: signal.Signals) -> None:
    cmd = subprocess.Popen([sys.executable, "-c", _COMMAND], stdout=subprocess.PIPE, text=True)
    child_pid = int(cmd.stdout.readline())
    deadline = time.monotonic() + 20
    # wait until the grandchild exists and the watcher has had time to record it
    while len(_descendants(child_pid)) < 1 and time.monotonic() < deadline:
        time.sleep(0.05)
    started = [psutil.Process(child_pid), *_descendants(child_pid)]
    assert len(started) == 2
    time.sleep(1.0)  # five watch intervals

    cmd.send_signal(how)
    cmd.wait(timeout=10)
    _, alive = psutil.wait_procs(started, timeout=10)
    assert not alive, f"still running after the command was killed: {[p.pid for p in alive]}"


def test_finished_command_leaves_no_child() -> None:
    code = _COMMAND.replace("\ntime.sleep(60)\n", "\ntime.sleep(1.0)\nsys.exit(3)\n")
    cmd = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    child_pid = int(cmd.stdout.readline())
    started = [psutil.Process(child_pid)]
    assert cmd.wait(timeout=20) == 3
    _, alive = psutil.wait_procs(started, timeout=10)
    assert not alive
