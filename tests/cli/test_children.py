"""A command killed outright leaves none of the processes it started (lakefeed.cli.children)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import psutil
import pytest

pytestmark = pytest.mark.skipif(os.name != "posix", reason="the watcher relies on POSIX re-parenting")

# A stand-in for a command: it starts the watcher, then a child that would run for a minute and a
# grandchild below it (as Prefect's server and Dask's nanny -> worker do), then reports their ids.
_COMMAND = textwrap.dedent(
    """
    import signal, subprocess, sys, time
    signal.signal(signal.SIGINT, signal.default_int_handler)  # as in a terminal (a test runner may ignore it)
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


@pytest.mark.parametrize("how", [signal.SIGKILL, signal.SIGTERM, signal.SIGINT])
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


@pytest.mark.slow
@pytest.mark.parametrize("how", [signal.SIGKILL])  # Ctrl-C: the stand-in above (34 s here)
def test_killed_or_interrupted_build_leaves_no_process(tmp_path: Path, how: signal.Signals) -> None:
    """A real `lakefeed build` (Prefect's temporary server, forked pools) killed outright or interrupted by
    Ctrl-C once it has started children: none of them survives it."""
    import _mini

    lake = _mini.build(tmp_path)
    cmd = subprocess.Popen(
        [sys.executable, "-c", "from lakefeed.cli import main; main()", "build", str(lake)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )
    seen: dict[int, psutil.Process] = {}
    deadline = time.monotonic() + 120
    # wait for a child besides the watcher (the temporary API server starts first)
    while time.monotonic() < deadline and cmd.poll() is None:
        for p in _descendants(cmd.pid):
            seen.setdefault(p.pid, p)
        if len(seen) >= 2:
            break
        time.sleep(0.1)
    assert cmd.poll() is None and len(seen) >= 2, "the build ended or started no child within 120 s"
    time.sleep(1.0)
    for p in _descendants(cmd.pid):
        seen.setdefault(p.pid, p)
    cmd.send_signal(how)
    cmd.wait(timeout=60)
    _, alive = psutil.wait_procs(list(seen.values()), timeout=15)
    assert not alive, f"still running: {[(p.pid, p.cmdline()[:3]) for p in alive]}"
