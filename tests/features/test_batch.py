"""Many series in one pass: every series' rows equal the rows it gets on its own.

The single-series rows are themselves checked against pandas rolling windows (test_windows.py,
pandas as the reference library) and the point-in-time rules (test_pit.py); here the batch must
reproduce them exactly, whatever the chunking, the sharing of driver records and the mix of
leads, refresh dates and forecasts.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from lakefeed.exceptions import FeatureError
from lakefeed.features.batch import Series, feature_block_many
from lakefeed.features.incremental import new_feature_block
from lakefeed.features.pit import feature_block

OPTIONS = dict(windows=[1, 3, 10], stats={"rain": ["sum", "max"], "temp": ["mean", "min"]}, max_missing_fraction=0.3)


def _drivers(seed: int, start: str, n: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    d = pd.DataFrame(
        {"rain": rng.gamma(0.6, 3.0, n), "temp": rng.normal(10, 4, n)}, index=pd.date_range(start, periods=n)
    )
    d.iloc[rng.random(n) < 0.1, 0] = np.nan
    return d.drop(index=d.index[rng.random(n) < 0.05])  # absent days, not only NaN


def _targets(seed: int, start: str, n: int, aois: tuple[str, ...] = ("open", "bay")) -> pd.DataFrame:
    rng = np.random.default_rng(seed + 100)
    days = pd.date_range(start, periods=n)
    rows = []
    for a in aois:
        for d in days[rng.random(n) < 0.3]:
            rows.append({"aoi": a, "date": d, "chla": float(rng.gamma(2.0, 4.0))})
    return pd.DataFrame(rows).sort_values(["aoi", "date"], ignore_index=True)


def _alone(s: Series) -> pd.DataFrame:
    kw = dict(OPTIONS, lead=s.lead, forecast_drivers=s.forecast_drivers)
    if s.since is not None:
        return new_feature_block(s.targets, s.drivers, since=s.since, **kw).to_pandas().reset_index(drop=True)
    obs = {"observations": s.observations} if s.observations is not None else {}
    return feature_block(s.targets, s.drivers, **kw, **obs).to_pandas().reset_index(drop=True)


def _rows(chunks, i: int) -> pd.DataFrame:
    for c in chunks:
        if c.first <= i < c.first + len(c.bounds) - 1:
            return c.block.to_pandas().iloc[c.rows_of(i - c.first)].reset_index(drop=True)
    raise AssertionError(f"series {i} in no chunk")


def _world() -> list[Series]:
    # lake A's record ends the day before lake B's starts: a window must never reach into the other lake
    da, ta = _drivers(1, "2023-01-01", 120), _targets(1, "2023-01-01", 130)
    db, tb = _drivers(2, "2023-05-01", 90), _targets(2, "2023-04-25", 100, aois=("north",))
    fc = pd.DataFrame(
        {"issue_date": pd.Timestamp("2023-03-01"), "date": pd.date_range("2023-03-01", periods=8), "rain": 7.0,
         "temp": 30.0}
    )  # fmt: skip
    return [
        Series(ta[ta["aoi"] == "bay"], da),
        Series(ta[ta["aoi"] == "open"], da),  # the same drivers frame: laid out once
        Series(ta, da, lead=4),
        Series(ta, da, lead=4, forecast_drivers=fc),
        Series(tb, db),
        Series(tb, db, since="2023-07-10"),
        Series(ta, da, lead=2, since="2023-04-01"),
    ]


@pytest.mark.parametrize("max_cells", [1, 500, 1 << 20])
def test_each_series_equals_its_rows_computed_alone(max_cells: int) -> None:
    world = _world()
    chunks = feature_block_many(world, max_cells=max_cells, **OPTIONS)
    assert [c.first for c in chunks] == sorted({c.first for c in chunks})
    assert sum(len(c.bounds) - 1 for c in chunks) == len(world)
    if max_cells == 1:
        assert len(chunks) == len(world)  # one series per chunk: a series is never split
    for i, s in enumerate(world):
        pd.testing.assert_frame_equal(_rows(chunks, i), _alone(s), check_dtype=False)


def test_windows_do_not_reach_into_another_lakes_record() -> None:
    world = _world()
    lake_b = world[4]
    rows = _rows(feature_block_many(world, **OPTIONS), 4)
    first_day = lake_b.drivers.index.min()
    early = rows[rows["target_date"] <= first_day + pd.Timedelta(days=1)]
    # in the shared array lake A's last days lie right before lake B's first: they must read as missing
    assert len(early) and early["rain__sum_10d"].isna().all() and early["temp__mean_10d"].isna().all()


def test_forecasts_fill_only_their_own_series() -> None:
    d = _drivers(1, "2023-01-01", 120)
    t = pd.DataFrame({"aoi": ["open"], "date": [pd.Timestamp("2023-03-05")], "chla": [3.0]})
    fc = pd.DataFrame({"issue_date": pd.Timestamp("2023-03-01"), "date": pd.date_range("2023-03-01", periods=8),
                       "rain": 7.0, "temp": 30.0})  # fmt: skip
    chunks = feature_block_many([Series(t, d, lead=4), Series(t, d, lead=4, forecast_drivers=fc)], **OPTIONS)
    plain, with_fc = _rows(chunks, 0), _rows(chunks, 1)
    assert len(chunks) == 1 and len(plain) == len(with_fc) == 1  # same drivers, date and lead: not merged
    assert "forecast_drivers" in with_fc.loc[0, "flags"] and "forecast_drivers" not in plain.loc[0, "flags"]
    # 3-day window 2..4 March lies after the issue (1 March): forecast values only in the forecast series
    assert with_fc.loc[0, "temp__min_3d"] == 30.0 and with_fc.loc[0, "rain__sum_3d"] == 21.0
    assert np.isnan(plain.loc[0, "temp__min_3d"])


def test_series_with_other_driver_columns_are_refused() -> None:
    a = Series(_targets(1, "2023-01-01", 30), _drivers(1, "2023-01-01", 30))
    b = Series(_targets(2, "2023-01-01", 30), _drivers(2, "2023-01-01", 30).rename(columns={"temp": "air"}))
    with pytest.raises(FeatureError, match="differ in driver columns"):
        feature_block_many([a, b], **OPTIONS)


def test_negative_or_huge_leads_are_refused() -> None:
    t, d = _targets(1, "2023-01-01", 30), _drivers(1, "2023-01-01", 30)
    with pytest.raises(FeatureError, match="lead time must be >= 0"):
        feature_block_many([Series(t, d, lead=-1)], **OPTIONS)
    with pytest.raises(FeatureError, match="below 1024 days"):
        feature_block_many([Series(t, d, lead=5000)], **OPTIONS)


def test_series_without_rows_or_drivers_keep_their_place() -> None:
    """A refresh date after every target gives a series no rows; a lake without driver days gets rows that are
    flagged outside the record; neither disturbs the other series."""
    world = _world()
    t, d = world[4].targets, world[4].drivers
    odd = [world[0], Series(t, d, since="2030-01-01"), Series(t, d.iloc[:0]), world[4]]
    with pytest.raises(FeatureError, match="differ in driver columns"):
        feature_block_many([world[0], Series(t, pd.DataFrame(index=pd.DatetimeIndex([])))], **OPTIONS)
    chunks = feature_block_many(odd, **OPTIONS)
    assert len(_rows(chunks, 1)) == 0
    empty_drivers = _rows(chunks, 2)
    assert len(empty_drivers) == len(t) and empty_drivers["outside_driver_record"].all()
    assert empty_drivers["rain__sum_10d"].isna().all()
    for i in (0, 3):
        pd.testing.assert_frame_equal(_rows(chunks, i), _alone(odd[i]), check_dtype=False)
