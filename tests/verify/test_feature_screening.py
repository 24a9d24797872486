"""Feature screening: reasons, clusters and representatives, VIF against statsmodels, the leak guard, and that
a fold's screening never sees that fold's test rows (hypothesis properties)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from statsmodels.stats.outliers_influence import variance_inflation_factor
from statsmodels.tools import add_constant

from lakefeed.verify import screen
from lakefeed.verify.screening import screen_block


def _frame(seed: int, n: int = 120) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    chla = np.exp(rng.normal(1.5, 0.7, n))
    a = rng.normal(size=n)
    f = pd.DataFrame(
        {
            "aoi": "north",
            "target_date": pd.date_range("2020-01-01", periods=n, freq="5D"),
            "lead_days": 0,
            "fold": np.tile([0, 1, 2, -1], n // 4 + 1)[:n],
            "chla": chla,
            "a": a,
            "a_copy": a * 3.0 + 1.0,  # same ranks: redundant with a
            "b": rng.normal(size=n) + 0.5 * a,
            "c": rng.normal(size=n),
            "empty": np.nan,
            "constant": 4.0,
            "sparse": np.where(rng.random(n) < 0.7, np.nan, rng.normal(size=n)),
        }
    )
    f.loc[:4, "a_copy"] = np.nan  # a has fewer missing values: a represents the cluster
    return f


def test_reasons_clusters_and_representatives() -> None:
    out = screen(_frame(0))
    assert set(out["fold"]) == {"0", "1", "2", "all"}
    row = out[out["fold"] == "all"].set_index("feature")
    assert row.loc["empty", "reason"] == "empty" and row.loc["empty", "missing_fraction"] == 1.0
    assert row.loc["constant", "reason"] == "constant" and row.loc["constant", "n_distinct"] == 1
    assert row.loc["sparse", "reason"] == "too_sparse"
    assert row.loc["a_copy", "reason"] == "redundant_with:a"
    assert row.loc["a", "representative"] and row.loc["a", "keep"]
    assert row.loc["a", "cluster"] == row.loc["a_copy", "cluster"] != row.loc["c", "cluster"]
    assert row.loc["a", "nearest_feature"] == "a_copy" and row.loc["a", "rho_nearest"] == pytest.approx(1.0)
    assert set(row.loc[row["keep"]].index) == {"a", "b", "c"}
    assert not row["suspect_leak"].any()
    assert row.loc["c", "variance"] == pytest.approx(np.var(_frame(0)["c"], ddof=1))


def test_representative_ties_go_by_name() -> None:
    f = _frame(1)
    f["a_copy"] = f["a"] * 2  # now as complete as a: the name decides
    row = screen(f, fold_column=None).set_index("feature")
    assert row.loc["a_copy", "reason"] == "redundant_with:a"


def test_vif_matches_statsmodels() -> None:
    rng = np.random.default_rng(5)
    n = 200
    z = rng.normal(size=(n, 4))
    x = np.column_stack([z[:, 0], z[:, 1] + 0.6 * z[:, 0], z[:, 2] - 0.4 * z[:, 1], z[:, 3] + 0.3 * z[:, 0]])
    y = np.exp(x.sum(axis=1) * 0.1 + rng.normal(size=n))
    out = screen_block(x, ["p", "q", "r", "s"], y)
    assert out["representative"].all()
    exog = add_constant(x)
    for k in range(4):  # statsmodels regresses column k on the others with a constant: the same definition
        assert out["vif"].iloc[k] == pytest.approx(variance_inflation_factor(exog, k + 1), rel=1e-9)


def test_target_copy_is_a_suspect_leak() -> None:
    f = _frame(2)
    f["chla_again"] = f["chla"]
    out = screen(f)
    leak = out[out["feature"] == "chla_again"]
    assert (leak["reason"] == "suspect_leak").all() and leak["suspect_leak"].all() and not leak["keep"].any()
    assert "implausibly high" in leak["message"].iloc[0]
    assert not out.loc[out["feature"] != "chla_again", "suspect_leak"].any()


@settings(max_examples=40, suppress_health_check=[HealthCheck.too_slow])
@given(
    n=st.integers(24, 90),
    seed=st.integers(0, 2**31 - 1),
    transform=st.sampled_from(["copy", "log", "affine", "power", "rank_noise"]),
)
def test_any_planted_leak_is_flagged(n: int, seed: int, transform: str) -> None:
    rng = np.random.default_rng(seed)
    chla = np.exp(rng.normal(1.0, 1.0, n))
    leak = {
        "copy": chla,
        "log": np.log(chla),
        "affine": -2.0 * chla + 7.0,
        "power": chla**0.3,
        # a monotone transform plus noise far below the spacing of the values keeps every rank
        "rank_noise": np.log(chla) + rng.normal(scale=1e-9, size=n),
    }[transform]
    frame = pd.DataFrame(
        {
            "aoi": "x",
            "lead_days": 0,
            "fold": rng.integers(0, 3, n),
            "chla": chla,
            "noise": rng.normal(size=n),
            "planted": leak,
        }
    )
    frame.loc[0, "fold"], frame.loc[1, "fold"] = 0, 1  # at least two folds
    out = screen(frame)
    blocks = out[(out["feature"] == "planted") & (out["n_rows"] >= 3)]
    assert len(blocks) and (blocks["reason"] == "suspect_leak").all()


@settings(max_examples=30, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**31 - 1), fold=st.integers(0, 2), scale=st.floats(0.01, 100.0))
def test_changing_a_folds_test_targets_never_changes_its_screening(seed: int, fold: int, scale: float) -> None:
    f = _frame(seed % 1000, n=80)
    rng = np.random.default_rng(seed)
    changed = f.copy()
    test = changed["fold"] == fold
    changed.loc[test, "chla"] = np.exp(rng.normal(0.0, 2.0, int(test.sum()))) * scale
    changed.loc[test, "b"] = rng.normal(size=int(test.sum()))  # and its features
    before, after = screen(f), screen(changed)
    own = lambda o: o[o["fold"] == str(fold)].reset_index(drop=True)  # noqa: E731
    pd.testing.assert_frame_equal(own(before), own(after))
