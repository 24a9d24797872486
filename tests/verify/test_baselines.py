"""Baselines: the climatology on a synthetic sinusoid of known amplitude, training rows only (hypothesis),
persistence scores recomputed with pandas, and a user's predictions scored against both."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from lakefeed.exceptions import SkillError
from lakefeed.verify import baseline_skill, climatology, climatology_at, events, score_predictions
from lakefeed.verify.baselines import DAYS, baseline_predictions


def _sinusoid(mean: float, amplitude: float, years: int = 3) -> tuple[pd.DatetimeIndex, np.ndarray]:
    dates = pd.date_range("2021-01-01", periods=DAYS * years, freq="D")  # 2021-2023: no leap year, equal counts
    phase = 2 * np.pi * (np.minimum(dates.dayofyear, DAYS) - 1) / DAYS
    return dates, np.exp(mean + amplitude * np.sin(phase))


@pytest.mark.parametrize("window", [1, 31, 61])
def test_climatology_recovers_a_sinusoid_of_known_amplitude(window: int) -> None:
    # ln chla = 1.2 + 0.8 sin(2 pi d / 365). A centred moving mean of W days multiplies a sinusoid of period
    # 365 days by sin(pi W / 365) / (W sin(pi / 365)) (the Dirichlet kernel; common practice, any signal
    # processing text): the fitted log climatology is that attenuated sinusoid, exactly.
    dates, chla = _sinusoid(1.2, 0.8)
    clim = climatology(dates, chla, window_days=window)
    gain = np.sin(np.pi * window / DAYS) / (window * np.sin(np.pi / DAYS))
    expected = 1.2 + 0.8 * gain * np.sin(2 * np.pi * np.arange(DAYS) / DAYS)
    np.testing.assert_allclose(clim, expected, atol=1e-12)
    amplitude = (clim.max() - clim.min()) / 2
    assert amplitude == pytest.approx(0.8 * gain, rel=1e-3)
    back = climatology_at(clim, pd.DatetimeIndex(["2030-01-01", "2030-04-02"]))  # exp of the log mean
    np.testing.assert_allclose(back, np.exp(expected[[0, 91]]))


def test_sparse_days_borrow_from_the_window() -> None:
    dates = pd.DatetimeIndex(["2020-06-01", "2020-06-11"])
    clim = climatology(dates, np.array([2.0, 8.0]), window_days=31)
    day = lambda d: pd.Timestamp(d).dayofyear - 1  # noqa: E731
    assert np.exp(clim[day("2020-06-06")]) == pytest.approx(4.0)  # geometric mean of 2 and 8
    assert np.isnan(clim[day("2020-01-15")])  # nothing within 15 days


def _features(seed: int, n: int = 160) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    dates = pd.Timestamp("2019-01-03") + pd.to_timedelta(np.sort(rng.choice(1400, n, replace=False)), "D")
    chla = np.exp(1.5 + 0.7 * np.sin(2 * np.pi * dates.dayofyear / 365) + rng.normal(0, 0.4, n))
    fold = rng.integers(-1, 4, n)
    rows = []
    for lead in (0, 3):
        rows.append(
            pd.DataFrame(
                {
                    "aoi": "north",
                    "target_date": dates,
                    "lead_days": lead,
                    "fold": fold,
                    "chla": chla,
                    "persistence_chla": np.r_[np.nan, chla[:-1]] * (1 + 0.02 * lead),
                }
            )
        )
    return pd.concat(rows, ignore_index=True)


def test_persistence_scores_recomputed_with_pandas() -> None:
    f = _features(0)
    table = baseline_skill(f, thresholds={"alert": 6.0})
    got = table.set_index(["lead_days", "baseline", "fold", "metric"])
    for lead in (0, 3):
        rows = f[(f["lead_days"] == lead)].dropna(subset=["persistence_chla"])
        rmse = np.sqrt(((rows["persistence_chla"] - rows["chla"]) ** 2).mean())  # pandas reference
        assert got.loc[(lead, "persistence", "all", "rmse"), "value"] == pytest.approx(rmse)
        assert got.loc[(lead, "persistence", "all", "rmse"), "n"] == len(rows)
        obs, fc = rows["chla"] >= 6.0, rows["persistence_chla"] >= 6.0
        assert got.loc[(lead, "persistence", "all", "hit_rate:alert"), "value"] == pytest.approx(
            (obs & fc).sum() / obs.sum()
        )
        test1 = rows[rows["fold"] == 1]
        assert got.loc[(lead, "persistence", "1", "mae"), "value"] == pytest.approx(
            (test1["persistence_chla"] - test1["chla"]).abs().mean()
        )
        cv = rows[rows["fold"] >= 0]
        assert got.loc[(lead, "persistence", "cv", "bias"), "value"] == pytest.approx(
            (cv["persistence_chla"] - cv["chla"]).mean()
        )
    assert set(table["fold"]) == {"0", "1", "2", "3", "cv", "all"}
    assert {"hss:oecd>8", "pss:carlson>=50", "csi:alert", "far:alert"} <= set(table["metric"])


def test_event_rules_follow_the_class_boundaries() -> None:
    ev = {e.name: e for e in events({"alert": 10.0})}
    assert ev["alert"].occurs(np.array([10.0, 9.99])).tolist() == [True, False]  # threshold: at or above
    assert ev["oecd>8"].occurs(np.array([8.0, 8.01])).tolist() == [False, True]  # OECD: boundary in lower class
    assert ev["carlson>=50"].occurs(np.array([7.2, 7.3, np.nan])).tolist() == [False, True, False]  # TSI 50: 7.23


@settings(max_examples=30, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**31 - 1), fold=st.integers(0, 3), factor=st.floats(0.01, 100.0))
def test_changing_a_folds_test_targets_never_changes_its_climatology(seed: int, fold: int, factor: float) -> None:
    f = _features(seed % 500)
    changed = f.copy()
    test = changed["fold"] == fold
    changed.loc[test, "chla"] *= factor * np.exp(np.random.default_rng(seed).normal(size=int(test.sum())))
    before = baseline_predictions(f)["climatology_cv"]
    after = baseline_predictions(changed)["climatology_cv"]
    pd.testing.assert_series_equal(before[test], after[test])
    assert before[f["fold"] < 0].isna().all()  # embargoed rows: in no fold


def test_model_skill_against_the_baselines() -> None:
    f = _features(1)
    rows = f.dropna(subset=["persistence_chla"])
    preds = rows[["aoi", "target_date", "lead_days"]].assign(prediction=rows["persistence_chla"])
    out = score_predictions(preds, f).set_index(["lead_days", "baseline", "fold", "metric"])
    assert out.loc[(0, "model", "cv", "skill_vs_persistence"), "value"] == pytest.approx(0.0)
    assert out.loc[(0, "model", "all", "rmse"), "value"] == out.loc[(0, "persistence", "all", "rmse"), "value"]
    perfect = rows[["aoi", "target_date", "lead_days"]].assign(prediction=rows["chla"])
    out = score_predictions(perfect, f).set_index(["lead_days", "baseline", "fold", "metric"])
    assert out.loc[(3, "model", "2", "skill_vs_climatology_log"), "value"] == pytest.approx(1.0)


def test_predictions_that_match_no_row_are_refused() -> None:
    f = _features(2)
    bad = pd.DataFrame({"aoi": ["north"], "target_date": ["1990-01-01"], "lead_days": [0], "prediction": [1.0]})
    with pytest.raises(SkillError, match="match no feature row"):
        score_predictions(bad, f)
    with pytest.raises(SkillError, match=r"lacks column\(s\) \['prediction'\]"):
        score_predictions(bad.drop(columns="prediction"), f)
    twice = pd.concat([f.iloc[:1, :3]] * 2).assign(prediction=1.0)
    with pytest.raises(SkillError, match="repeat a key"):
        score_predictions(twice, f)
