"""Contingency and continuous scores against a hand-worked textbook table and general-purpose libraries."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from lakefeed.verify import Contingency, contingency, continuous_scores


def test_finley_tornado_table_as_worked_in_wilks() -> None:
    # Finley's tornado forecasts (1884) as the worked 2x2 example in Wilks, Statistical Methods in the
    # Atmospheric Sciences (forecast-verification chapter; also Jolliffe & Stephenson, Forecast Verification,
    # ch. 3). Counts and rounded scores quoted from memory: a=28 hits, b=72 false alarms, c=23 misses,
    # d=2680 correct negatives; H=0.549, FAR=0.720, TS/CSI=0.228, F=0.026, PSS=0.523, HSS=0.355.
    t = Contingency(a=28, b=72, c=23, d=2680)
    assert t.n == 2803
    assert t.hit_rate == pytest.approx(0.549, abs=5e-4)
    assert t.far == pytest.approx(0.720, abs=5e-4)
    assert t.csi == pytest.approx(0.228, abs=5e-4)
    assert t.false_alarm_rate == pytest.approx(0.026, abs=5e-4)
    assert t.pss == pytest.approx(0.523, abs=5e-4)
    assert t.hss == pytest.approx(0.355, abs=5e-4)
    # and by hand from the formulas (same chapter): exact fractions
    assert t.hit_rate == 28 / 51
    assert t.csi == 28 / 123
    assert t.pss == pytest.approx(28 / 51 - 72 / 2752, rel=1e-12)
    assert t.hss == pytest.approx(2 * (28 * 2680 - 72 * 23) / (51 * 2703 + 100 * 2752), rel=1e-12)


def test_counting_the_table_from_events() -> None:
    f = np.array([1, 1, 0, 0, 1, 0, 0], dtype=bool)
    o = np.array([1, 0, 1, 0, 1, 0, 0], dtype=bool)
    t = contingency(f, o)
    assert (t.a, t.b, t.c, t.d) == (2, 1, 1, 3)
    assert t.scores()["hits"] == 2.0


def test_perfect_and_random_forecasts() -> None:
    perfect = Contingency(a=10, b=0, c=0, d=30)
    assert perfect.pss == 1.0 and perfect.hss == 1.0 and perfect.csi == 1.0 and perfect.far == 0.0
    # forecast independent of the observation (cells proportional to the margins): no skill
    chance = Contingency(a=5, b=15, c=20, d=60)
    assert chance.pss == pytest.approx(0.0) and chance.hss == pytest.approx(0.0)


def test_undefined_scores_are_nan() -> None:
    t = Contingency(a=0, b=0, c=0, d=12)  # no event observed or forecast
    assert np.isnan(t.hit_rate) and np.isnan(t.far) and np.isnan(t.csi) and np.isnan(t.pss)


def test_continuous_scores_against_numpy_and_scipy() -> None:
    rng = np.random.default_rng(3)
    obs = np.exp(rng.normal(1.5, 0.6, 200))
    fc = obs * np.exp(rng.normal(0.1, 0.3, 200))
    fc[[3, 9]] = np.nan
    s = continuous_scores(fc, obs)
    ok = np.isfinite(fc)
    e = fc[ok] - obs[ok]
    assert s["bias"] == (pytest.approx(e.mean()), 198)
    assert s["mae"][0] == pytest.approx(np.abs(e).mean())
    assert s["rmse"][0] == pytest.approx(np.sqrt((e**2).mean()))
    assert s["r"][0] == pytest.approx(stats.pearsonr(fc[ok], obs[ok]).statistic)  # scipy reference
    assert s["r_log"][0] == pytest.approx(stats.pearsonr(np.log(fc[ok]), np.log(obs[ok])).statistic)
    assert s["rmse_log"][0] == pytest.approx(np.sqrt(((np.log(fc[ok]) - np.log(obs[ok])) ** 2).mean()))


def test_log_scale_leaves_out_non_positive_pairs() -> None:
    s = continuous_scores(np.array([1.0, 0.0, 2.0, 4.0]), np.array([1.0, 1.0, 2.0, 2.0]))
    assert s["rmse"][1] == 4 and s["rmse_log"][1] == 3
