"""Feature rows of many series in one pass: several AOIs, leads and lakes computed together.

A series is the targets of one lake (one AOI or all) at one lead time with their daily drivers
(:class:`Series`). Series with the same driver columns and window plan are computed together:
their driver records are laid end to end, each target's window is gathered from its own record
only (days outside it are missing, exactly as for one series), all windows are reduced in one
call and the rows come out as one :class:`~lakefeed.features.rows.FeatureBlock` per chunk of series,
converted to Arrow once by the caller: per-call costs that do not depend on the row count (building
570 Arrow columns: about 0.5 ms) are paid once per chunk, not once per lake, AOI and lead.

Rows with the same drivers, target date, lead and forecast input are computed once (AOIs that
share the lake's drivers are typically observed on the same scene dates). The rows of the block
are the series' rows in series order, each in the order of its targets; a :class:`Chunk` tells
where each series' rows are. Memory is bounded: series are computed in chunks of at most
``max_cells`` gathered window values (float64), whatever the number of series.

Pure: no file I/O.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from lakefeed.exceptions import FeatureError
from lakefeed.features.rows import FeatureBlock, calendar_features, flag_strings, forecast_array, last_known
from lakefeed.features.window_plan import WINDOW_DEFAULTS, WindowPlan
from lakefeed.features.windows import complete_calendar, day_numbers, on_or_after, reduce_windows

__all__ = ["Chunk", "Series", "feature_block_many", "iter_feature_blocks"]

_MAX_CELLS = 1 << 20  # gathered window values per chunk: 8 MiB of float64
_LEAD_BITS = 10  # leads below 1024 days
_DAY_BITS = 32  # window end positions within +-2**31 days of the record start


@dataclass(frozen=True, eq=False)
class Series:
    """The targets of one group at one lead, with what their rows are computed from.

    Attributes
    ----------
    targets
        ``target_date`` (or ``date``), the value column (chlorophyll-a, mg m-3) and the group
        column (``by``, e.g. ``aoi``) when used.
    drivers
        Observed daily drivers indexed by local date, canonical units. Series may share one
        frame (it is then laid out once).
    lead
        Lead time in days (>= 0).
    observations
        Accepted observations for the persistence baseline; default ``targets`` (all of them,
        also when ``since`` selects fewer rows).
    forecast_drivers
        Optional forecasts (``issue_date``, ``date``, driver columns) for the days after issue.
    since
        Only the targets dated on or after this date get rows (an incremental refresh); the
        drivers are then read from the longest window and lead before it on.
    """

    targets: pd.DataFrame
    drivers: pd.DataFrame
    lead: int = 0
    observations: pd.DataFrame | None = None
    forecast_drivers: pd.DataFrame | None = None
    since: object = None


@dataclass
class _Prepared:
    """One series' target rows as arrays (after the ``since`` selection)."""

    tdays: np.ndarray  # day numbers
    labels: np.ndarray | None  # the ``by`` group per row
    values: np.ndarray  # the target value per row
    segment: int
    source: int  # distinct (segment, forecast frame) pair
    observations: pd.DataFrame


@dataclass(frozen=True)
class Chunk:
    """Rows of consecutive series: ``block`` holds the rows of ``series[first:first + len(bounds) - 1]``,
    those of series ``first + i`` at ``bounds[i]:bounds[i + 1]``."""

    block: FeatureBlock
    first: int
    bounds: np.ndarray

    def rows_of(self, i: int) -> slice:
        """Rows of the block that belong to series ``first + i``."""
        return slice(int(self.bounds[i]), int(self.bounds[i + 1]))


