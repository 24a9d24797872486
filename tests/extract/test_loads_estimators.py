"""Load estimators from sparse samples against published formulas on hand-worked examples."""

from __future__ import annotations

import math
from fractions import Fraction as F

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from lakefeed.exceptions import ExtractError
from lakefeed.extract.load_estimation import (
    DEFAULT_MIN_SAMPLES,
    METHODS,
    beale_load,
    beale_mean,
    compare_methods,
    estimate_load,
    fwmc_load,
    interpolation_load,
    rating_curve_load,
)
from lakefeed.extract.loads import load_factor

K = 86.4  # m3 s-1 x mg L-1 -> kg d-1 (unit arithmetic: 1 g s-1 = 86.4 kg d-1; load_factor() derives it with pint)


def record(q: list[float], start: str = "2023-01-01") -> pd.Series:
    return pd.Series(q, index=pd.date_range(start, periods=len(q), freq="D"), dtype=float)


def samples_for(flow: pd.Series, positions: list[int], loads: list[float], censored=None) -> pd.DataFrame:
    """Samples whose daily load (Q x C x 86.4) is exactly ``loads`` on the given days."""
    q = flow.to_numpy()[positions]
    return pd.DataFrame(
        {
            "date": flow.index[positions],
            "concentration": np.asarray(loads) / (q * load_factor()),
            "censored": censored if censored is not None else False,
        }
    )


# ----------------------------------------------------------------------------- rating curve
# Hand-worked example (written here): ln Q = 0, 1, 2, 3 and ln L = 1, 1.5, 3.5, 4.
# xbar = 1.5, ybar = 2.5, Sxx = 5, Sxy = 5.5 -> b = 1.1, a = 0.85; fitted 0.85, 1.95, 3.05, 4.15;
# residuals 0.15, -0.45, 0.45, -0.15; RSS = 0.45, s^2 = RSS / (n - 2) = 0.225.
# Duan (1983) smearing: mean(exp(e_i)) = (cosh 0.15 + cosh 0.45) / 2 = (1.0112711 + 1.1029702) / 2 = 1.0571206...
# Ferguson (1986): exp(s^2 / 2) = exp(0.1125) = 1.1190722...
LN_Q = [0.0, 1.0, 2.0, 3.0]
LN_L = [1.0, 1.5, 3.5, 4.0]
DUAN = (math.cosh(0.15) + math.cosh(0.45)) / 2
FERGUSON = math.exp(0.1125)


@pytest.fixture
def rating_case() -> tuple[pd.DataFrame, pd.Series]:
    flow = record([math.exp(x) for x in [*LN_Q, 1.5]])  # day 5 (ln Q = 1.5) is predicted only
    return samples_for(flow, [0, 1, 2, 3], [math.exp(y) for y in LN_L]), flow


def test_duan_smearing_hand_worked(rating_case) -> None:
    samples, flow = rating_case
    est = rating_curve_load(samples, flow, correction="duan", min_samples={"rating_curve": 4})
    assert est.details["b"] == pytest.approx(1.1, abs=1e-12)
    assert est.details["a"] == pytest.approx(0.85, abs=1e-12)
    assert est.details["s2"] == pytest.approx(0.225, abs=1e-12)
    assert est.details["factor"] == pytest.approx(DUAN, rel=1e-12)
    assert DUAN == pytest.approx(1.0571206, abs=1e-7)
    # day 5: exp(0.85 + 1.1 x 1.5) x Duan = exp(2.5) x 1.0571205
    assert est.daily["load"].iloc[4] == pytest.approx(math.exp(2.5) * DUAN, rel=1e-12)
    fitted = [0.85, 1.95, 3.05, 4.15, 2.5]
    assert est.total_kg == pytest.approx(sum(math.exp(f) for f in fitted) * DUAN, rel=1e-12)


def test_ferguson_hand_worked(rating_case) -> None:
    samples, flow = rating_case
    est = rating_curve_load(samples, flow, correction="ferguson", min_samples={"rating_curve": 4})
    assert est.details["factor"] == pytest.approx(FERGUSON, rel=1e-12)
    assert FERGUSON == pytest.approx(1.1190722, abs=1e-7)
    assert est.daily["load"].iloc[4] == pytest.approx(math.exp(2.5) * FERGUSON, rel=1e-12)
    plain = rating_curve_load(samples, flow, correction="none", min_samples={"rating_curve": 4})
    assert plain.daily["load"].iloc[4] == pytest.approx(math.exp(2.5), rel=1e-12)  # uncorrected: the median


