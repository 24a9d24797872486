"""Building blocks of feature rows: flag codes, calendar terms, last known value, forecast lookup, column blocks.

Takes numpy arrays and pandas frames; returns numpy arrays and :class:`FeatureBlock` (Arrow-ready
columns). Used by the many-series engine (:mod:`lakefeed.features.batch`) and the one-series wrapper
(:mod:`lakefeed.features.pit`). Must not open files.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import pandas as pd
import pyarrow as pa

from lakefeed.exceptions import FeatureError
from lakefeed.features.windows import as_dates, day_numbers

__all__ = ["FLAG_CODES", "FeatureBlock", "calendar_features", "flag_strings", "forecast_array", "last_known"]

#: Codes used in the ``flags`` column of feature rows.
FLAG_CODES = ("outside_driver_record", "incomplete_window", "no_prior_observation", "forecast_drivers")


def flag_strings(codes: Mapping[str, np.ndarray]) -> np.ndarray:
    """';'-joined names of the true codes per row (vectorised through a table of combinations)."""
    names = list(codes)
    if not names:
        return np.zeros(0, dtype=object)
    combo = np.zeros(len(next(iter(codes.values()))), dtype=np.int64)
    for bit, name in enumerate(names):
        combo |= np.asarray(codes[name], dtype=np.int64) << bit
    return _flag_table(tuple(names))[combo]


@lru_cache(maxsize=32)
def _flag_table(names: tuple[str, ...]) -> np.ndarray:
    return np.array([";".join(n for b, n in enumerate(names) if c >> b & 1) for c in range(1 << len(names))], object)


def calendar_features(dates: pd.DatetimeIndex | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Day of year as a point on the unit circle: (sin, cos) of 2 pi (doy - 1) / days in that year.

    ``dates``: dates, or day numbers (int64 days since 1970-01-01)."""
    days = np.asarray(dates) if np.asarray(dates).dtype.kind == "i" else day_numbers(pd.DatetimeIndex(dates))
    year = days.astype("datetime64[D]").astype("datetime64[Y]")
    doy0 = days - year.astype("datetime64[D]").astype(np.int64)  # day of year - 1
    y = year.astype(np.int64) + 1970
    leap = (y % 4 == 0) & ((y % 100 != 0) | (y % 400 == 0))
    angle = 2.0 * np.pi * doy0 / np.where(leap, 366.0, 365.0)
    return np.sin(angle), np.cos(angle)


def last_known(
    observations: pd.DataFrame,
    tdays: np.ndarray,
    idays: np.ndarray,
    groups: np.ndarray | None,
    *,
    value: str,
    by: str | None,
) -> tuple[np.ndarray, np.ndarray]:
    """(value, day number) of the last observation on or before the issue day and before the target day.

    ``tdays``/``idays``: target and issue day numbers per row; ``groups``: the row's ``by`` label."""
    ovals = observations[value].to_numpy(dtype=float)
    keep = ~np.isnan(ovals)
    ovals = ovals[keep]
    dcol = "date" if "date" in observations.columns else "target_date"
    odays = day_numbers(observations[dcol])[keep]
    cutoff = np.minimum(idays, tdays - 1)
    span = 1 << 32
    if by is not None:
        # groups compared as text (1 and "1" are one group); only the distinct labels are converted
        ocodes, olabels = pd.factorize(observations[by].to_numpy(dtype=object)[keep])
        code_of: dict[str, int] = {}
        for label in olabels.tolist():
            code_of.setdefault(str(label), len(code_of))
        to_text = np.array([code_of[str(label)] for label in olabels.tolist()], dtype=np.int64)
        ogrp = to_text[ocodes] if len(ocodes) else np.zeros(0, dtype=np.int64)
        rcodes, rlabels = pd.factorize(np.asarray(groups, dtype=object))
        rmap = np.array([code_of.get(str(label), -1) for label in rlabels.tolist()], dtype=np.int64)
        rgrp = rmap[rcodes] if len(rcodes) else np.zeros(0, dtype=np.int64)  # -1: no observations
        okey, rkey = ogrp * span + odays, rgrp * span + cutoff
    else:
        okey, rkey = odays, cutoff
        ogrp = np.zeros(len(odays), dtype=np.int64)
        rgrp = np.zeros(len(cutoff), dtype=np.int64)
    order = np.argsort(okey, kind="stable")
    okey, ogrp, ovals, odays = okey[order], ogrp[order], ovals[order], odays[order]
    pos = np.searchsorted(okey, rkey, side="right") - 1
    ok = pos >= 0
    ok[ok] &= ogrp[pos[ok]] == rgrp[ok]
    vals = np.where(ok, ovals[np.clip(pos, 0, None)] if len(ovals) else np.nan, np.nan)
    days = np.where(ok, odays[np.clip(pos, 0, None)] if len(odays) else 0, 0).astype(np.int64)
    return vals, days