def iter_feature_blocks(
    series: Sequence[Series],
    *,
    windows: Sequence[int] = WINDOW_DEFAULTS.windows,
    stats: Mapping[str, Sequence[str]] | None = None,
    include_target_day: bool = WINDOW_DEFAULTS.include_target_day,
    max_missing_fraction: float = WINDOW_DEFAULTS.max_missing_fraction,
    by: str | None = "aoi",
    value: str = "chla",
    max_cells: int = _MAX_CELLS,
) -> Iterator[Chunk]:
    """Feature rows of many series (columns of :func:`lakefeed.features.pit.feature_block`), chunk by chunk:
    each chunk is computed when the previous one has been taken, so a caller that writes each chunk's rows
    before asking for the next holds one chunk at a time.

    Parameters
    ----------
    series
        The series; all with the same numeric driver columns (in the same order).
    windows, stats, include_target_day, max_missing_fraction
        As for :func:`lakefeed.features.windows.window_features` (the same for all series).
    by
        Group column of the targets (e.g. ``aoi``); used when every series' targets have it.
    value
        Target value column (mg m-3 for chlorophyll-a).
    max_cells
        Largest number of gathered window values (float64) computed at once: consecutive series are
        grouped into chunks up to it (a series is never split). The default keeps a chunk's working
        set in the processor caches (measured: larger chunks are slower per row); a refresh of a
        few rows per lake fits hundreds of lakes in one chunk.

    Yields
    ------
    Chunk
        In series order, covering every series once.
    """
    if not series:
        raise FeatureError("no series to compute feature rows for")
    if by is not None and not all(by in s.targets.columns for s in series):
        by = None
    prepared, segments, columns = _prepare(series, windows, by=by, value=value)
    options: dict[str, Any] = {"include_target_day": include_target_day, "max_missing_fraction": max_missing_fraction}
    plan = WindowPlan.build(columns, windows=windows, stats=stats, **options)
    per_row = max(plan.windows) * max(1, len(columns))
    start = 0
    while start < len(series):
        stop, cells = start, 0
        while stop < len(series) and (stop == start or cells + len(prepared[stop].tdays) * per_row <= max_cells):
            cells += len(prepared[stop].tdays) * per_row
            stop += 1
        block = _block(series[start:stop], prepared[start:stop], segments, columns, plan, by=by, value=value)
        sizes = np.array([0] + [len(p.tdays) for p in prepared[start:stop]], dtype=np.int64)
        yield Chunk(block=block, first=start, bounds=np.cumsum(sizes))
        start = stop


def feature_block_many(series: Sequence[Series], **options: Any) -> list[Chunk]:
    """All chunks of :func:`iter_feature_blocks` (the same arguments) as a list."""
    return list(iter_feature_blocks(series, **options))


@dataclass
class _Segment:
    """One driver record on a complete daily calendar, used from position ``start`` on (day number
    ``first``); its values are laid out in the shared array of the chunk that uses it (not before: a
    chunk's arrays stay in the caches)."""

    frame: pd.DataFrame
    start: int
    first: int

    @property
    def values(self) -> np.ndarray:
        """(days, drivers) float64 (a view when the frame holds one float block)."""
        return self.frame.to_numpy(dtype=np.float64)[self.start :]

    def __len__(self) -> int:
        return len(self.frame) - self.start


def _prepare(
    series: Sequence[Series], windows: Sequence[int], *, by: str | None, value: str
) -> tuple[list[_Prepared], list[_Segment], list[str]]:
    """Select each series' target rows, lay out each distinct driver frame once (from the earliest day
    any of its series needs), number the (drivers, forecast) sources."""
    k_max = max((int(w) for w in windows), default=1)
    earliest: dict[int, int | None] = {}
    selected: list[tuple[slice | np.ndarray, np.ndarray]] = []
    for s in series:
        if s.lead < 0:
            raise FeatureError(f"lead time must be >= 0 days; got {s.lead}")
        if s.lead >= 1 << _LEAD_BITS:
            raise FeatureError(f"lead time {s.lead} d is too long; leads must be below {1 << _LEAD_BITS} days")
        tcol = "target_date" if "target_date" in s.targets.columns else "date"
        tdays = day_numbers(s.targets[tcol])
        keep: slice | np.ndarray = slice(None)
        need: int | None = None
        if s.since is not None:
            at = int(np.datetime64(pd.Timestamp(s.since).date(), "D").astype(np.int64))
            keep = on_or_after(tdays, at)
            tdays = tdays[keep]
            need = at - (k_max + 1 + s.lead)  # the spill-over: the longest window and lead before it
        key = id(s.drivers)  # a frame shared by several series is laid out once, from the earliest day needed
        if key not in earliest:
            earliest[key] = need
        elif earliest[key] is not None:
            earliest[key] = None if need is None else min(need, earliest[key])  # type: ignore[type-var]
        selected.append((keep, tdays))
    segment_of: dict[int, int] = {}
    segments: list[_Segment] = []
    columns: list[str] | None = None
    sources: dict[tuple[int, int], int] = {}
    prepared = []
    for s, (keep, tdays) in zip(series, selected, strict=True):
        key = id(s.drivers)
        if key not in segment_of:
            segment, cols = _segment(s.drivers, earliest[key])
            if columns is None:
                columns = cols
            elif cols != columns:
                raise FeatureError(
                    f"series differ in driver columns ({columns[:3]}... vs {cols[:3]}...); "
                    "compute series with different drivers in separate batches"
                )
            segment_of[key] = len(segments)
            segments.append(segment)
        seg = segment_of[key]
        src = sources.setdefault((seg, id(s.forecast_drivers) if s.forecast_drivers is not None else 0), len(sources))
        obs = s.observations if s.observations is not None else s.targets
        labels = s.targets[by].to_numpy()[keep] if by else None
        prepared.append(
            _Prepared(
                tdays=tdays,
                labels=labels,
                values=s.targets[value].to_numpy(dtype=float)[keep],
                segment=seg,
                source=src,
                observations=obs,
            )
        )
    if len(sources) >= 1 << (63 - _LEAD_BITS - _DAY_BITS):
        raise FeatureError(f"too many driver records in one batch ({len(sources)}); split the series")
    return prepared, segments, columns or []


