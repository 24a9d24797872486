"""Incremental refresh of ``drivers_daily``: the first local day a weather build recomputes, and the write.

Takes the stored table's manifest entry, the lazy weather :class:`~lakefeed.sources.grids.Grid`, the
input hashes and the lake's time zone; returns the first local day to recompute, or why a full build
is needed (:func:`refresh_plan`, a :class:`~lakefeed.stages.refresh_plan.RefreshPlan`), the time window
of the grid that day needs (:func:`read_window`), and writes the rows (:func:`write_drivers`). Must not
compute drivers.

Which days a changed source month touches: its first stamp ``t0`` (the month's first day, 00:00 in
the source's time zone) carries the instantaneous values of the local day of ``t0`` and ends the step
``[t0 - step, t0]``, whose amount belongs to the local day of ``t0 - step`` (and whose de-accumulated
increment is ``v(t0) - v(t0 - step)``). So rows from the local day of ``t0 - step`` on are recomputed;
with UTC files and a lake east of Greenwich that is the month's first local day, for a lake on UTC the
day before. The grid is read from a day before that day's local midnight (UTC), enough for the local
day shift and for de-accumulation across the boundary; the rows of the days before are dropped.

Layout: the rows of the record's last local day (the day the next month's data completes) go into a
part of their own (the provisional tail). A refresh replaces the rows from its first day on: the tail
part is rewritten with the settled rows, and a new tail part is added, so the older parts stay
untouched (:meth:`lakefeed.store.Store.append_arrow`; a change reaching further back rewrites the
partition once). Each step writes one file atomically; between the two steps the table is a valid
table up to the day before the new tail, marked in the manifest metadata
(:data:`lakefeed.stages.refresh_plan.PENDING`): a run stopped there is redone by the next refresh, whose
start never lies after the stored record's last day.
"""

from __future__ import annotations

from collections.abc import Mapping
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from lakefeed.extract.accumulation import step_of
from lakefeed.stages.refresh_plan import PENDING, RefreshMode, RefreshPlan

if TYPE_CHECKING:
    from lakefeed.sources.grids import Grid
    from lakefeed.store import Store

__all__ = ["KEYS", "read_window", "refresh_plan", "tail_day", "write_drivers"]

#: Key columns of ``drivers_daily`` within a lake partition (rows sorted by them).
KEYS = ["zone", "date"]


def _local_day(t: np.datetime64 | pd.Timestamp, tz: str) -> date:
    return pd.Timestamp(t).tz_localize("UTC").tz_convert(tz).date()


def _to_utc(day: object, tz: str) -> pd.Timestamp:
    """Local midnight of ``day`` in ``tz`` as a naive UTC stamp."""
    local = pd.Timestamp(day).normalize().tz_localize(tz, ambiguous=True, nonexistent="shift_forward")
    return local.tz_convert("UTC").tz_localize(None)


def _first_stamp(path: str, source_tz: str) -> pd.Timestamp:
    from lakefeed.sources.grids import open_grid

    return pd.Timestamp(open_grid(path, time_zone=source_tz).dataset["time"].values[0])


