"""The flows' Dask task runner with a clean end: workers send their pending Prefect logs and events before the
cluster closes, so they exit when asked instead of being killed mid-message (which printed ``CommClosedError``
tracebacks after a successful run).

Takes the settings :func:`lakefeed.flows.runtime.dask_task_runner` chooses; gives a prefect-dask task runner.
Must not hold science.
"""

from __future__ import annotations

import contextlib
import logging
from typing import Any

from prefect_dask import DaskTaskRunner

__all__ = ["CleanDaskTaskRunner", "drain_prefect"]

_NOISY = ("distributed", "tornado", "asyncio")


def drain_prefect() -> None:
    """Send this process's pending Prefect logs and events now (run on each worker before the cluster closes)."""
    from prefect.events.worker import EventsWorker
    from prefect.logging.handlers import APILogWorker

    APILogWorker.drain_all(timeout=10)
    EventsWorker.drain_all(timeout=10)


class _ClosedComms(logging.Filter):
    """Drops the records of connections closed by the shutdown itself (the run has already finished)."""

    def filter(self, record: logging.LogRecord) -> bool:
        exc = record.exc_info[1] if record.exc_info else None
        names = {type(e).__name__ for e in (exc, getattr(exc, "__cause__", None), getattr(exc, "__context__", None))}
        return not names & {"CommClosedError", "StreamClosedError"} and "CommClosedError" not in record.getMessage()


class CleanDaskTaskRunner(DaskTaskRunner):
    """A ``DaskTaskRunner`` whose own local cluster shuts down quietly: each worker drains its Prefect logs and
    events first, and closed-connection errors raised by the shutdown itself are not printed."""

    def __exit__(self, *args: Any) -> None:
        if self._client is not None and self.address is None:  # a cluster of our own (not a shared one)
            with contextlib.suppress(Exception):
                self._client.run(drain_prefect)
        quiet = _ClosedComms()
        names = [n for n in logging.root.manager.loggerDict if n.split(".")[0] in _NOISY]
        loggers = [logging.getLogger(n) for n in {*names, *_NOISY}]
        for lg in loggers:  # a logger's filter sees the records created on it, so each one gets it
            lg.addFilter(quiet)
        try:
            super().__exit__(*args)
        finally:
            for lg in loggers:
                lg.removeFilter(quiet)