def test_regression_matches_statsmodels_ols() -> None:
    """The fit itself (coefficients, s^2, coefficient covariance, delta-method SE) against statsmodels OLS."""
    rng = np.random.default_rng(3)
    flow = record(list(np.exp(rng.normal(1.0, 0.8, 730))), start="2022-01-01")
    pos = sorted(rng.choice(730, 60, replace=False).tolist())
    q = flow.to_numpy()[pos]
    t = flow.index[pos]
    doy = 2 * np.pi * (t.dayofyear.to_numpy() - 1) / np.where(t.is_leap_year, 366, 365)
    ln_l = 1.2 + 1.3 * np.log(q) + 0.3 * np.sin(doy) + rng.normal(0, 0.3, len(pos))
    samples = samples_for(flow, pos, list(np.exp(ln_l)))
    est = rating_curve_load(samples, flow, seasonal=True, trend=True)
    years = t.year.to_numpy() + (t.dayofyear.to_numpy() - 1) / np.where(t.is_leap_year, 366, 365)
    x = np.column_stack([np.log(q), np.sin(2 * np.pi * years), np.cos(2 * np.pi * years), years - years.mean()])
    ols = sm.OLS(np.log(samples["concentration"].to_numpy() * q * K), sm.add_constant(x)).fit()
    assert est.details["b"] == pytest.approx(ols.params[1], rel=1e-9)
    assert est.details["s2"] == pytest.approx(ols.scale, rel=1e-9)
    residuals = ols.resid
    assert est.details["duan"] == pytest.approx(np.mean(np.exp(residuals)), rel=1e-9)
    # delta-method SE of the total with statsmodels' covariance (intercept at mean ln Q: reparametrise)
    years_all = flow.index.year.to_numpy() + (flow.index.dayofyear.to_numpy() - 1) / np.where(
        flow.index.is_leap_year, 366, 365
    )
    xd = sm.add_constant(
        np.column_stack(
            [
                np.log(flow.to_numpy()),
                np.sin(2 * np.pi * years_all),
                np.cos(2 * np.pi * years_all),
                years_all - years.mean(),
            ]
        )
    )
    daily = np.exp(xd @ ols.params) * est.details["duan"]
    np.testing.assert_allclose(est.daily["load"], daily, rtol=1e-9)
    g = (daily[:, None] * xd).sum(axis=0)
    assert est.se_kg == pytest.approx(math.sqrt(g @ ols.cov_params() @ g), rel=1e-6)


# ----------------------------------------------------------------------------- Beale
# Hand-worked example: sampled daily loads l = 10, 20, 60 kg d-1 at flows q = 1, 2, 4 m3 s-1; 6 days with
# mean flow 2.5. lbar = 30, qbar = 7/3, S_lq = 40, S_qq = 7/3, S_ll = 700, n = 3 (sample covariances, n - 1).
# Beale (1962): mu = Qbar (lbar/qbar) [1 + S_lq/(n lbar qbar)] / [1 + S_qq/(n qbar^2)]
#   = 5/2 x 90/7 x (25/21) / (8/7) = 5625/168.
# MSE (Tin 1965 second-order form as used for river loads; formula from memory, module docstring):
#   first = S_ll/lbar^2 + S_qq/qbar^2 - 2 S_lq/(lbar qbar) = 7/9 + 3/7 - 8/7 = 4/63
#   second = 2 (3/7)^2 - 4 (3/7)(4/7) + (4/7)^2 + (7/9)(3/7) = 1/21
#   MSE = Qbar^2 (lbar/qbar)^2 [first / n + second / n^2] = 50625/49 x 5/189 = 253125/9261.


def test_beale_hand_worked() -> None:
    l_, q_ = [10.0, 20.0, 60.0], [1.0, 2.0, 4.0]
    n, lbar, qbar, Q = 3, F(30), F(7, 3), F(5, 2)
    s_lq, s_qq, s_ll = F(40), F(7, 3), F(700)
    mu_ref = Q * (lbar / qbar) * (1 + s_lq / (n * lbar * qbar)) / (1 + s_qq / (n * qbar**2))
    assert mu_ref == F(5625, 168)
    first = s_ll / lbar**2 + s_qq / qbar**2 - 2 * s_lq / (lbar * qbar)
    second = (
        2 * s_qq**2 / qbar**4
        - 4 * s_qq * s_lq / (qbar**3 * lbar)
        + s_lq**2 / (lbar**2 * qbar**2)
        + s_ll * s_qq / (lbar**2 * qbar**2)
    )
    assert (first, second) == (F(4, 63), F(1, 21))
    mse_ref = Q**2 * (lbar / qbar) ** 2 * (first / n + second / n**2)
    assert mse_ref == F(253125, 9261)
    mu, mse = beale_mean(np.array(l_), np.array(q_), 2.5)
    assert mu == pytest.approx(float(mu_ref), rel=1e-12)
    assert mse == pytest.approx(float(mse_ref), rel=1e-12)
    # finite-population variant: theta = 1/n - 1/N (N = 6)
    theta = F(1, 3) - F(1, 6)
    mu_f = Q * (lbar / qbar) * (1 + theta * s_lq / (lbar * qbar)) / (1 + theta * s_qq / qbar**2)
    mu2, mse2 = beale_mean(np.array(l_), np.array(q_), 2.5, n_days=6, finite_population=True)
    assert mu2 == pytest.approx(float(mu_f), rel=1e-12)
    assert mse2 == pytest.approx(float(Q**2 * (lbar / qbar) ** 2 * (theta * first + theta**2 * second)), rel=1e-12)