def _segment(drivers: pd.DataFrame, earliest: int | None) -> tuple[_Segment, list[str]]:
    """The numeric drivers on a complete daily calendar, used from day ``earliest`` on (None: all)."""
    numeric = drivers if all(dt.kind in "fiu" for dt in drivers.dtypes) else drivers.select_dtypes("number")
    daily = complete_calendar(numeric)
    first = int(daily.index[0].to_datetime64().astype("datetime64[D]").astype(np.int64)) if len(daily) else 0
    start = 0 if earliest is None else min(max(earliest - first, 0), len(daily))  # a complete calendar: positions
    return _Segment(frame=daily, start=start, first=first + start), list(daily.columns)


def _block(
    series: Sequence[Series],
    prepared: Sequence[_Prepared],
    segments: Sequence[_Segment],
    columns: list[str],
    plan: WindowPlan,
    *,
    by: str | None,
    value: str,
) -> FeatureBlock:
    """The rows of a chunk of series (see :func:`feature_block_many`); window options from ``plan``."""
    shift = 1 if plan.include_target_day else 0
    k_max = max(plan.windows)
    used = sorted({p.segment for p in prepared})
    offset = np.zeros(len(segments), dtype=np.int64)
    pieces = []
    at = 0
    for g in used:  # the chunk's driver records end to end, then one all-missing row
        offset[g] = at
        pieces.append(segments[g].values)
        at += len(segments[g])
    stacked = np.concatenate([*pieces, np.full((1, len(columns)), np.nan)]) if pieces else np.full((1, 0), np.nan)
    missing_row = at
    counts = [len(p.tdays) for p in prepared]
    n = sum(counts)
    tdays = np.concatenate([p.tdays for p in prepared]) if prepared else np.zeros(0, np.int64)
    lead = np.repeat(np.array([s.lead for s in series], dtype=np.int64), counts)
    seg = np.repeat(np.array([p.segment for p in prepared], dtype=np.int64), counts)
    src = np.repeat(np.array([p.source for p in prepared], dtype=np.int64), counts)
    first = np.array([s.first for s in segments], dtype=np.int64)
    length = np.array([len(s) for s in segments], dtype=np.int64)
    end = tdays - first[seg] + shift  # exclusive end of each window, on its own record
    # features depend on (record, forecast input, end day, lead) only: computed once per distinct key
    key = (src << (_DAY_BITS + _LEAD_BITS)) | ((end + (1 << (_DAY_BITS - 1))) << _LEAD_BITS) | lead
    uniq, first_row, inv = np.unique(key, return_index=True, return_inverse=True)
    u_end, u_lead, u_seg, u_src = end[first_row], lead[first_row], seg[first_row], src[first_row]
    day_pos = u_end[None, :] - 1 - np.arange(k_max)[:, None]  # (k_max, u): position on its own record
    off_record = (day_pos < 0) | (day_pos >= length[u_seg][None, :])
    rows_at = np.where(off_record, missing_row, day_pos + offset[u_seg][None, :])
    gathered = stacked[rows_at]  # (k_max, u, drivers)
    issue_pos = u_end - shift - u_lead
    after = day_pos > issue_pos[None, :]  # unknown at issue
    used_forecast = np.zeros(len(uniq), dtype=bool)
    if after.any():
        gathered[after] = np.nan
        used_forecast = _fill_forecasts(
            gathered, after, series, prepared, u_src, u_end, u_lead, first[u_seg], columns, shift
        )
    values, incomplete = reduce_windows(gathered, plan, columns)
    last = u_end - 1
    outside = (last < 0) | (last >= length[u_seg])

    idays = tdays - lead
    p_val, p_day = _persistence(prepared, tdays, idays, by=by, value=value)
    none = np.isnan(p_val)
    sin, cos = calendar_features(tdays)
    head: dict[str, np.ndarray] = {}
    if by:
        head[by] = _joined([p.labels for p in prepared])  # type: ignore[misc]
    head.update(
        target_date=tdays.astype("datetime64[D]").astype("datetime64[ns]"),
        lead_days=lead.astype(np.int16),
        issue_date=idays.astype("datetime64[D]").astype("datetime64[ns]"),
        chla=_joined([p.values for p in prepared]),
        persistence_chla=p_val,
        persistence_age_days=np.where(none, np.nan, (tdays - p_day).astype(float)),
        days_since_prev_obs=np.where(none, np.nan, (idays - p_day).astype(float)),
        doy_sin=sin,
        doy_cos=cos,
    )
    n_incomplete = incomplete.sum(axis=1)[inv].astype(np.int16)
    codes = {
        "outside_driver_record": outside[inv],
        "incomplete_window": n_incomplete > 0,
        "no_prior_observation": none,
        "forecast_drivers": used_forecast[inv],
    }
    tail = {
        "incomplete_windows": n_incomplete,
        "outside_driver_record": codes["outside_driver_record"],
        "flags": flag_strings(codes),
    }
    rows = values if len(uniq) == n and (inv == np.arange(n)).all() else values[inv]
    return FeatureBlock(head=head, values=rows, names=plan.names, tail=tail)


