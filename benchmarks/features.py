"""Benchmark: antecedent-window features vs an equivalent pandas rolling implementation, and an
incremental monthly refresh vs a full rebuild.

Workload (defaults): 200 lakes x 10 years of daily drivers x 20 drivers x 7 windows
(1, 3, 5, 7, 10, 15, 30 d) x 4 statistics (mean, sum, min, max), 5 % of driver values missing,
irregular target dates (about one day in four). Both implementations produce the same
numbers (checked here): windows end the day before the target, a window with more than 20 %
missing days is missing.

- pandas: reindex to a daily calendar, ``DataFrame.rolling(k, min_periods=k - floor(0.2 k))``
  per statistic and window, shift one day, pick the target dates.
- lakefeed: :func:`lakefeed.features.window_features` (gather each target's window, reduce).

Refresh: per lake, one more month of drivers and targets; ``new_feature_block`` (only the new
dates, from the drivers of the longest window's spill-over) + calendar-block folds vs
``feature_block`` on the whole record + folds, both to Arrow as the stage stores
them (compute only, in memory), and the same through the features stage and the Parquet store
(``build_features``: read the inputs, verify the old inputs unchanged, compute, append one part
file / write the table, diagnostics, manifest and lock) for a subset of lakes. The new month of
drivers is appended to ``drivers_daily`` as one part file, as the weather stage's monthly
refresh writes it, so the incremental stage reads only the last days of the record. Times are wall clock
and CPU time of this process
(the CPU time is less disturbed by other work on the machine).

Run: ``.venv/bin/python benchmarks/features.py [--lakes 200 --years 10 --store-lakes 20]``.
Not part of the test suite; prints ratios.
"""

from __future__ import annotations

import argparse
import tempfile
import time

import numpy as np
import pandas as pd
import pyarrow as pa

from lakefeed.features import blocked_folds, feature_name, window_features
from lakefeed.features.batch import Series, iter_feature_blocks
from lakefeed.features.incremental import new_feature_block
from lakefeed.features.pit import feature_block
from lakefeed.store import Store

WINDOWS = [1, 3, 5, 7, 10, 15, 30]
STATS = ["mean", "sum", "min", "max"]
FRAC = 0.2


