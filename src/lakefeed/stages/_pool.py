"""Compute lazy zonal results one time chunk per task, in forked worker processes where that is safe.

Takes lazy (time, ...) xarray Datasets (dask-backed, e.g. :func:`lakefeed.extract.zonal.zonal_mean`
of an opened grid) and returns them computed, identical to one ``dask.compute``. Used by
:func:`lakefeed.stages.weather.zonal_long` (``lakefeed zonal``) and the benchmark; re-exported by
:mod:`lakefeed.stages.weather`. Must not: open files itself, hold science.
"""

from __future__ import annotations

import contextlib
import gc
import multiprocessing
import os
import sys
import threading
from collections.abc import Callable, Iterator
from concurrent.futures import ProcessPoolExecutor

import dask
import dask.threaded
import numpy as np
import xarray as xr
from dask.callbacks import Callback
from dask.local import get_sync

from lakefeed.progress import Progress

__all__ = ["compute_by_time", "local_compute", "local_scheduler", "use_processes"]


class _DaskProgress(Callback):
    def __init__(self, progress: Progress, description: str) -> None:
        super().__init__()
        self._p, self._d, self._n, self._done = progress, description, 0, 0

    def _start_state(self, dsk, state) -> None:
        self._n = len(state["ready"]) + len(state["waiting"]) + len(state["running"])

    def _posttask(self, key, result, dsk, state, worker_id) -> None:
        self._done += 1
        self._p(self._d, self._done, max(self._n, self._done))


def _cores() -> int:
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1


def use_processes() -> bool:
    """Whether :func:`compute_by_time` may fork worker processes here (the ``processes=None`` default).

    Only in a plain single-threaded process on Linux with more than one core: not inside a
    Dask worker, not when a Dask scheduler or client is configured, not when other threads run (a
    Prefect task, a server): forking a multi-threaded process can deadlock.
    """
    if not sys.platform.startswith("linux") or _cores() < 2:
        return False
    if threading.active_count() > 1 or dask.config.get("scheduler", None) is not None:
        return False
    distributed = sys.modules.get("distributed")  # a Dask worker has it imported; importing it costs ~0.3 s
    if distributed is None:
        return True
    try:
        distributed.get_worker()
    except ValueError:
        return True
    return False


_FORKED: tuple[list[xr.Dataset], list[slice]] | None = None  # set in the parent just before forking


def _one_blas_thread() -> contextlib.AbstractContextManager:
    """BLAS limited to one thread (the zonal products are small: a BLAS thread pool per worker process or
    Dask thread only oversubscribes the cores; 2-4x slower here). Same results (same kernels)."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # optional: without it BLAS keeps its own setting
        return contextlib.nullcontext()
    return threadpool_limits(1, user_api="blas")


@contextlib.contextmanager
def local_compute(progress: Progress | None, description: str) -> Iterator[None]:
    """Context for a ``dask.compute`` in this process: progress reported as ``description``, one BLAS thread.

    The weight products are small: one BLAS thread is faster than a thread pool per Dask thread.
    """
    with _DaskProgress(progress, description) if progress else contextlib.nullcontext(), _one_blas_thread():
        yield


def _init_worker() -> None:
    _one_blas_thread()  # for the worker's lifetime


def _compute_slice(i: int) -> list[xr.Dataset]:
    objs, slices = _FORKED  # type: ignore[misc]
    # a callable scheduler: dask does not look for (and import) dask.distributed in every worker
    return list(dask.compute(*(o.isel(time=slices[i]) for o in objs), scheduler=get_sync))


def local_scheduler() -> Callable | None:
    """Dask's threaded scheduler when no scheduler is configured and no Dask client can exist, else None.

    Given as a callable, so that ``dask.compute`` does not import distributed (~0.3 s) to look for a client;
    None lets Dask choose (a configured scheduler, or a client of an imported distributed).
    """
    local = dask.config.get("scheduler", None) is None and "distributed" not in sys.modules
    return dask.threaded.get if local else None


def compute_by_time(
    objs: list[xr.Dataset], *, processes: bool | None = None, progress: Progress | None = None, what: str = ""
) -> list[xr.Dataset]:
    """Compute lazy (time, ...) Datasets together, one time chunk per task, in forked processes.

    xarray reads HDF5 under one lock, so dask threads hardly overlap the reads; forked workers (each
    reading its own time chunks, returning only the small zonal result) do. ``processes``: None
    decides by :func:`use_processes`; False uses the current Dask scheduler. Identical results.
    """
    chunks = next((v.chunks[0] for o in objs for v in o.data_vars.values() if v.chunks), None)
    if processes is None:
        processes = use_processes()
    if not processes or chunks is None or len(chunks) < 2:
        with local_compute(progress, what):
            return list(dask.compute(*objs, scheduler=local_scheduler()))
    global _FORKED
    ends = np.cumsum(chunks)
    slices = [slice(int(e - c), int(e)) for c, e in zip(chunks, ends, strict=True)]
    _FORKED = (objs, slices)
    parts: list[list[xr.Dataset]] = []
    # the inherited heap out of the workers' garbage collections: no scan of the parent's objects, fewer
    # copy-on-write pages (the fork recipe of the gc module's documentation); undone when the pool is done
    gc.freeze()
    try:
        n = max(1, min(_cores(), len(slices)))
        with ProcessPoolExecutor(n, mp_context=multiprocessing.get_context("fork"), initializer=_init_worker) as pool:
            for k, part in enumerate(pool.map(_compute_slice, range(len(slices)))):
                parts.append(part)
                if progress:
                    progress(what, k + 1, len(slices))
    finally:
        gc.unfreeze()
        _FORKED = None
    return [xr.concat([p[j] for p in parts], dim="time") for j in range(len(objs))]
