"""Incremental refresh equals a full rebuild (pure functions)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from lakefeed.features import build_feature_rows, refresh_feature_rows, refresh_start
from lakefeed.features.incremental import prefix_digest


def _inputs(n: int, seed: int = 5) -> tuple[pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng(seed)
    days = pd.date_range("2020-01-01", periods=n)
    drivers = pd.DataFrame({"precipitation_sum": rng.gamma(0.5, 4, n), "air_temperature_mean": rng.normal(8, 5, n)},
                           index=days)  # fmt: skip
    drivers[rng.random(drivers.shape) < 0.05] = np.nan
    tdays = np.sort(rng.choice(days, n // 4, replace=False))
    targets = pd.DataFrame(
        {"aoi": rng.choice(["p", "q"], len(tdays)), "date": tdays, "chla": rng.gamma(2, 3, len(tdays))}
    )
    return drivers, targets.sort_values(["aoi", "date"]).reset_index(drop=True)


@pytest.mark.parametrize("lead", [0, 4])
def test_monthly_refresh_equals_full_rebuild(lead: int) -> None:
    drivers, targets = _inputs(500)
    old_d = drivers[drivers.index <= "2021-03-31"]
    old_t = targets[targets["date"] <= "2021-03-25"]
    kw = dict(lead=lead, windows=[1, 5, 30], max_missing_fraction=0.2)
    old_rows = build_feature_rows(old_t, old_d, **kw)
    since = refresh_start(old_d.index.max(), old_t["date"].max())
    assert since == pd.Timestamp("2021-03-26")
    new_d = drivers[drivers.index <= "2021-04-30"]
    new_t = targets[targets["date"] <= "2021-04-30"]
    got = refresh_feature_rows(old_rows, new_t, new_d, since=since, **kw)
    want = build_feature_rows(new_t, new_d, **kw).sort_values(["aoi", "target_date"], kind="stable")
    pd.testing.assert_frame_equal(got, want.reset_index(drop=True))


def test_prefix_digest_sees_changes_before_the_date_only() -> None:
    drivers, _ = _inputs(100)
    frame = drivers.rename_axis("date").reset_index()
    a = prefix_digest(frame, date_column="date", through="2020-02-01")
    changed_late = frame.copy()
    changed_late.loc[changed_late["date"] > "2020-02-01", "precipitation_sum"] = 99.0
    assert prefix_digest(changed_late, date_column="date", through="2020-02-01") == a
    changed_early = frame.copy()
    changed_early.loc[3, "precipitation_sum"] = 99.0
    assert prefix_digest(changed_early, date_column="date", through="2020-02-01") != a
