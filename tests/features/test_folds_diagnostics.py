"""Cross-validation folds and sampling diagnostics on small hand-made series (exact answers)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lakefeed.exceptions import FeatureError
from lakefeed.features import EMBARGOED, assign_folds, blocked_folds, random_folds, sampling_diagnostics


def test_blocked_folds_are_contiguous_and_balanced() -> None:
    dates = pd.date_range("2020-01-01", periods=10, freq="7D")
    assert blocked_folds(dates, k=5).tolist() == [0, 0, 1, 1, 2, 2, 3, 3, 4, 4]
    shuffled = dates[[3, 0, 9, 5]]
    assert blocked_folds(shuffled.append(dates), k=5)[:4].tolist() == [1, 0, 4, 2]


@settings(deadline=None)
@given(st.lists(st.integers(0, 2000), min_size=1, max_size=200), st.integers(2, 8))
def test_blocked_folds_property(days: list[int], k: int) -> None:
    """Property: folds are monotone in time, same date -> same fold, sizes differ by <= 1 date."""
    dates = pd.Timestamp("2015-01-01") + pd.to_timedelta(days, unit="D")
    f = blocked_folds(dates, k=k)
    order = np.argsort(np.asarray(days), kind="stable")
    assert (np.diff(f[order]) >= 0).all()
    uniq_f = pd.Series(f).groupby(np.asarray(days)).nunique()
    assert (uniq_f == 1).all()
    sizes = pd.Series(f).groupby(np.asarray(days)).first().value_counts()
    assert sizes.max() - sizes.min() <= 1


def test_embargo_drops_observations_just_after_each_block() -> None:
    days = [0, 1, 2, 10, 11, 30, 31, 32, 60, 61]
    dates = pd.Timestamp("2020-01-01") + pd.to_timedelta(days, unit="D")
    f = blocked_folds(dates, k=5, embargo_days=5)
    # blocks by date pairs: {0,1} {2,10} {11,30} {31,32} {60,61}; within 5 d after the previous block's last date
    # are dropped: 2 (1 + 1), 11 (10 + 1), 31 (30 + 1); 32 (30 + 2) too
    assert f.tolist() == [0, 0, EMBARGOED, 1, EMBARGOED, 2, EMBARGOED, EMBARGOED, 4, 4]


def test_random_folds_are_labelled_and_balanced() -> None:
    f = random_folds(103, k=5, seed=1)
    assert sorted(np.bincount(f)) == [20, 20, 21, 21, 21]
    dates = pd.date_range("2020-01-01", periods=20).append(pd.date_range("2020-01-01", periods=5))
    g = assign_folds(dates, k=4, kind="random")
    assert (g[:5] == g[20:]).all()
    with pytest.raises(FeatureError, match="blocked"):
        assign_folds(dates, kind="shuffle")  # type: ignore[arg-type]


def test_sampling_diagnostics_exact() -> None:
    obs = pd.DataFrame(
        {
            "aoi": ["a"] * 6 + ["b"],
            "date": pd.to_datetime(
                ["2021-01-10", "2021-04-01", "2021-04-03", "2021-07-01", "2021-07-02", "2022-01-01", "2021-05-05"]
            ),
            "chla": [1.0, 2, 3, 4, 5, 6, 7],
        }
    )
    d = sampling_diagnostics(obs, record=("2021-01-01", "2022-01-31"), min_observations=5).set_index("aoi")
    a = d.loc["a"]
    assert a["n_obs"] == 6 and not a["warn_few_observations"]
    assert (a["n_obs_djf"], a["n_obs_mam"], a["n_obs_jja"], a["n_obs_son"]) == (2, 2, 2, 0)
    assert json.loads(a["obs_per_year"]) == {"2021": 5, "2022": 1}
    # gaps: 81, 2, 89, 1, 183 days
    assert a["gap_max_days"] == 183 and a["longest_gap_start"] == pd.Timestamp("2021-07-02")
    assert a["gap_median_days"] == 81
    assert (a["gaps_1d"], a["gaps_2_5d"], a["gaps_31_90d"], a["gaps_over_90d"]) == (1, 1, 2, 1)
    assert a["coverage_fraction"] == pytest.approx(4 / 13)  # Jan, Apr, Jul 2021 and Jan 2022 of 13 months
    assert a["warn_season_under_represented"] and "SON" in a["warnings"]
    b = d.loc["b"]
    assert b["warn_few_observations"] and "only 1 accepted" in b["warnings"]
    assert np.isnan(b["gap_max_days"])


def test_default_minimum_is_140() -> None:
    """140 accepted observations: a rule of thumb from field experience (common practice, no published source)."""
    dates = pd.date_range("2015-01-01", periods=139, freq="13D")
    d = sampling_diagnostics(pd.DataFrame({"aoi": "a", "date": dates}))
    assert d["warn_few_observations"].item()
    d = sampling_diagnostics(pd.DataFrame({"aoi": "a", "date": pd.date_range("2015-01-01", periods=140, freq="13D")}))
    assert not d["warn_few_observations"].item()


@settings(deadline=None)
@given(
    st.lists(st.integers(0, 2000), min_size=1, max_size=120),
    st.lists(st.integers(1, 400), max_size=40),
    st.integers(2, 6),
    st.integers(0, 20),
)
def test_frozen_folds_do_not_move_when_dates_are_appended(old: list[int], new: list[int], k: int, embargo: int) -> None:
    """Property: with boundaries frozen on the old dates, the old dates keep the folds that blocked_folds
    gives them, later dates join the last block; random (hashed) folds ignore the other dates."""
    from lakefeed.features import date_hash_folds, fold_boundaries, folds_from_boundaries

    day0 = pd.Timestamp("2015-01-01")
    old_dates = day0 + pd.to_timedelta(old, unit="D")
    later = day0 + pd.to_timedelta([max(old) + d for d in new], unit="D")
    bounds = fold_boundaries(old_dates, k=k)
    want = blocked_folds(old_dates, k=k, embargo_days=embargo)
    both = folds_from_boundaries(old_dates.append(later), bounds, embargo_days=embargo)
    np.testing.assert_array_equal(both[: len(old)], want)
    last = min(k, len(set(old))) - 1
    tail = both[len(old) :]
    assert set(tail.tolist()) <= {last, EMBARGOED}
    if last == 0 or embargo == 0:
        assert (tail == last).all()
    np.testing.assert_array_equal(
        date_hash_folds(old_dates.append(later), k=k)[: len(old)], date_hash_folds(old_dates, k=k)
    )


def test_hashed_random_folds_are_about_balanced() -> None:
    from lakefeed.features import date_hash_folds

    f = date_hash_folds(pd.date_range("2000-01-01", periods=5000), k=5, seed=3)
    assert set(f.tolist()) == {0, 1, 2, 3, 4} and np.bincount(f).min() > 900  # expected 1000 each