def forecast_array(
    forecast_drivers: pd.DataFrame, columns: Sequence[str], issue_dates: pd.DatetimeIndex, max_offset: int
) -> np.ndarray:
    """Forecast drivers as (rows, max_offset + 1, drivers): element [i, o] is day issue_i + o.

    ``forecast_drivers`` has ``issue_date``, ``date`` and the driver columns (daily values in
    the same units as the observed drivers). Missing combinations are NaN.
    """
    missing = [c for c in ("issue_date", "date") if c not in forecast_drivers.columns]
    if missing:
        raise FeatureError(f"forecast drivers lack column(s) {missing}; expected issue_date, date and driver columns")
    fc = forecast_drivers
    idays = as_dates(fc["issue_date"]).to_numpy().astype("datetime64[D]").astype(np.int64)
    off = as_dates(fc["date"]).to_numpy().astype("datetime64[D]").astype(np.int64) - idays
    keep = (off >= 0) & (off <= max_offset)
    uniq, inv = np.unique(idays[keep], return_inverse=True)
    cube = np.full((len(uniq), max_offset + 1, len(columns)), np.nan)
    vals = np.column_stack([fc[c].to_numpy(float)[keep] if c in fc else np.full(keep.sum(), np.nan) for c in columns])
    cube[inv, off[keep]] = vals.reshape(-1, len(columns))
    rows = issue_dates.to_numpy().astype("datetime64[D]").astype(np.int64)
    at = np.searchsorted(uniq, rows)
    found = (at < len(uniq)) & (uniq[np.clip(at, 0, max(len(uniq) - 1, 0))] == rows if len(uniq) else False)
    out = np.full((len(rows), max_offset + 1, len(columns)), np.nan)
    out[found] = cube[at[found]]
    return out


@dataclass(frozen=True)
class FeatureBlock:
    """Feature rows as columns: ``head`` (keys, dates, label, baseline, calendar), the window features
    (one float64 block, ``names`` in plan order) and ``tail`` (flag columns), in output column order.
    Converts to pandas (:meth:`to_pandas`) or Arrow (:meth:`to_arrow`) without per-column copies of
    the float block."""

    head: dict[str, np.ndarray]
    values: np.ndarray
    names: list[str]
    tail: dict[str, np.ndarray]
    index: pd.Index | None = None

    def __len__(self) -> int:
        return int(self.values.shape[0])

    def to_pandas(self) -> pd.DataFrame:
        """One frame: head columns, features, tail columns (index as the targets')."""
        idx = self.index if self.index is not None else pd.RangeIndex(len(self))
        parts = [
            pd.DataFrame(self.head, index=idx),
            pd.DataFrame(self.values, columns=self.names, index=idx),
            pd.DataFrame(self.tail, index=idx),
        ]
        return pd.concat(parts, axis=1)

    def to_arrow(self, extra: Mapping[str, tuple[str, np.ndarray]] | None = None) -> pa.Table:
        """Arrow table in the same column order (NaN -> null, as ``pa.Table.from_pandas``);
        ``extra`` inserts columns after a named one: ``{new: (after, values)}``."""
        n = len(self)
        flat = pa.array(np.asarray(self.values, dtype=np.float64).ravel(order="F"), pa.float64(), from_pandas=True)
        cols: list[tuple[str, pa.Array]] = [(k, _arrow_col(v)) for k, v in self.head.items()]
        cols += [(c, flat.slice(i * n, n)) for i, c in enumerate(self.names)]
        cols += [(k, _arrow_col(v)) for k, v in self.tail.items()]
        for new, (after, v) in (extra or {}).items():
            at = [c for c, _ in cols].index(after) + 1
            cols.insert(at, (new, _arrow_col(v)))
        return pa.Table.from_arrays([a for _, a in cols], names=[c for c, _ in cols])


def _arrow_col(values: np.ndarray) -> pa.Array:
    v = np.asarray(values)
    if v.dtype.kind == "f":
        return pa.array(v, from_pandas=True)
    if v.dtype.kind == "O":
        return pa.array(v.tolist(), pa.string())
    return pa.array(v)
