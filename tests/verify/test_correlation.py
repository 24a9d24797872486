"""Pairwise-complete Spearman correlations against scipy.stats.spearmanr (nan_policy="omit"), pair by pair."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from lakefeed.verify.correlation import spearman_matrix, spearman_with


def _data(seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    n = 80
    y = rng.normal(size=n)
    x = np.column_stack([y + rng.normal(scale=s, size=n) for s in (0.1, 0.5, 1.0, 3.0)] + [rng.normal(size=n)])
    x = np.column_stack([x, np.round(x[:, 1]), np.round(x[:, 2] * 2) / 2])  # ties
    x[:10, 1] = np.nan  # nested missing patterns, as window features have
    x[:20, 2] = np.nan
    x[rng.choice(n, 15, replace=False), 4] = np.nan  # an irregular one
    x[30:35, 5] = np.nan
    y[[40, 41]] = np.nan
    return x, y


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_matrix_matches_scipy_pair_by_pair(seed: int) -> None:
    x, _ = _data(seed)
    rho = spearman_matrix(x)
    for i in range(x.shape[1]):
        for j in range(x.shape[1]):
            ref = stats.spearmanr(x[:, i], x[:, j], nan_policy="omit").statistic  # scipy reference
            assert rho[i, j] == pytest.approx(ref, abs=1e-12), (i, j)


@pytest.mark.parametrize("seed", [0, 1])
def test_with_target_matches_scipy(seed: int) -> None:
    x, y = _data(seed)
    rho = spearman_with(x, y)
    for i in range(x.shape[1]):
        assert rho[i] == pytest.approx(stats.spearmanr(x[:, i], y, nan_policy="omit").statistic, abs=1e-12)


def test_constant_and_too_short_columns_give_nan() -> None:
    x = np.column_stack([np.ones(10), np.arange(10.0), np.r_[np.full(8, np.nan), 1.0, 2.0]])
    rho = spearman_matrix(x)
    assert np.isnan(rho[0, 1]) and np.isnan(rho[2, 1]) and rho[1, 1] == pytest.approx(1.0)
    assert np.isnan(spearman_with(x, np.arange(10.0))[0])
