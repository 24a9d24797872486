"""Writing a recomputed table from its first changed date on (store round trips built in the test)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from lakefeed.stages._rewrite_tail import first_change, write_from_first_change
from lakefeed.store import Store

KEYS = ["aoi", "target_date", "lead_days"]


def _table(n: int = 6) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "aoi": ["a"] * n,
            "target_date": pd.date_range("2024-01-01", periods=n, freq="7D"),
            "lead_days": np.zeros(n, dtype=np.int16),
            "chla": np.arange(n, dtype=float),
            "x": [np.nan] * n,
            "flags": [""] * n,
        }
    )


def test_first_change_finds_the_earliest_differing_row() -> None:
    old = _table()
    assert first_change(old, old.copy(), keys=KEYS, date="target_date") is None  # NaN equals NaN
    new = old.copy()
    new.loc[4, "chla"] = 99.0
    new.loc[5, "flags"] = "outside_driver_record"
    assert first_change(old, new, keys=KEYS, date="target_date") == old.loc[4, "target_date"]
    more = pd.concat([old, _table(8).iloc[6:]], ignore_index=True)  # rows added at the end
    assert first_change(old, more, keys=KEYS, date="target_date") == more.loc[6, "target_date"]
    assert first_change(old, old.iloc[1:], keys=KEYS, date="target_date") == old.loc[0, "target_date"]


def test_write_from_first_change_leaves_older_parts_alone(tmp_path: Path) -> None:
    store = Store(tmp_path)
    old = _table()
    store.write_table("features", "tallow", old, units={"chla": "mg m-3"}, time_column="target_date", sort_by=KEYS)
    base = Path(store.part_files("features", "tallow")[0])
    before = base.read_bytes()
    kw = dict(keys=KEYS, date="target_date", units={"chla": "mg m-3"})
    assert write_from_first_change(store, "features", "tallow", old, old.copy(), **kw) == "unchanged"
    new = pd.concat([old, _table(8).iloc[6:]], ignore_index=True)
    assert write_from_first_change(store, "features", "tallow", old, new, **kw) == "appended from 2024-02-12"
    assert base.read_bytes() == before and len(store.part_files("features", "tallow")) == 2
    got = store.read_table("features", "tallow").drop(columns="lake")
    pd.testing.assert_frame_equal(got, new, check_dtype=False)
    assert got.attrs["units"]["chla"] == "mg m-3"
    wider = new.assign(forecast_days=np.nan)  # columns changed: written whole
    assert write_from_first_change(store, "features", "tallow", new, wider, **kw) == "rewritten"
    assert "forecast_days" in store.read_table("features", "tallow")
