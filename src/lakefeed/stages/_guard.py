"""Shrink guard: a stage never replaces stored rows with a shorter record or valid values with missing ones.

Takes the rows a stage is about to write for a table and the stored rows they replace (the whole partition
for a full write, the rows from ``since`` on for an incremental one); returns what would be lost
(:func:`shrinkage`, pure: no store, no files) or refuses the write (:func:`refuse_shrink`, which reads the
stored rows and raises :class:`~lakefeed.exceptions.ShrinkError`). A stage calls :func:`refuse_shrink` for
every table before it writes the first one, so a refused run leaves every table as it was.

What counts as a loss, per group of rows (e.g. per zone or per area of interest):

- the date range shrinks: the new rows start later or end earlier than the stored ones, or a group's
  rows are all gone;
- a value that was valid becomes missing: a row present in both (same key) whose column is set in the
  stored row and missing (NaN/null) in the new one;
- with ``complete=True`` (tables with one row per key and day, such as ``drivers_daily``), a stored row
  within the new date range has no new row.

A loss the input change explains (a source file removed on purpose, a configuration narrowed on purpose)
is written when the caller says so (``allow_shrink``, the ``--allow-shrink`` option of ``lakefeed
refresh``/``build``); the losses then come back as warnings for the run summary. Must not compute science.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import pandas as pd

from lakefeed.exceptions import ShrinkError

if TYPE_CHECKING:
    import pyarrow as pa

    from lakefeed.store import Store

__all__ = ["refuse_shrink", "shrinkage"]

_SHOWN = 3  # date ranges named per problem


def _day(t: pd.Timestamp) -> str:
    return f"{t:%Y-%m-%d}"


def _ranges(dates: pd.Series | pd.Index) -> str:
    """Dates as runs of consecutive days: ``2022-06-01..2022-06-30, 2022-08-02`` (the first few, then a count)."""
    days = pd.DatetimeIndex(pd.to_datetime(pd.Series(dates)).dt.normalize().unique()).sort_values()
    runs: list[tuple[pd.Timestamp, pd.Timestamp]] = []
    for d in days:
        if runs and d - runs[-1][1] == pd.Timedelta(days=1):
            runs[-1] = (runs[-1][0], d)
        else:
            runs.append((d, d))
    text = [_day(a) if a == b else f"{_day(a)}..{_day(b)}" for a, b in runs[:_SHOWN]]
    more = f" and {len(runs) - _SHOWN} more period(s)" if len(runs) > _SHOWN else ""
    return ", ".join(text) + more


def _label(groups: Sequence[str], key: object) -> str:
    values = key if isinstance(key, tuple) else (key,)
    return " ".join(f"{g} {v}" for g, v in zip(groups, values, strict=True))


def _times(frame: pd.DataFrame, time_column: str) -> pd.Series:
    """The dates of the rows of ``frame`` (indexed by its keys), from the index level or the column."""
    values = frame.index.get_level_values(time_column) if time_column in frame.index.names else frame[time_column]
    return pd.Series(pd.to_datetime(pd.Series(values)).to_numpy())


def _merged(found: list[tuple[str, str]], what: str) -> list[str]:
    """``(name, text)`` pairs as one line per text naming every name with it (``zone a, zone b: text``)."""
    names: dict[str, list[str]] = {}
    for name, text in found:
        names.setdefault(text, []).append(name)
    return [f"{what}{', '.join(ns)}: {t}" if any(ns) else t for t, ns in names.items()]


def shrinkage(
    old: pd.DataFrame,
    new: pd.DataFrame,
    *,
    time_column: str,
    keys: Sequence[str],
    groups: Sequence[str] = (),
    complete: bool = False,
) -> list[str]:
    """What writing ``new`` in place of ``old`` would lose; one sentence per problem (empty: nothing lost).

    Parameters
    ----------
    old
        The stored rows the write replaces (a ``lake`` column is ignored).
    new
        The rows to be written in their place.
    time_column
        Date or timestamp column of the rows (days in messages).
    keys
        Columns identifying a row (unique in ``old`` and in ``new``); include ``time_column``.
    groups
        Columns whose values each have their own date range (e.g. ``["zone"]``); none: the whole table.
    complete
        Also count stored rows with no new row inside the new date range (tables with a row per key and day).
    """
    if old.empty:
        return []
    old = old.drop(columns=["lake"], errors="ignore")
    new = new.drop(columns=["lake"], errors="ignore")
    ranges: list[tuple[str, str]] = []
    t_old, t_new = pd.to_datetime(old[time_column]), pd.to_datetime(new[time_column])
    by_old = t_old.groupby([old[g] for g in groups]) if groups else t_old.groupby(lambda _: "")
    by_new = dict(iter(t_new.groupby([new[g] for g in groups]))) if groups and len(new) else {}
    for key, dates in by_old:
        got = (by_new.get(key) if groups else t_new) if len(new) else None
        label = _label(groups, key) if groups else ""
        if got is None or got.empty:
            ranges.append((label, f"all {len(dates)} row(s) of {_ranges(dates)} would be removed"))
            continue
        lo, hi = got.min(), got.max()
        if lo > dates.min():
            ranges.append(
                (
                    label,
                    f"the record would start on {_day(lo)} instead of {_day(dates.min())} "
                    f"(lost: {_ranges(dates[dates < lo])})",
                )
            )
        if hi < dates.max():
            ranges.append(
                (
                    label,
                    f"the record would end on {_day(hi)} instead of {_day(dates.max())} "
                    f"(lost: {_ranges(dates[dates > hi])})",
                )
            )
    problems = _merged(ranges, "")
    if new.empty:
        return problems
    a, b = old.set_index(list(keys)), new.set_index(list(keys))
    if complete:
        t = _times(a, time_column)
        inside = (t >= t_new.min()) & (t <= t_new.max())
        gone = inside & ~a.index.isin(b.index)
        if gone.any():
            problems.append(f"{int(gone.sum())} row(s) would be removed on {_ranges(t[gone])}")
    both = a.index.intersection(b.index)
    common = [c for c in a.columns if c in b.columns]
    if len(both) and common:
        a, b = a.loc[both], b.loc[both, common]
        t = _times(a, time_column)
        a = a[common]
        emptied = []
        for c in common:
            lost = (a[c].notna() & b[c].isna()).to_numpy()
            if lost.any():
                emptied.append((c, f"{int(lost.sum())} valid value(s) would become missing on {_ranges(t[lost])}"))
        problems += _merged(emptied, "column(s) ")
    return problems


def refuse_shrink(
    store: Store,
    table: str,
    lake: str,
    new: pd.DataFrame | pa.Table,
    *,
    keys: Sequence[str],
    time_column: str,
    since: object = None,
    groups: Sequence[str] = (),
    complete: bool = False,
    others: str | None = None,
    allow_shrink: bool = False,
    why: str = "",
) -> list[str]:
    """Refuse (raise) a write of ``new`` that would lose stored dates or values; returns the allowed losses.

    Parameters
    ----------
    store, table, lake
        The partition about to be written.
    new
        The rows the write puts in place of the stored ones: every row (``since`` None) or those dated on or
        after ``since``.
    keys, time_column, groups, complete
        As for :func:`shrinkage`.
    since
        First date the write replaces (an incremental write); None: the whole partition.
    others
        A column set only in the stored rows another stage writes and rewrites itself (e.g. ``forecast_days``
        of the forecast stage's rows of ``features``): those rows are not compared. None: every row.
    allow_shrink
        Write anyway (the input change explains the loss): the losses are returned as warning texts.
    why
        What changed in the inputs, for the message (e.g. ``"full build (configuration changed)"``).

    Raises
    ------
    ShrinkError
        Naming the table, lake, dates and columns, and what to do.
    """
    if not store.has_table(table, lake):
        return []
    old = store.read_table(table, lake, since=since) if since is not None else store.read_table(table, lake)
    if others is not None and others in old.columns:
        old = old[old[others].isna().to_numpy()]
    frame = new if isinstance(new, pd.DataFrame) else new.to_pandas(coerce_temporal_nanoseconds=True)
    problems = shrinkage(old, frame, time_column=time_column, keys=keys, groups=groups, complete=complete)
    if not problems:
        return []
    head = f"{table}/lake={lake}" + (f" from {_day(pd.Timestamp(since))} on" if since is not None else "")
    if allow_shrink:
        return [f"{head}: written although it loses stored data (--allow-shrink): " + "; ".join(problems)]
    raise ShrinkError(
        f"refusing to write {head}: the new rows would lose stored data"
        + (f" ({why})" if why else "")
        + "; the stored table is left as it was. Check the inputs of those dates (a file missing, unreadable or "
        "shorter than before, a configuration value that rejects data); if the change is intended (a source "
        "file removed on purpose), rerun with --allow-shrink",
        problems,
    )