def make_lake(seed: int, years: int, n_drivers: int, fraction: float = 0.25) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Daily drivers (5 % missing) and irregular targets for one synthetic lake."""
    rng = np.random.default_rng(seed)
    days = pd.date_range("2014-01-01", periods=int(365.25 * years), freq="D")
    n = len(days)
    values = rng.gamma(1.5, 2.0, (n, n_drivers))
    values[rng.random(values.shape) < 0.05] = np.nan
    drivers = pd.DataFrame(values, index=days, columns=[f"driver_{i:02d}" for i in range(n_drivers)])
    tdays = days[rng.random(n) < fraction]
    targets = pd.DataFrame({"aoi": "open_water", "date": tdays, "chla": rng.gamma(2.0, 5.0, len(tdays))})
    return drivers, targets


def pandas_windows(drivers: pd.DataFrame, targets: pd.DatetimeIndex) -> pd.DataFrame:
    """The general-purpose alternative: pandas rolling per statistic and window."""
    full = drivers.reindex(pd.date_range(drivers.index[0], drivers.index[-1], freq="D"))
    out = {}
    for k in WINDOWS:
        roll = full.rolling(k, min_periods=k - int(np.floor(FRAC * k)))
        for s in STATS:
            r = getattr(roll, s)().shift(1, freq="D").reindex(targets)
            for c in drivers.columns:
                out[feature_name(c, s, k)] = r[c].to_numpy()
    return pd.DataFrame(out, index=targets)


class Clock:
    """Wall-clock and CPU seconds accumulated over timed calls."""

    def __init__(self) -> None:
        self.wall = self.cpu = 0.0

    def __call__(self, fn, *a, **k):
        t0, c0 = time.perf_counter(), time.process_time()
        out = fn(*a, **k)
        self.wall += time.perf_counter() - t0
        self.cpu += time.process_time() - c0
        return out


def timed(fn, *a, **k):
    t0 = time.perf_counter()
    out = fn(*a, **k)
    return out, time.perf_counter() - t0


def bench_windows(lakes: list[tuple[pd.DataFrame, pd.DataFrame]]) -> tuple[float, float, float]:
    stats = {c: STATS for c in lakes[0][0].columns}
    t_lf = t_pd = 0.0
    worst = 0.0
    for i, (drivers, targets) in enumerate(lakes):
        dates = pd.DatetimeIndex(targets["date"])
        (lf, _), dt = timed(window_features, drivers, dates, windows=WINDOWS, stats=stats, max_missing_fraction=FRAC)
        t_lf += dt
        ref, dt = timed(pandas_windows, drivers, dates)
        t_pd += dt
        if i < 5:  # same numbers (checked on a few lakes; the check is not timed)
            a, b = lf.to_numpy(), ref[lf.columns].to_numpy()
            assert (np.isnan(a) == np.isnan(b)).all()
            worst = max(worst, float(np.nanmax(np.abs(a - b) / np.maximum(1.0, np.abs(b)))))
    return t_lf, t_pd, worst


def _with_folds(block, bounds: list):
    """A feature block as the stage stores it: Arrow, calendar-block folds (embargo 30 d)."""
    arrow = block.to_arrow()
    folds = blocked_folds(arrow["target_date"].to_numpy(), k=5, embargo_days=30)
    return arrow.append_column("fold", pa.array(folds, pa.int16()))


def bench_refresh(lakes: list[tuple[pd.DataFrame, pd.DataFrame]]) -> tuple[Clock, Clock]:
    """Compute only, lake by lake: the new month's rows (calendar-block folds) vs all rows (the same
    folds), both as the stage stores them (Arrow); the new rows
    equal the full rebuild's rows from the cut on."""
    stats = {c: STATS for c in lakes[0][0].columns}
    kw = dict(lead=0, windows=WINDOWS, stats=stats, max_missing_fraction=FRAC)
    full_clock, inc_clock = Clock(), Clock()
    for drivers, targets in lakes:
        cut = drivers.index[-1] - pd.offsets.MonthBegin(1)  # the last month is "new"
        bounds = None  # folds are calendar blocks: nothing frozen
        full = full_clock(lambda d=drivers, t=targets, b=bounds: _with_folds(feature_block(t, d, **kw), b))
        inc = inc_clock(
            lambda d=drivers, t=targets, c=cut, b=bounds: _with_folds(new_feature_block(t, d, since=c, **kw), b)
        )
        tail = full.slice(int((full["target_date"].to_numpy() < cut.to_datetime64()).sum()))
        assert inc.equals(tail)
    return full_clock, inc_clock


def _rows_many(lakes: list[tuple[pd.DataFrame, pd.DataFrame]], cuts: list, bounds: list, *, new_only: bool,
               keep: bool = False) -> list:  # fmt: skip
    """All lakes in one call as the stage computes them (:func:`iter_feature_blocks`): one Arrow conversion
    per chunk, then each lake's rows sliced out, with its folds, and handed on (the stage writes them and
    lets them go; ``keep`` returns them, for the check)."""
    stats = {c: STATS for c in lakes[0][0].columns}
    series = [Series(t, d, since=c if new_only else None) for (d, t), c in zip(lakes, cuts, strict=True)]
    out = []
    for chunk in iter_feature_blocks(series, windows=WINDOWS, stats=stats, max_missing_fraction=FRAC):
        arrow = chunk.block.to_arrow()
        for i in range(len(chunk.bounds) - 1):
            lo, hi = int(chunk.bounds[i]), int(chunk.bounds[i + 1])
            rows = arrow if (lo, hi) == (0, arrow.num_rows) else arrow.slice(lo, hi - lo)
            folds = blocked_folds(rows["target_date"].to_numpy(), k=5, embargo_days=30)
            rows = rows.append_column("fold", pa.array(folds, pa.int16()))
            if keep:
                out.append(rows)
    return out


