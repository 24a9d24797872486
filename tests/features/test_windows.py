"""Antecedent windows at irregular target dates.

Reference: pandas ``Series.rolling`` (pandas as the general-purpose reference library) on a
complete daily calendar, with ``min_periods = k - floor(max_missing_fraction * k)`` and a
one-day shift for windows that end the day before the target.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from lakefeed.exceptions import FeatureError
from lakefeed.features import WindowPlan, default_statistics, feature_name, window_features

WINDOWS = [1, 3, 5, 7, 10, 15, 30]


def _series(n: int = 400, seed: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    days = pd.date_range("2021-03-01", periods=n, freq="D")
    frame = pd.DataFrame(
        {
            "precipitation_sum": np.where(rng.random(n) < 0.6, 0.0, rng.gamma(0.7, 6.0, n)),
            "air_temperature_mean": 10 + 8 * np.sin(np.arange(n) / 58) + rng.normal(0, 2, n),
            "wind_speed_mean": rng.gamma(3.0, 1.2, n),
        },
        index=days,
    )
    frame.iloc[rng.choice(n, 40, replace=False), 0] = np.nan  # scattered missing values
    frame.iloc[100:112, 1] = np.nan  # a 12-day gap in one driver
    return frame.drop(index=days[200:205])  # five days absent altogether


def _reference(frame: pd.DataFrame, targets: pd.DatetimeIndex, stats: dict, frac: float, include: bool) -> pd.DataFrame:
    full = frame.reindex(pd.date_range(frame.index[0], frame.index[-1], freq="D"))
    cols = {}
    for c, ss in stats.items():
        for s in ss:
            for k in WINDOWS:
                r = getattr(full[c].rolling(k, min_periods=k - int(np.floor(frac * k))), s)()
                if not include:
                    r = r.shift(1, freq="D")
                cols[feature_name(c, s, k)] = r.reindex(targets)
    return pd.DataFrame(cols)


@pytest.mark.parametrize("include", [False, True])
@pytest.mark.parametrize("frac", [0.0, 0.2, 0.5])
def test_windows_match_pandas_rolling_with_missing_days(include: bool, frac: float) -> None:
    frame = _series()
    rng = np.random.default_rng(3)
    targets = pd.DatetimeIndex(np.sort(rng.choice(frame.index[35:], 60, replace=False)))
    stats = {"precipitation_sum": ["sum", "mean", "max"], "air_temperature_mean": ["mean", "min", "max", "sum"],
             "wind_speed_mean": ["mean"]}  # fmt: skip
    got, flags = window_features(frame, targets, windows=WINDOWS, stats=stats, include_target_day=include,
                                 max_missing_fraction=frac)  # fmt: skip
    want = _reference(frame, targets, stats, frac, include)[got.columns]
    pd.testing.assert_frame_equal(got, want, check_freq=False, rtol=1e-12, atol=1e-12)
    # every missing value that pandas also leaves missing is flagged (never a value over fewer days)
    assert (flags.to_numpy() == want.isna().to_numpy()).all()


def test_dry_spell_sums_to_exactly_zero() -> None:
    """A dry spell after large amounts sums to exactly 0 (cumulative sums drift; docs/architecture.md, "Pitfalls")."""
    days = pd.date_range("2020-01-01", periods=300)
    rain = np.r_[np.full(200, 123.456789), np.zeros(100)]
    got, _ = window_features(pd.DataFrame({"precipitation_sum": rain}, index=days), days[[260, 299]], windows=[30])
    assert (got.to_numpy() == 0.0).all()


def test_irregular_unsorted_duplicate_targets_and_exact_values() -> None:
    days = pd.date_range("2024-01-01", periods=10)
    frame = pd.DataFrame({"precipitation_sum": np.arange(1.0, 11.0)}, index=days)
    got, _ = window_features(frame, ["2024-01-08", "2024-01-04", "2024-01-08"], windows=[1, 3])
    # 1d before 8 Jan = 7 Jan (value 7); 3d = 5+6+7 = 18; before 4 Jan: 3 and 1+2+3 = 6
    assert got["precipitation_sum__sum_1d"].tolist() == [7.0, 3.0, 7.0]
    assert got["precipitation_sum__sum_3d"].tolist() == [18.0, 6.0, 18.0]


def test_targets_outside_record_are_missing_and_flagged() -> None:
    days = pd.date_range("2024-01-01", periods=10)
    frame = pd.DataFrame({"wind_speed_mean": np.ones(10)}, index=days)
    got, flags = window_features(frame, ["2023-06-01", "2024-03-01", "2024-01-11"], windows=[3])
    assert got.iloc[:2].isna().all().all() and flags.iloc[:2].all().all()
    assert got.iloc[2, 0] == 1.0 and not flags.iloc[2, 0]


@pytest.mark.parametrize("bad", [[0], [-3], [7, 0], []])
def test_window_length_zero_or_negative_is_an_error(bad: list[int]) -> None:
    frame = pd.DataFrame({"x": [1.0]}, index=pd.date_range("2024-01-01", periods=1))
    with pytest.raises(FeatureError, match="positive whole days"):
        window_features(frame, ["2024-01-02"], windows=bad)


def test_config_rejects_zero_window() -> None:
    from pydantic import ValidationError

    from lakefeed.config.lake import FeatureOptions

    with pytest.raises(ValidationError, match="positive"):
        FeatureOptions(windows=[0, 3])


def test_unknown_statistic_is_an_error() -> None:
    with pytest.raises(FeatureError, match="median"):
        WindowPlan.build(["x"], windows=[3], stats={"x": ["median"]})


def test_default_statistics() -> None:
    """Sums for amounts, mean/min/max for temperatures, mean otherwise (common practice)."""
    assert default_statistics("precipitation_sum") == ["sum"]
    assert default_statistics("tp_load") == ["sum"]
    assert default_statistics("tn_load_SB01") == ["sum"]
    assert default_statistics("tn_fwmc") == ["mean"]
    assert default_statistics("dewpoint_mean") == ["mean", "min", "max"]
    assert default_statistics("air_temperature_max") == ["mean", "min", "max"]
    assert default_statistics("inflow_discharge") == ["mean"]


def test_few_target_path_equals_the_day_loop() -> None:
    """reduce_windows has two code paths (running reductions for a few targets, a day loop for many);
    both accumulate sequentially, so they agree exactly, NaN pattern included (self-consistency)."""
    from lakefeed.features.windows import _FEW_TARGETS, WindowPlan, reduce_windows

    rng = np.random.default_rng(3)
    cols = ["a", "b", "c"]
    gathered = rng.gamma(1.0, 2.0, (30, 3 * _FEW_TARGETS, 3))
    gathered[rng.random(gathered.shape) < 0.15] = np.nan
    gathered[:, 0, 0] = 0.0  # a dry spell sums to exactly zero on both paths
    plan = WindowPlan.build(cols, windows=[1, 3, 7, 30], stats={c: ["mean", "sum", "min", "max"] for c in cols})
    many, many_bad = reduce_windows(gathered, plan, cols)
    chunks = [
        reduce_windows(gathered[:, i : i + _FEW_TARGETS], plan, cols) for i in range(0, 3 * _FEW_TARGETS, _FEW_TARGETS)
    ]
    np.testing.assert_array_equal(np.vstack([c[0] for c in chunks]), many)
    np.testing.assert_array_equal(np.vstack([c[1] for c in chunks]), many_bad)
    assert many[0, plan.names.index("a__sum_30d")] == 0.0
