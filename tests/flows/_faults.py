"""Fault injection for the flow tests: a Dask worker plugin that kills its worker in the middle of a store write.

The plugin wraps ``pyarrow.parquet.write_table`` in every worker process: the first write (across all
workers, claimed through an ``O_EXCL`` marker file) of a file under ``/<table>/`` is cut to half its bytes
and the worker process exits at once (``os._exit``: no cleanup, as a killed process). Deterministic: the kill
happens exactly once, at a store write of that table, whatever the timing of the tasks.
"""

from __future__ import annotations

import os

from distributed.diagnostics.plugin import WorkerPlugin


def _claim(marker: str, what: str) -> bool:
    try:
        fd = os.open(marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
    except FileExistsError:
        return False
    os.write(fd, what.encode())
    os.close(fd)
    return True


class KillMidWrite(WorkerPlugin):
    """Kill the worker process that first writes a part file of ``table`` (the file left half written).

    ``marker``: a path on the machine's file system; it receives the path of the file being written.
    """

    name = "kill-mid-write"

    def __init__(self, marker: str, table: str = "drivers_daily") -> None:
        self.marker, self.table = marker, table

    def setup(self, worker: object) -> None:
        import pyarrow.parquet as pq

        real = pq.write_table
        marker, needle = self.marker, f"/{self.table}/"

        def write_table(table, where, *args, **kwargs):  # type: ignore[no-untyped-def]
            real(table, where, *args, **kwargs)
            if isinstance(where, str) and needle in where and _claim(marker, where):
                with open(where, "r+b") as fh:
                    fh.truncate(os.path.getsize(where) // 2)
                os._exit(1)

        if not getattr(real, "_kill_mid_write", False):
            write_table._kill_mid_write = True  # type: ignore[attr-defined]
            pq.write_table = write_table
