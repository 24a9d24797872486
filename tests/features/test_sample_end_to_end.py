"""End to end on the reduced sample scenario: weather, hydrology and target stages, then features.

A sample of feature rows is recomputed independently with plain pandas from the store's driver and
target tables (reference: pandas slicing and reductions, written without lakefeed's window code).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from lakefeed.config import load_project
from lakefeed.store import Store, load_features

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def built(small_sample: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[Store, object]:
    from lakefeed.stages.features import build_features
    from lakefeed.stages.hydrology import build_hydrology
    from lakefeed.stages.target import build_target
    from lakefeed.stages.weather import build_weather

    project = load_project(small_sample / "config" / "lake-tallow.yaml")
    store = Store(tmp_path_factory.mktemp("e2e") / "store")
    for stage in (build_weather, build_hydrology, build_target):
        stage(project, store)
    result = build_features(project, store)
    return store, result


def test_features_for_every_aoi_with_diagnostics_and_folds(built) -> None:
    store, result = built
    f = load_features(store, "tallow")
    assert set(f["aoi"]) == {"intake", "bathing_bay", "open_water"}
    assert result.tables["diagnostics"] == 3
    assert f["fold"].between(-1, 4).all() and (f["lead_days"] == 0).all()
    # default embargo = the longest window (30 d): the rows of 1-30 January and 1-30 July are in no fold
    # (the sample's 2022 gives the half-year blocks 4044 -> fold 4 and 4045 -> fold 0)
    td = f["target_date"]
    early = td.dt.month.isin([1, 7]) & (td.dt.day <= 30)
    assert (f.loc[early, "fold"] == -1).all() and early.any()
    assert set(f.loc[~early, "fold"]) == {4, 0}
    assert f.attrs["units"]["precipitation_sum__sum_7d"] == "mm"
    assert f.attrs["units"]["tp_load__sum_10d"] == "kg"


def test_sampled_rows_match_an_independent_recomputation(built) -> None:
    store, _ = built
    f = load_features(store, "tallow")
    drivers = store.read_table("drivers_daily", "tallow")
    lake = drivers[drivers["zone"] == "lake"].set_index("date").sort_index()
    hyd = store.read_table("hydrology_daily", "tallow").set_index("date").sort_index()
    target = store.read_table("target_daily", "tallow")
    target["date"] = pd.to_datetime(target["date"])
    rng = np.random.default_rng(11)
    for i in rng.choice(len(f), 25, replace=False):
        row = f.iloc[i]
        t = row["target_date"]
        for table, col, stat, k in ((lake, "air_temperature_mean", "mean", 7), (lake, "precipitation_sum", "sum", 30),
                                    (hyd, "tp_load", "sum", 10), (lake, "air_temperature_max", "max", 3)):  # fmt: skip
            days = pd.date_range(t - pd.Timedelta(days=k), t - pd.Timedelta(days=1))
            window = table[col].reindex(days)
            n_missing = int(window.isna().sum())
            want = getattr(window, stat)() if n_missing <= int(0.2 * k) else np.nan
            got = row[f"{col}__{stat}_{k}d"]
            if np.isnan(want):
                assert np.isnan(got), (t, col)
            else:
                assert got == pytest.approx(want, rel=1e-9, abs=1e-12), (t, col)
        prev = target[(target["aoi"] == row["aoi"]) & (target["date"] < t)].sort_values("date")
        if len(prev):
            assert row["persistence_chla"] == prev["chla"].iloc[-1]
            assert row["persistence_age_days"] == (t - prev["date"].iloc[-1]).days
        else:
            assert np.isnan(row["persistence_chla"])