def bench_refresh_many(lakes: list[tuple[pd.DataFrame, pd.DataFrame]]) -> tuple[Clock, Clock]:
    """Compute only, all lakes together (as ``build_features_many`` computes them): the monthly refresh of
    every lake vs the full rebuild of every lake; the new rows equal the full rebuild's from the cut on
    (checked on a few lakes, not timed)."""
    cuts = [d.index[-1] - pd.offsets.MonthBegin(1) for d, _ in lakes]
    bounds = [None] * len(lakes)  # folds are calendar blocks: nothing frozen
    full_clock, inc_clock = Clock(), Clock()
    full_clock(_rows_many, lakes, cuts, bounds, new_only=False)
    inc_clock(_rows_many, lakes, cuts, bounds, new_only=True)
    some = slice(0, 5)
    full = _rows_many(lakes[some], cuts[some], bounds[some], new_only=False, keep=True)
    inc = _rows_many(lakes[some], cuts[some], bounds[some], new_only=True, keep=True)
    for f, i, c in zip(full, inc, cuts[some], strict=True):
        assert i.equals(f.slice(int((f["target_date"].to_numpy() < c.to_datetime64()).sum())))
    return full_clock, inc_clock


def _project(lake: str, columns: list[str], root: str):
    from pathlib import Path

    from lakefeed.config import Project
    from lakefeed.config._base import LayerRef
    from lakefeed.config.lake import AoiLayer, FeatureOptions, LakeConfig, SubbasinLayer
    from lakefeed.config.sources import SourcesConfig

    here = Path(root)
    cfg = LakeConfig(
        id=lake, name=lake, timezone="UTC", sources=here / "sources.yaml", lake=LayerRef(path=here / "lake.gpkg"),
        aois=AoiLayer(path=here / "aois.gpkg"), subbasins=SubbasinLayer(path=here / "subbasins.gpkg"),
        features=FeatureOptions(windows=WINDOWS, max_missing_fraction=FRAC, drivers={c: STATS for c in columns}),
    )  # fmt: skip
    return Project(lake=cfg, sources=SourcesConfig(), lake_file=here / "lake.yaml", sources_file=here / "s.yaml")


def _store_lakes(lakes: list[tuple[pd.DataFrame, pd.DataFrame]], tmp: str) -> tuple[Store, list]:
    """Each lake's store state after last month's build, and the new month as its stages write it: the drivers
    as one appended part file (the weather stage's monthly refresh), the targets rewritten."""
    from lakefeed.stages.features import build_features_many

    store = Store(f"{tmp}/store")
    projects, months = [], []
    for i, (drivers, targets) in enumerate(lakes):
        lake = f"lake-{i:03d}"
        projects.append(_project(lake, list(drivers.columns), tmp))
        cut = drivers.index[-1] - pd.offsets.MonthBegin(1)
        d = drivers.rename_axis("date").reset_index().assign(zone="lake")
        store.write_table("drivers_daily", lake, d[d["date"] < cut], time_column="date")
        store.write_table("target_daily", lake, targets[targets["date"] < cut])
        months.append((lake, cut, pa.Table.from_pandas(d[d["date"] >= cut], preserve_index=False), targets))
    build_features_many(projects, store, isolate=False)  # last month's state
    for lake, cut, new, targets in months:
        store.append_arrow("drivers_daily", lake, new, since=cut, time_column="date")
        store.write_table("target_daily", lake, targets)
    return store, projects