def _fill_forecasts(
    gathered: np.ndarray,
    after: np.ndarray,
    series: Sequence[Series],
    prepared: Sequence[_Prepared],
    u_src: np.ndarray,
    u_end: np.ndarray,
    u_lead: np.ndarray,
    u_first: np.ndarray,
    columns: list[str],
    shift: int,
) -> np.ndarray:
    """Fill the days after issue from each series' forecasts issued on its issue date (in place); returns
    whether forecast values filled any day after issue, per distinct row."""
    used = np.zeros(gathered.shape[1], dtype=bool)
    done: set[int] = set()
    for s, p in zip(series, prepared, strict=True):
        if s.forecast_drivers is None or p.source in done:
            continue
        done.add(p.source)
        sel = np.flatnonzero(u_src == p.source)
        if not len(sel):
            continue
        issue_day = u_first[sel] + u_end[sel] - shift - u_lead[sel]
        issue = pd.DatetimeIndex(issue_day.astype("datetime64[D]").astype("datetime64[ns]"))
        fc = forecast_array(s.forecast_drivers, columns, issue, max(int(u_lead[sel].max()) + shift, 1))
        k_max = gathered.shape[0]
        day_pos = u_end[sel][None, :] - 1 - np.arange(k_max)[:, None]
        o = np.clip(day_pos - (u_end[sel] - shift - u_lead[sel])[None, :], 0, fc.shape[1] - 1)
        filled = fc[np.arange(len(sel))[None, :], o]  # (k_max, rows, drivers)
        part = gathered[:, sel]
        gathered[:, sel] = np.where(after[:, sel, None], filled, part)
        used[sel] = (after[:, sel, None] & np.isfinite(gathered[:, sel])).any(axis=(0, 2))
    return used


def _joined(parts: list[np.ndarray]) -> np.ndarray:
    return np.concatenate(parts) if len(parts) != 1 else parts[0]


def _persistence(
    prepared: Sequence[_Prepared], tdays: np.ndarray, idays: np.ndarray, *, by: str | None, value: str
) -> tuple[np.ndarray, np.ndarray]:
    """Persistence baseline per row, each series from its own observations (shared frames once)."""
    if len(prepared) == 1:
        p = prepared[0]
        return last_known(p.observations, tdays, idays, p.labels, value=value, by=by)
    vals = np.full(len(tdays), np.nan)
    days = np.zeros(len(tdays), dtype=np.int64)
    at = 0
    by_obs: dict[int, list[tuple[int, _Prepared]]] = {}
    for p in prepared:
        by_obs.setdefault(id(p.observations), []).append((at, p))
        at += len(p.tdays)
    for members in by_obs.values():
        idx = np.concatenate([np.arange(start, start + len(p.tdays)) for start, p in members])
        if not len(idx):
            continue
        obs = members[0][1].observations
        groups = np.concatenate([p.labels for _, p in members]) if by else None  # type: ignore[misc]
        vals[idx], days[idx] = last_known(obs, tdays[idx], idays[idx], groups, value=value, by=by)
    return vals, days
