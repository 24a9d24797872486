"""Total outlier screening: the widened window, the other sensors, the seasonal climatology, and the mark of
values that no rule could examine (never a plain value)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from lakefeed.extract.harmonise import fit_bias, matchups
from lakefeed.extract.screening import hampel_screen
from lakefeed.extract.screening_reference import climatology_screen, total_screening

KW = dict(window_days=31, threshold=3.5, min_points=3, min_scale=0.2, trend=True)


def _frame(days: np.ndarray, values: np.ndarray, sensor: str = "kite") -> pd.DataFrame:
    t = pd.Timestamp("2022-01-01 10:00", tz="UTC") + pd.to_timedelta(days, unit="D")
    return pd.DataFrame({"aoi": "a", "sensor": sensor, "time": t, "median": values, "accepted": True})


def test_window_widened_until_enough_neighbours() -> None:
    """A spike with two neighbours within +-15.5 days (the old filter never examined it): the window widens to
    the third nearest value, 20 days away (40-day window), and the spike is flagged. Worked by hand (ln): the
    others lie at -50, -35, -20, -10, +10, +25, ... days on a flat series of ln 2.0 with 5 % wiggles; Theil-Sen level
    about 2.0, residual MAD tiny, floored to 0.2 (the series' changes over the 10-day lag to the nearest
    neighbour are smaller); interpolation between the neighbours at -10 and +10 days: about 2.0;
    |2.0 + ln 4 - 2.0| / 0.2 = 6.9 > 3.5 on both counts."""
    days = np.array([0.0, 15, 30, 40, 50, 60, 75, 90, 105, 120])
    x = np.full(days.size, 2.0) + 0.05 * np.sin(days)
    x[4] += np.log(4.0)
    old = hampel_screen(days, x, **KW)  # no widening: not examined, not flagged
    assert not old.flags[4] and not old.examined[4]
    r = hampel_screen(days, x, **KW, max_window_days=91)
    assert np.flatnonzero(r.flags).tolist() == [4]
    assert r.window_days[4] == 40.0 and r.examined[4]


def test_value_beyond_the_widest_window_is_not_examined() -> None:
    days = np.array([0.0, 1, 2, 3, 200])
    x = np.array([1.0, 1.0, 1.0, 1.0, 9.0])
    r = hampel_screen(days, x, **KW, max_window_days=91)
    assert r.examined.tolist() == [True, True, True, True, False]
    assert not r.flags.any() and np.isnan(r.window_days[4])


def test_widened_window_keeps_a_sparse_bloom_peak() -> None:
    """A real bloom rise seen sparsely (values 5 days apart, then a 30-day gap), the case a widened window
    with three values alone flagged: the peak lies close to its nearest neighbour, so the interpolation check
    and the series' own changes over that lag keep it (ln values of a rise x4 over 40 days)."""
    days = np.array([0.0, 5, 35, 40, 45, 75, 80, 85, 90, 120, 125, 130, 160])
    x = np.log([3.0, 3.2, 6.0, 8.0, 12.0, 14.0, 13.0, 11.0, 10.0, 6.0, 5.5, 5.0, 3.0])
    r = hampel_screen(days, x, **KW, max_window_days=91)
    assert not r.flags.any()


def test_climatology_of_earlier_years_hand_example() -> None:
    """References: the same AOI group's values of EARLIER years within 45.5 days of the day of year.
    Worked by hand (ln units): for 2024-03-01 the references are 2022-02-20, 2022-03-10, 2023-03-05 (ln 2.0, 2.1,
    2.3; 2023-06-01 is too far in the season, 2024-02-25 is the same year, 2022-03-02 of group b is another
    group): median 2.1, MAD 0.1, scale max(0.148, 0.2) = 0.2; |3.7 - 2.1| / 0.2 = 8 > 3.5 -> flagged. 2022-03-10
    has no earlier year: not examined."""
    days = pd.to_datetime(["2022-02-20", "2022-03-10", "2023-03-05", "2023-06-01", "2024-02-25", "2024-03-01",
                           "2022-03-02"]).to_numpy()  # fmt: skip
    x = np.array([2.0, 2.1, 2.3, 0.5, 5.0, 3.7, 9.0])
    groups = np.array(["a"] * 6 + ["b"])
    todo = np.array([False, True, False, False, False, True, False])
    flags, examined, n = climatology_screen(
        days, x, groups, todo, np.ones(7, bool), half_window_days=45.5, threshold=3.5
    )
    assert n.tolist() == [0, 0, 0, 0, 0, 3, 0]
    assert examined.tolist() == [False] * 5 + [True, False] and flags.tolist() == [False] * 5 + [True, False]