def bench_store(lakes: list[tuple[pd.DataFrame, pd.DataFrame]], *, together: bool) -> tuple[Clock, Clock, int]:
    """Through the features stage and the store (read inputs, check, compute, write with manifest): the
    monthly refresh (incremental: one appended part per lake) vs a full rebuild of the same inputs, lake by
    lake (``build_features``) or all lakes in one call (``build_features_many``, ``together``)."""
    from lakefeed.stages.features import build_features, build_features_many

    full_clock, inc_clock = Clock(), Clock()
    with tempfile.TemporaryDirectory() as tmp:
        store, projects = _store_lakes(lakes, tmp)
        if together:
            inc_clock(build_features_many, projects, store, isolate=False)
        else:
            for p in projects:
                inc_clock(build_features, p, store)
        parts = sum(len(store.part_files("features", p.id)) for p in projects)
        inc = {p.id: store.read_table("features", p.id) for p in projects}
        if together:
            full_clock(build_features_many, projects, store, full=True, isolate=False)
        else:
            for p in projects:
                full_clock(build_features, p, store, full=True)
        for p in projects:
            pd.testing.assert_frame_equal(store.read_table("features", p.id), inc[p.id])
    return full_clock, inc_clock, parts


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--lakes", type=int, default=200)
    ap.add_argument("--years", type=int, default=10)
    ap.add_argument("--drivers", type=int, default=20)
    ap.add_argument("--store-lakes", type=int, default=20)
    ap.add_argument("--target-fraction", type=float, default=0.25, help="share of days with a target")
    args = ap.parse_args()
    lakes = [make_lake(s, args.years, args.drivers, args.target_fraction) for s in range(args.lakes)]
    n_t = sum(len(t) for _, t in lakes)
    print(f"workload: {args.lakes} lakes x {len(lakes[0][0])} days x {args.drivers} drivers x {len(WINDOWS)} windows "
          f"x {len(STATS)} statistics; {n_t} target rows; "
          f"{n_t * args.drivers * len(WINDOWS) * len(STATS):,} values")  # fmt: skip
    t_lf, t_pd, worst = bench_windows(lakes)
    print(f"windows  lakefeed {t_lf:8.2f} s | pandas rolling {t_pd:8.2f} s | ratio {t_pd / t_lf:5.1f}x (goal >= 5x)"
          f" | max rel. difference {worst:.1e}")  # fmt: skip
    full, inc = bench_refresh(lakes)
    print(f"refresh, lake by lake  full rebuild {full.wall:7.2f} s ({full.cpu:.2f} s CPU) | monthly {inc.wall:6.2f} s "
          f"({inc.cpu:.2f} s CPU) | ratio {full.wall / inc.wall:5.1f}x wall, {full.cpu / inc.cpu:5.1f}x CPU "
          "(compute; results identical)")  # fmt: skip
    full, inc = bench_refresh_many(lakes)
    print(f"refresh, all lakes together  full rebuild {full.wall:7.2f} s ({full.cpu:.2f} s CPU) | monthly "
          f"{inc.wall:6.2f} s ({inc.cpu:.2f} s CPU) | ratio {full.wall / inc.wall:5.1f}x wall, "
          f"{full.cpu / inc.cpu:5.1f}x CPU (compute as build_features_many; goal >= 10x; same results)")  # fmt: skip
    for together in (False, True):
        full, inc, parts = bench_store(lakes[: args.store_lakes], together=together)
        how = "build_features_many" if together else "build_features per lake"
        print(f"stage+store, {how} ({args.store_lakes} lakes: read, check, compute, write; {parts} part files) "
              f"full rebuild {full.wall:7.2f} s ({full.cpu:.2f} s CPU) | monthly {inc.wall:6.2f} s "
              f"({inc.cpu:.2f} s CPU) | ratio {full.wall / inc.wall:5.1f}x wall, {full.cpu / inc.cpu:5.1f}x CPU "
              "(same results)")  # fmt: skip


if __name__ == "__main__":
    main()
