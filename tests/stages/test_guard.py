"""The shrink guard's comparison of stored and new rows (:func:`lakefeed.stages._guard.shrinkage`), on tiny frames.

The expected sentences are written out by hand from the frames (dates counted by hand).
"""

from __future__ import annotations

from datetime import date, timedelta

import numpy as np
import pandas as pd

from lakefeed.stages._guard import shrinkage


def _days(first: str, n: int, zone: str = "lake", value: float = 1.0) -> pd.DataFrame:
    start = date.fromisoformat(first)
    return pd.DataFrame(
        {"zone": zone, "date": [start + timedelta(days=i) for i in range(n)], "t": value + np.arange(n, dtype=float)}
    )


KW = {"time_column": "date", "keys": ["zone", "date"], "groups": ["zone"]}


def test_a_longer_or_equal_record_loses_nothing() -> None:
    old = _days("2022-06-01", 30)
    assert shrinkage(old, old, **KW) == []
    assert shrinkage(old, _days("2022-06-01", 40, value=5.0), **KW) == []  # values changed, none lost
    assert shrinkage(old.iloc[:0], _days("2022-06-01", 3), **KW) == []  # nothing stored


def test_a_shorter_record_names_the_lost_dates() -> None:
    old = pd.concat([_days("2022-06-01", 30), _days("2022-06-01", 30, zone="catchment")], ignore_index=True)
    new = pd.concat([_days("2022-06-03", 20), _days("2022-06-01", 30, zone="catchment")], ignore_index=True)
    assert shrinkage(old, new, **KW) == [
        "zone lake: the record would start on 2022-06-03 instead of 2022-06-01 (lost: 2022-06-01..2022-06-02)",
        "zone lake: the record would end on 2022-06-22 instead of 2022-06-30 (lost: 2022-06-23..2022-06-30)",
    ]


def test_groups_with_the_same_loss_are_named_together_and_a_lost_group_is_named() -> None:
    old = pd.concat([_days("2022-06-01", 5, zone=z) for z in ("a", "b", "c")], ignore_index=True)
    new = pd.concat([_days("2022-06-01", 4, zone=z) for z in ("a", "b")], ignore_index=True)
    assert shrinkage(old, new, **KW) == [
        "zone a, zone b: the record would end on 2022-06-04 instead of 2022-06-05 (lost: 2022-06-05)",
        "zone c: all 5 row(s) of 2022-06-01..2022-06-05 would be removed",
    ]
    assert shrinkage(old, new.iloc[:0], **KW) == [
        "zone a, zone b, zone c: all 5 row(s) of 2022-06-01..2022-06-05 would be removed"
    ]


def test_valid_values_turned_missing_and_rows_lost_inside_the_range() -> None:
    old = _days("2022-06-01", 10)
    new = old.drop(index=[4, 5]).reset_index(drop=True)
    new.loc[[0, 7], "t"] = np.nan  # 06-01 and (after the drop) 06-10
    assert shrinkage(old, new, **KW, complete=True) == [
        "2 row(s) would be removed on 2022-06-05..2022-06-06",
        "column(s) t: 2 valid value(s) would become missing on 2022-06-01, 2022-06-10",
    ]
    # without complete=True only the values count (e.g. target_daily, whose dates come and go with scenes)
    assert shrinkage(old, new, **KW) == ["column(s) t: 2 valid value(s) would become missing on 2022-06-01, 2022-06-10"]
    # missing before and after is not a loss
    assert shrinkage(new, new, **KW) == []


def test_the_time_column_need_not_be_a_key() -> None:
    dates = pd.to_datetime(["2022-05-01", "2022-05-09", "2022-05-20"])
    old = pd.DataFrame({"scene_id": ["s1", "s2", "s3"], "date": dates, "mean": [3.0, 4.0, 5.0]})
    new = old.assign(mean=[3.0, np.nan, np.nan])
    assert shrinkage(old, new, time_column="date", keys=["scene_id"]) == [
        "column(s) mean: 2 valid value(s) would become missing on 2022-05-09, 2022-05-20"
    ]


def test_many_periods_are_counted_not_listed() -> None:
    old = _days("2022-01-01", 20)
    new = old.assign(t=[np.nan if i % 2 else 1.0 for i in range(20)])
    (text,) = shrinkage(old, new, **KW)
    assert text == (
        "column(s) t: 10 valid value(s) would become missing on 2022-01-02, 2022-01-04, 2022-01-06 and 7 more period(s)"
    )
