"""Cross-validation folds and sampling diagnostics on small hand-made series (exact answers)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lakefeed.exceptions import FeatureError
from lakefeed.features import (
    EMBARGOED,
    assign_folds,
    block_numbers,
    blocked_folds,
    fold_counts,
    random_folds,
    sampling_diagnostics,
)


def test_blocked_folds_are_calendar_blocks_modulo_k() -> None:
    """Half-year blocks numbered from January of year 0, fold = block modulo k. By hand: 2020-01..06 is
    month 24240..24245 -> block 4040 -> fold 0 (k=5), 2020-07..12 -> 4041 -> 1, 2021 H1 -> 2, 2022 H2 -> 5 -> 0."""
    dates = pd.to_datetime(["2020-01-15", "2020-06-30", "2020-07-01", "2021-03-03", "2022-12-31"])
    assert blocked_folds(dates, k=5).tolist() == [0, 0, 1, 2, 0]
    assert blocked_folds(dates, k=2, block_months=12).tolist() == [0, 0, 0, 1, 0]  # years 2020, 2021, 2022
    assert blocked_folds(dates[[3, 0]], k=5).tolist() == [2, 0]  # a date's fold ignores the other dates


def test_embargo_takes_out_the_first_days_of_each_block() -> None:
    """Blocked cross-validation with a buffer between blocks (Roberts et al. 2017, Ecography 40: 913-929,
    "Cross-validation strategies for data with temporal, spatial, hierarchical, or phylogenetic structure";
    from memory): the rows dated within N days after a block boundary are in no fold. N = 30: 2020-01-01 ..
    2020-01-30 and 2020-07-01 .. 2020-07-30 are dropped, 2020-01-31 and 2020-07-31 are kept."""
    dates = pd.to_datetime(["2020-01-01", "2020-01-30", "2020-01-31", "2020-06-30", "2020-07-01", "2020-07-30",
                            "2020-07-31"])  # fmt: skip
    f = blocked_folds(dates, k=5, embargo_days=30)
    assert f.tolist() == [EMBARGOED, EMBARGOED, 0, 0, EMBARGOED, EMBARGOED, 1]
    kept, lost = fold_counts(dates, k=5, embargo_days=30, rows_per_date=2)
    assert json.loads(kept) == {"0": 4, "1": 2, "2": 0, "3": 0, "4": 0}
    assert json.loads(lost) == {"0": 4, "1": 4, "2": 0, "3": 0, "4": 0}


@settings(deadline=None)
@given(
    st.lists(st.integers(0, 3000), min_size=1, max_size=200),
    st.integers(2, 8),
    st.sampled_from([1, 2, 3, 4, 6, 12, 18]),
    st.integers(0, 60),
)
def test_blocked_folds_property(days: list[int], k: int, months: int, embargo: int) -> None:
    """Properties: same date -> same fold; a date's fold does not depend on the other dates (the record may
    grow: a subset gets the folds it has within the whole); the buffer holds: two kept rows of different folds
    lie more than ``embargo`` days apart, and a kept row's ``embargo``-day antecedent window lies in its own
    block (Roberts et al. 2017, blocked cross-validation with buffers; from memory)."""
    dates = pd.Timestamp("2015-01-01") + pd.to_timedelta(days, unit="D")
    f = blocked_folds(dates, k=k, block_months=months, embargo_days=embargo)
    assert (pd.Series(f).groupby(np.asarray(days)).nunique() == 1).all()
    half = len(days) // 2
    np.testing.assert_array_equal(blocked_folds(dates[:half], k=k, block_months=months, embargo_days=embargo), f[:half])
    d = np.asarray(days)
    kept = f != EMBARGOED
    a, b = np.meshgrid(np.flatnonzero(kept), np.flatnonzero(kept), indexing="ij")
    apart = np.abs(d[a] - d[b]) > embargo
    assert (apart | (f[a] == f[b])).all()
    m = (dates.year * 12 + dates.month - 1) // months * months  # first month of the block, counted by hand
    start = pd.to_datetime({"year": m // 12, "month": m % 12 + 1, "day": 1})
    assert ((dates - pd.DatetimeIndex(start)).days[kept] >= embargo).all()
    assert (block_numbers(dates, block_months=months)[0] % k == np.where(kept, f, (m // months) % k)).all()


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
@given(st.lists(st.integers(0, 2000), min_size=1, max_size=120), st.lists(st.integers(1, 400), max_size=40))
def test_hashed_folds_do_not_move_when_dates_are_appended(old: list[int], new: list[int]) -> None:
    """Property: random (hashed) folds ignore the other dates, as blocked ones do."""
    from lakefeed.features import date_hash_folds

    day0 = pd.Timestamp("2015-01-01")
    old_dates = day0 + pd.to_timedelta(old, unit="D")
    later = day0 + pd.to_timedelta([max(old) + d for d in new], unit="D")
    np.testing.assert_array_equal(
        date_hash_folds(old_dates.append(later), k=5)[: len(old)], date_hash_folds(old_dates, k=5)
    )


def test_hashed_random_folds_are_about_balanced() -> None:
    from lakefeed.features import date_hash_folds

    f = date_hash_folds(pd.date_range("2000-01-01", periods=5000), k=5, seed=3)
    assert set(f.tolist()) == {0, 1, 2, 3, 4} and np.bincount(f).min() > 900  # expected 1000 each