def test_beale_through_the_estimator() -> None:
    flow = record([1.0, 2.0, 4.0, 3.0, 3.0, 2.0])  # mean 2.5
    samples = samples_for(flow, [0, 1, 2], [10.0, 20.0, 60.0])
    est = beale_load(samples, flow, period="record", min_samples={"beale": 3})
    assert est.total_kg == pytest.approx(6 * 5625 / 168, rel=1e-12)
    assert est.se_kg == pytest.approx(6 * math.sqrt(253125 / 9261), rel=1e-12)
    assert est.kind == "period" and len(est.periods) == 1
    assert est.daily["load"].sum() == pytest.approx(est.total_kg, rel=1e-12)  # spread in proportion to flow


# ----------------------------------------------------------------------------- interpolation, fwmc


def test_interpolation_hand_worked() -> None:
    flow = record([2.0, 2.0, 2.0, 2.0, 2.0])
    samples = pd.DataFrame(
        {"date": flow.index[[1, 3]], "concentration": [1.0, 3.0], "censored": [False, False]}
    )  # day 0 held at 1, day 2 interpolated to 2, day 4 held at 3
    est = interpolation_load(samples, flow, min_samples={"interpolation": 2})
    np.testing.assert_allclose(est.daily["load"], np.array([1, 1, 2, 3, 3]) * 2 * K)
    assert est.total_kg == pytest.approx(10 * 2 * K)
    assert (
        "concentration held constant for 1 day(s) before the first sample and 1 day(s) after the last sample"
        in est.warnings
    )
    assert est.lower_kg <= est.total_kg <= est.upper_kg


def test_fwmc_hand_worked() -> None:
    flow = record([1.0, 3.0, 2.0, 2.0])
    samples = pd.DataFrame({"date": flow.index[[0, 1]], "concentration": [4.0, 2.0], "censored": False})
    # FWMC = (4 x 1 + 2 x 3) / (1 + 3) = 2.5 mg L-1; total flow 8 m3 s-1 d -> 2.5 x 8 x 86.4 kg
    est = fwmc_load(samples, flow, period="record", min_samples={"fwmc": 2})
    assert est.total_kg == pytest.approx(2.5 * 8 * K)
    assert est.details["fwmc_mg_l_2023"] == pytest.approx(2.5)


def test_censored_values_use_half_the_detection_limit() -> None:
    flow = record([1.0, 1.0, 1.0])
    samples = pd.DataFrame({"date": flow.index, "concentration": [0.02, 0.02, 0.04], "censored": [True, False, False]})
    est = interpolation_load(samples, flow, min_samples={"interpolation": 1})
    np.testing.assert_allclose(est.daily["load"], np.array([0.01, 0.02, 0.04]) * K)
    assert any("1 censored sample(s) set to 0.5 x detection limit" in w for w in est.warnings)


def test_composite_passes_through_the_samples() -> None:
    """Composite (rating curve + interpolated log residuals; Aulenbach & Hooper 2006; docs/architecture.md): on sample
    days it returns the observed load; with an exact power law (zero residuals) it equals the rating curve."""
    rng = np.random.default_rng(2)
    flow = record(list(np.exp(rng.normal(1, 0.5, 120))))
    pos = list(range(3, 120, 9))
    noisy = list(2.0 * flow.to_numpy()[pos] ** 1.2 * np.exp(rng.normal(0, 0.3, len(pos))))
    est = estimate_load(samples_for(flow, pos, noisy), flow, method="composite")
    np.testing.assert_allclose(est.daily["load"].to_numpy()[pos], noisy, rtol=1e-9)
    exact = samples_for(flow, pos, list(2.0 * flow.to_numpy()[pos] ** 1.2))
    comp = estimate_load(exact, flow, method="composite")
    np.testing.assert_allclose(comp.daily["load"], 2.0 * flow.to_numpy() ** 1.2, rtol=1e-9)
    assert comp.lower_kg <= comp.total_kg <= comp.upper_kg


