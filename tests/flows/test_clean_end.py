"""Clean ends of a Dask run: workers drain their Prefect logs and events and exit when asked (no kill, no
``CommClosedError`` traceback after a successful run)."""

from __future__ import annotations

import logging
import subprocess
import sys
import textwrap

import pytest

from lakefeed.flows._dask import CleanDaskTaskRunner, _ClosedComms

pytestmark = pytest.mark.slow

_SCRIPT = textwrap.dedent(
    """
    from prefect import flow, task
    from lakefeed.flows.runtime import dask_task_runner, prefect_api

    @task
    def add(x):
        print("task", x)
        return x + 1

    @flow(name="clean-end")
    def run():
        return sum(f.result() for f in [add.submit(i) for i in range(4)])

    if __name__ == "__main__":
        with prefect_api():
            print("result", run.with_options(task_runner=dask_task_runner(n_workers=2))())
    """
)


def test_a_successful_dask_run_ends_without_closed_comm_errors(tmp_path) -> None:
    script = tmp_path / "run.py"
    script.write_text(_SCRIPT)
    done = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=600, cwd=tmp_path)
    out = done.stdout + done.stderr
    assert done.returncode == 0, out[-3000:]
    assert "result 10" in out
    assert "CommClosedError" not in out and "Traceback" not in out
    assert "still alive after" not in out  # the nanny did not have to kill a worker


def test_the_shutdown_filter_drops_closed_connection_records_only() -> None:
    class CommClosedError(OSError):
        pass

    quiet = _ClosedComms()
    try:
        raise CommClosedError("in <TCP (closed)>: Stream is closed")
    except CommClosedError:
        closed = logging.LogRecord("distributed.core", logging.ERROR, "", 0, "lost", (), sys.exc_info())
    other = logging.LogRecord("distributed.core", logging.ERROR, "", 0, "a task failed", (), None)
    assert not quiet.filter(closed) and quiet.filter(other)
    assert CleanDaskTaskRunner(address="tcp://127.0.0.1:1").duplicate().address == "tcp://127.0.0.1:1"