def refresh_plan(
    entry: Mapping[str, Any] | None,
    *,
    since: object,
    grid: Grid,
    inputs: Mapping[str, str],
    config_hash: str,
    columns: list[str],
    signature: str,
    tz: str,
    source_tz: str = "UTC",
) -> RefreshPlan:
    """First local day from which ``drivers_daily`` must be recomputed (``day``), or a full build and why.

    Parameters
    ----------
    entry
        Manifest entry of the stored ``drivers_daily`` partition (None: no table).
    since
        First day of the earliest changed source month (the source files' calendar).
    grid
        The lazy weather grid of every current file.
    inputs
        Current content hashes of the inputs ({absolute path: sha256}: grid files and layers).
    config_hash, columns, signature
        The configuration hash, the table's columns and the grid signature the build would record.
    tz, source_tz
        The lake's time zone (local days) and the time zone of naive stamps in the files.

    A full build is needed when there is no stored table (or it lists no parts), when the configuration,
    columns, grid or a geometry layer differ from the stored ones, when a recorded file is gone, or when
    the first day to recompute is not after the stored record's first day. A changed file starting before
    ``since`` moves the start back to it (the stored hashes are the check, not the caller's word).
    """
    if not entry or not entry.get("parts"):
        return RefreshPlan.full("no stored table")
    if entry.get("config_hash") != config_hash:
        return RefreshPlan.full("configuration changed")
    if list(entry.get("columns") or []) != columns:
        return RefreshPlan.full("stored columns differ")
    if (entry.get("metadata") or {}).get("grid_signature") != signature:
        return RefreshPlan.full("weather grid changed")
    old: Mapping[str, str] = entry.get("inputs") or {}
    grid_files = {str(Path(f).absolute()) for f in grid.files}
    if any(old.get(p) != h for p, h in inputs.items() if p not in grid_files):
        return RefreshPlan.full("a geometry layer changed")
    if any(p not in inputs for p in old):
        return RefreshPlan.full("a weather file recorded in the table is gone")
    if not entry.get("time_range") or entry["time_range"][0] is None:
        return RefreshPlan.full("stored table has no dates")
    t0 = pd.Timestamp(since).normalize().tz_localize(source_tz).tz_convert("UTC").tz_localize(None)
    changed = sorted(p for p in grid_files if old.get(p) != inputs.get(p))
    if changed:
        t0 = min(t0, *(_first_stamp(str(p), source_tz) for p in changed))
    step = step_of(grid.dataset["time"].values)
    first, last = (pd.Timestamp(t).date() for t in entry["time_range"])
    day = min(_local_day(np.datetime64(t0) - step, tz), last)  # never leave a day unwritten after the record
    if day <= first:
        return RefreshPlan.full(f"changes reach back to {day}, the start of the stored record")
    return RefreshPlan(RefreshMode.TAIL, day)


def read_window(grid: Grid, day: date, tz: str) -> Grid:
    """The grid from a day before local midnight of ``day`` (UTC) on: lazily sliced, nothing read."""
    from dataclasses import replace

    step = pd.Timedelta(step_of(grid.dataset["time"].values))
    lo = _to_utc(day, tz) - max(pd.Timedelta(days=1), 2 * step)
    return replace(grid, dataset=grid.dataset.sel(time=slice(lo, None)))


def tail_day(grid: Grid, tz: str) -> date:
    """The local day of the grid's last stamp: the day the next month's data completes (the provisional tail)."""
    return _local_day(grid.dataset["time"].values[-1], tz)


def write_drivers(store: Store, lake: str, rows: pd.DataFrame, *, start: date | None, tail: date, **write: Any) -> None:
    """Write ``drivers_daily``: all rows (``start`` None), or the rows from ``start`` on, replacing the stored ones.

    ``rows``: the table's columns (a ``lake`` column is dropped), every date on or after ``start``.
    Rows from ``tail`` on go into a part of their own (see the module docstring). ``write``: units,
    metadata, inputs, config_hash for the store.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    frame = rows.drop(columns=["lake"], errors="ignore").reset_index(drop=True)
    frame.attrs = {}
    arrow = pa.Table.from_pandas(frame, preserve_index=False)
    dates = arrow["date"]
    late = pc.greater_equal(dates, pa.scalar(tail, dates.type))
    provisional, settled = arrow.filter(late), arrow.filter(pc.invert(late))
    kw = dict(write, time_column="date", sort_by=KEYS)
    two = bool(settled.num_rows and provisional.num_rows)
    # the state between the two steps lacks the tail: its manifest says so (a run that stops there redoes it)
    first = dict(kw, metadata={**(write.get("metadata") or {}), PENDING: str(tail)}) if two else kw
    if start is None:
        store.write_arrow("drivers_daily", lake, settled if settled.num_rows else provisional, **first)
    else:
        store.append_arrow("drivers_daily", lake, settled if settled.num_rows else provisional, since=start, **first)
    if two:
        store.append_arrow("drivers_daily", lake, provisional, since=tail, **kw)