# ----------------------------------------------------------------------------- warnings and bad input


def test_warnings_for_extrapolation_and_few_samples(rating_case) -> None:
    samples, flow = rating_case
    flow = pd.concat([flow, record([100.0], start="2023-01-06")])
    est = rating_curve_load(samples, flow)
    text = " | ".join(est.warnings)
    assert f"only 4 samples; rating_curve needs at least {DEFAULT_MIN_SAMPLES['rating_curve']}" in text
    assert "1 day(s) with flow above the sampled range" in text
    assert DEFAULT_MIN_SAMPLES == {"interpolation": 12, "rating_curve": 30, "beale": 20, "fwmc": 12}


def test_samples_outside_the_flow_record() -> None:
    flow = record([1.0, 1.0, 1.0])
    bad = pd.DataFrame({"date": [pd.Timestamp("2022-12-31")], "concentration": [1.0]})
    for name in METHODS:
        with pytest.raises(ExtractError, match=r"outside the flow record.*2022-12-31"):
            estimate_load(bad, flow, method=name)


def test_flow_gap_gives_missing_load_and_missing_total(rating_case) -> None:
    samples, flow = rating_case
    flow = pd.concat([flow, record([np.nan, 2.0], start="2023-01-06")])
    for name, est in compare_methods(samples, flow, min_samples=dict.fromkeys(DEFAULT_MIN_SAMPLES, 1)).items():
        if name.startswith("beale_"):
            continue  # strata of 1-2 samples: covered elsewhere
        assert np.isnan(est.daily["load"].iloc[5]), name
        assert est.daily["load"].iloc[6] > 0, name
        assert np.isnan(est.total_kg) and est.mean_kg_d > 0, name
        assert any("without flow" in w for w in est.warnings), name


def test_negative_and_duplicate_samples_rejected() -> None:
    flow = record([1.0, 1.0, 1.0])
    neg = pd.DataFrame({"date": flow.index[:2], "concentration": [1.0, -1.0]})
    with pytest.raises(ExtractError, match="negative"):
        interpolation_load(neg, flow)
    dup = pd.DataFrame({"date": flow.index[[0, 0]], "concentration": [1.0, 2.0]})
    with pytest.raises(ExtractError, match="duplicate sample dates"):
        interpolation_load(dup, flow)
    with pytest.raises(ExtractError, match="unknown load estimation method"):
        estimate_load(neg, flow, method="magic")


def test_stratified_beale_falls_back_with_warning() -> None:
    rng = np.random.default_rng(5)
    flow = record(list(np.exp(rng.normal(1, 0.6, 365))))
    pos = sorted(rng.choice(365, 25, replace=False).tolist())
    samples = samples_for(flow, pos, list(flow.to_numpy()[pos] * 2 * K))  # C = 2 mg L-1 exactly
    for strata in ("season", "flow"):
        est = beale_load(samples, flow, strata=strata, min_cell=3)
        # constant concentration: every ratio estimate is exact, whatever the strata
        assert est.total_kg == pytest.approx(flow.sum() * 2 * K, rel=1e-9)
        assert set(est.periods["stratum"]) <= {"DJF", "MAM", "JJA", "SON", "high", "low"}


def test_bootstrap_standard_error_is_not_blown_up_by_degenerate_resamples() -> None:
    """Regression: with a handful of samples, a composite resample of 2-3 distinct samples extrapolated the fit
    wildly and the bootstrap standard deviation came out several times the interval's width. Resamples with no
    residual degree of freedom are now left out and the SE is the 95 % percentile interval width / 3.92."""
    rng = np.random.default_rng(5)
    flow = record(list(np.exp(rng.normal(1, 0.6, 365))))
    pos = [10, 60, 61, 130, 200, 270, 340]
    loads = list(3.0 * flow.to_numpy()[pos] ** 1.3 * np.exp(rng.normal(0, 0.4, len(pos))))
    for method in ("composite", "interpolation", "fwmc"):
        est = estimate_load(samples_for(flow, pos, loads), flow, method=method, period="record")
        assert est.se_kg == pytest.approx((est.upper_kg - est.lower_kg) / (2 * 1.959963984540054), rel=1e-12)
        assert est.lower_kg <= est.total_kg <= est.upper_kg, method