def test_total_screening_uses_other_sensors_then_marks_the_rest_unscreened() -> None:
    """A sparse sensor (every 60 days) beside a daily one: its values are examined among the harmonised daily
    values (rule 2), a factor-4 spike of it is flagged there; without the daily sensor (no fits) its values
    cannot be examined in the first year and are kept with screened = False and the reason."""
    rng = np.random.default_rng(3)
    dd = np.arange(0.0, 360.0)
    daily = _frame(dd, 1.25 * 10 * np.exp(0.3 * np.sin(dd / 40) + rng.normal(0, 0.03, dd.size)), "dune")
    ks = np.arange(5.0, 360.0, 60.0)
    kite = _frame(ks, 10 * np.exp(0.3 * np.sin(ks / 40) + rng.normal(0, 0.03, ks.size)), "kite")
    kite.loc[2, "median"] *= 4.0
    obs = pd.concat([daily, kite], ignore_index=True)
    obs["date"] = obs["time"].dt.date
    fits = fit_bias(matchups(obs, reference="kite"), reference="kite", sensors=["dune"], min_matchups=3)
    out = total_screening(obs, fits)
    k = obs.index[obs["sensor"] == "kite"]
    assert out.loc[k, "screened"].all() and out.loc[k, "outlier"].tolist() == [False, False, True, False, False, False]
    assert out.loc[k, "screening"].str.startswith("harmonised sensors").all()
    assert not out.loc[obs["sensor"] == "dune", "outlier"].any()
    alone = total_screening(kite, pd.DataFrame())
    assert not alone["screened"].any() and not alone["outlier"].any()
    assert alone["screening"].str.startswith("unscreened: fewer than 3 other values within a 91-day window").all()


@st.composite
def _sparse_series(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray, int]:
    """Random observation dates over 1-3 years: a revisit of 1-10 days broken by sparse stretches (gaps of
    15-80 days); smooth seasonal ln values (amplitude <= 0.5) with 5 % noise; one spike (x5 to x20) planted
    at an index inside or next to a sparse stretch."""
    years = draw(st.integers(1, 3))
    step = draw(st.integers(1, 10))
    t, day = [], 0.0
    while day < 365.0 * years:
        t.append(day)
        day += draw(st.sampled_from([step, step, step, draw(st.integers(15, 80))]))
    days = np.array(t)
    seed = draw(st.integers(0, 2**16))
    rng = np.random.default_rng(seed)
    amp = draw(st.floats(0.0, 0.5))
    x = np.log(10.0) + amp * np.sin(2 * np.pi * days / 365.0) + rng.normal(0, 0.05, days.size)
    gaps = np.diff(days)
    sparse = np.flatnonzero(gaps >= 15)
    pick = draw(st.sampled_from(sorted({*sparse.tolist(), *(sparse + 1).tolist()}) or [0]))
    x[pick] += np.log(draw(st.floats(5.0, 20.0)))
    return days, x, int(pick)


@settings(max_examples=60)
@given(_sparse_series())
def test_a_spike_in_a_sparse_period_is_flagged_or_marked_unscreened(case) -> None:
    """Property (issue: a lone outlier is never a plain value): whatever the sampling around it, a planted
    spike ends flagged or with screened = False, never as an examined, kept value."""
    days, x, pick = case
    out = total_screening(_frame(days, np.exp(x)), pd.DataFrame())
    assert out["outlier"].iloc[pick] or not out["screened"].iloc[pick], out.iloc[pick].to_dict()
