"""Output side of the features stage: feature rows as Arrow with their folds, the columns a later stage
added, the key order, and the writes of settled and provisional rows.

Takes computed rows (Arrow or a feature block) and the stage's options; writes through the store.
Must not compute features.
"""

from __future__ import annotations

import json
from collections.abc import Callable

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from lakefeed.config.lake import FeatureOptions
from lakefeed.features import assign_folds, fold_counts
from lakefeed.features.pit import FeatureBlock
from lakefeed.stages._features_inputs import targets_digest
from lakefeed.store import Store

__all__ = [
    "KEYS",
    "arrow_rows",
    "fold_diagnostics",
    "fold_numbers",
    "fold_options",
    "folds",
    "sorted_by_keys",
    "with_stored_extras",
    "write_rows",
]

KEYS = ["aoi", "target_date", "lead_days"]
_ADDED_LATER = ("forecast_days", "forecast_fraction")  # features columns written by the forecast stage


def arrow_rows(block: FeatureBlock, fold_kinds: np.ndarray) -> pa.Table:
    """A feature block as Arrow, with ``fold`` (assigned later) and ``fold_kind`` (per row) after ``doy_cos``."""
    n = len(block)
    extra = {"fold": ("doy_cos", np.zeros(n, dtype=np.int16)), "fold_kind": ("fold", fold_kinds)}
    return block.to_arrow(extra=extra)


def with_stored_extras(store: Store, lake: str, arrow: pa.Table, prev: dict | None) -> pa.Table:
    """The rows with the columns that a later stage added to the stored table (the forecast stage's
    ``forecast_days``/``forecast_fraction``, missing for these hindcast rows) at their stored places, so an
    incremental refresh appends to the table instead of rewriting it."""
    stored = list((prev or {}).get("columns") or [])
    names = arrow.column_names  # a new list at every access: taken once
    extra = [c for c in _ADDED_LATER if c in stored and c not in names]
    if not extra or [c for c in stored if c not in extra] != names:
        return arrow
    schema = pq.read_schema(store.part_files("features", lake)[0])
    for c in extra:
        kind = schema.field(c).type if c in schema.names else pa.float64()
        arrow = arrow.add_column(stored.index(c), c, pa.nulls(arrow.num_rows, kind))
    return arrow


def fold_options(opts: FeatureOptions) -> str:
    """The fold options as stored in the table's metadata (JSON; the embargo as applied, in days)."""
    return json.dumps(
        {
            "k": opts.folds,
            "kind": opts.fold_kind,
            "embargo_days": opts.effective_embargo_days,
            "block_months": opts.fold_block_months,
        },
        sort_keys=True,
    )


def folds(arrow: pa.Table, opts: FeatureOptions) -> np.ndarray:
    """Fold per row of the feature table: :func:`fold_numbers` of its target dates."""
    return fold_numbers(arrow["target_date"].to_numpy(), opts)


def fold_numbers(dates: np.ndarray, opts: FeatureOptions) -> np.ndarray:
    """Fold per target date (the same date shares a fold across leads and AOIs, hindcast and re-forecast):
    calendar blocks (blocked) or a hash of the date (random); never from the other rows, so a row's fold is
    the same in an incremental refresh and in a clean build."""
    return assign_folds(
        dates,
        k=opts.folds,
        kind=opts.fold_kind,
        block_months=opts.fold_block_months,
        embargo_days=opts.effective_embargo_days,
    )


def fold_diagnostics(targets: pd.DataFrame, opts: FeatureOptions) -> pd.DataFrame:
    """Per AOI: the embargo and the feature rows (target dates x leads) kept and lost to it per blocked fold
    (JSON ``{fold: rows}``); empty columns for random folds (no embargo)."""
    rows = []
    for a, g in targets.groupby("aoi", sort=True):
        kept = lost = ""
        if opts.fold_kind == "blocked":
            kept, lost = fold_counts(
                g["date"].drop_duplicates(),
                k=opts.folds,
                block_months=opts.fold_block_months,
                embargo_days=opts.effective_embargo_days,
                rows_per_date=len(opts.leads),
            )
        embargo = opts.effective_embargo_days if opts.fold_kind == "blocked" else 0
        rows.append({"aoi": str(a), "embargo_days": embargo, "fold_rows": kept, "embargoed_rows": lost})
    return pd.DataFrame(rows, columns=["aoi", "embargo_days", "fold_rows", "embargoed_rows"])


def write_rows(
    store: Store,
    lake: str,
    arrow: pa.Table,
    *,
    since: pd.Timestamp | None,
    split: pd.Timestamp,
    drivers_digest: Callable[[object], str],
    targets: pd.DataFrame,
    write: dict[str, object],
) -> None:
    """Write the rows as settled rows (target date before ``split``, the next refresh's first date) and
    provisional ones (from ``split`` on: target dates after the end of an input, recomputed by the next
    refresh), each in one store operation of one file (atomic on its own). The provisional rows get a
    part of their own, so the next refresh replaces only that small part. The first operation's state
    is a valid table of the inputs up to ``split - 1`` (its manifest says so), so a crash between the two
    leaves a table that the next run completes incrementally."""
    tcol = arrow["target_date"]
    late = pc.greater_equal(tcol, pa.scalar(split.to_pydatetime(), tcol.type))
    provisional = arrow.filter(late)
    settled = arrow.filter(pc.invert(late)) if provisional.num_rows else arrow
    steps = []
    if settled.num_rows or not provisional.num_rows or since is None:
        first = provisional if not settled.num_rows else settled
        steps.append((since, first))
    if provisional.num_rows and settled.num_rows:
        steps.append((split, provisional))
    for i, (start, rows) in enumerate(steps):
        kw = dict(write)
        if i < len(steps) - 1:  # the state after this step: the table of the inputs up to split - 1
            day = str((split - pd.Timedelta(days=1)).date())
            md = dict(kw["metadata"])  # type: ignore[call-overload]
            md |= {
                "drivers_through": day,
                "targets_through": day,
                "drivers_digest_at_through": drivers_digest(day),
                "targets_digest_at_through": targets_digest(targets, day),
            }
            kw |= {"metadata": md, "inputs": {}}
        if start is None:
            store.write_arrow("features", lake, rows, **kw)  # type: ignore[arg-type]
        else:
            store.append_arrow("features", lake, rows, since=start, **kw)  # type: ignore[arg-type]


def sorted_by_keys(arrow: pa.Table) -> bool:
    """Whether the rows are already in (aoi, target_date, lead_days) order (one lead per AOI and date block)."""
    if arrow.num_rows < 2:
        return True
    aoi = np.asarray(arrow["aoi"].to_numpy(zero_copy_only=False)).astype(str)
    date = arrow["target_date"].to_numpy().astype(np.int64)
    lead = arrow["lead_days"].to_numpy().astype(np.int64)
    a0, a1 = aoi[:-1], aoi[1:]
    same_aoi = a0 == a1
    if (a1 < a0).any():
        return False
    d0, d1 = date[:-1], date[1:]
    if (same_aoi & (d1 < d0)).any():
        return False
    return not (same_aoi & (d1 == d0) & (lead[1:] <= lead[:-1])).any()
