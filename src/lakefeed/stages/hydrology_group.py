"""Stage ``hydrology`` for many lakes at once: each model output file read once for every lake that names it.

Takes lake :class:`~lakefeed.config.Project` objects and a :class:`~lakefeed.store.Store`; returns each
lake's :class:`~lakefeed.stages._result.StageResult` or the exception that stopped it. Every lake runs
:func:`lakefeed.stages.hydrology.build_hydrology` (its own catchment, its own sub-basins, stations and tables)
inside :func:`lakefeed.sources.hydrology.shared_reads`, so the file is read from disk once and each lake
selects, checks and converts its own sub-basins from it: its tables are those of a one-lake run. A lake
that fails (its layers, its sub-basin ids, a refused write) fails alone. Memory: one copy of the raw output
per file and the tables of one lake at a time. Must not: hold science.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

from lakefeed.exceptions import ConfigError
from lakefeed.progress import Progress, no_progress
from lakefeed.sources.hydrology import shared_reads
from lakefeed.stages._result import StageResult
from lakefeed.stages.hydrology import build_hydrology

if TYPE_CHECKING:
    from lakefeed.config import Project
    from lakefeed.store import Store

__all__ = ["build_hydrology_many"]


def build_hydrology_many(
    projects: Sequence[Project],
    store: Store,
    *,
    progress: Progress | None = None,
    isolate: bool = True,
    allow_shrink: bool = False,
) -> dict[str, StageResult | Exception]:
    """Build ``hydrology_daily`` (and ``load_estimates``) for many lakes, each model output read once.

    Parameters
    ----------
    projects, store
        The lakes (each id once) and the store their tables go to.
    progress
        With one lake, its steps; with several, once per finished lake (``hydrology: lakes``, done, total).
    isolate
        True: a lake that fails gets its exception as its result, the other lakes go on. False: the first
        failure is raised (lakes written before it keep their tables).
    allow_shrink
        As for :func:`lakefeed.stages.hydrology.build_hydrology`.

    Returns
    -------
    dict
        Lake id -> its :class:`StageResult` (the same as its one-lake run) or the exception that stopped it.
    """
    ids = [p.id for p in projects]
    dup = sorted({i for i in ids if ids.count(i) > 1})
    if dup:
        raise ConfigError(f"lake id(s) {dup} given more than once; give each lake's configuration once")
    report = progress or no_progress
    out: dict[str, StageResult | Exception] = {}
    with shared_reads():
        for p in projects:
            try:
                out[p.id] = build_hydrology(
                    p, store, progress=progress if len(projects) == 1 else None, allow_shrink=allow_shrink
                )
            except Exception as err:  # this lake's inputs or write: reported for it alone
                if not isolate:
                    raise
                out[p.id] = err
            if len(projects) > 1:
                report("hydrology: lakes", len(out), len(projects))
    return out
