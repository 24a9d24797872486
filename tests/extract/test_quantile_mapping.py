"""Empirical quantile mapping: hand-worked formula, frequency adaptation, reference library, properties."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lakefeed.exceptions import ExtractError
from lakefeed.extract.quantile_mapping import (
    apply_quantile_mapping,
    fit_quantile_mapping,
    lead_group_of,
    quantile_nodes,
)


def _frames(hist: np.ndarray, ref: np.ndarray, var: str, *, lead: int = 1, start: str = "2001-01-01"):
    dates = pd.date_range(start, periods=len(hist), freq="D")
    fc = pd.DataFrame({"zone": "lake", "lead_days": lead, "date": dates, var: hist})
    rf = pd.DataFrame({"zone": "lake", "date": dates, var: ref})
    return fc, rf


def _sim(values: np.ndarray, var: str, *, lead: int = 1, start: str = "2003-01-01") -> pd.DataFrame:
    dates = pd.date_range(start, periods=len(values), freq="D")
    return pd.DataFrame({"zone": "lake", "lead_days": lead, "date": dates, var: values})


def test_nodes_and_lead_groups():
    np.testing.assert_allclose(quantile_nodes(5), [0.1, 0.3, 0.5, 0.7, 0.9])
    groups = lead_group_of([1, 2, 3, 7], [[2, 3], [5, 6, 7]])
    assert groups.tolist() == [[1, 1], [2, 3], [2, 3], [5, 7]]
    with pytest.raises(ExtractError, match="at least 2"):
        quantile_nodes(1)


def test_additive_hand_worked():
    """Deque (2007) additive QM, worked by hand.

    hist 1..5, ref 10..50, nodes 0.1..0.9: type-7 quantiles hist 1.4, 2.2, 3.0, 3.8, 4.6 and
    ref 14, 22, 30, 38, 46; corrections ref - hist = 12.6, 19.8, 27, 34.2, 41.4.
    x = 3 -> 30; x = 2.6 (half-way 2.2..3.0) -> 2.6 + 23.4 = 26.0; beyond the range the outermost
    correction is kept: x = 10 -> 51.4, x = 0 -> 12.6.
    """
    fc, rf = _frames(np.arange(1.0, 6.0), np.arange(10.0, 60.0, 10.0), "air_temperature_mean")
    table = fit_quantile_mapping(fc, rf, season="none", quantiles=5, min_values=5)
    np.testing.assert_allclose(table["hist"], [1.4, 2.2, 3.0, 3.8, 4.6])
    np.testing.assert_allclose(table["factor"], [12.6, 19.8, 27.0, 34.2, 41.4])
    out = apply_quantile_mapping(_sim(np.array([3.0, 2.6, 10.0, 0.0]), "air_temperature_mean"), table)
    np.testing.assert_allclose(out["air_temperature_mean"], [30.0, 26.0, 51.4, 12.6])


def test_multiplicative_hand_worked_and_cap():
    """Deque (2007) multiplicative QM: ref = 10 x hist gives factor 10; the cap max_factor limits it."""
    hist = np.arange(1.0, 6.0)
    fc, rf = _frames(hist, hist * 10, "shortwave_radiation_mean")
    free = fit_quantile_mapping(fc, rf, season="none", quantiles=5, min_values=5, max_factor=100.0)
    np.testing.assert_allclose(free["factor"], 10.0)
    sim = _sim(np.array([2.0, 50.0]), "shortwave_radiation_mean")
    np.testing.assert_allclose(apply_quantile_mapping(sim, free)["shortwave_radiation_mean"], [20.0, 500.0])
    capped = fit_quantile_mapping(fc, rf, season="none", quantiles=5, min_values=5, max_factor=5.0)
    np.testing.assert_allclose(apply_quantile_mapping(sim, capped)["shortwave_radiation_mean"], [10.0, 250.0])


def test_frequency_adaptation_themessl():
    """Themessl et al. (2012) frequency adaptation, worked by hand.

    Forecasts dry on 6 of 10 days (P0_hist = 0.6), reference on 4 of 10 (P0_ref = 0.4): a share
    (0.6 - 0.4) / 0.6 = 1/3 of the dry forecast days must become wet, with values from the reference
    distribution between P0_ref and P0_hist, i.e. between the wet-day threshold and
    Q_ref(0.6) = 2.4 mm (type-7 quantile of 0,0,0,0,1,...,6 at 0.6).
    """
    hist = np.array([0, 0, 0, 0, 0, 0, 1, 2, 3, 4], dtype=float)
    ref = np.array([0, 0, 0, 0, 1, 2, 3, 4, 5, 6], dtype=float)
    fc, rf = _frames(np.tile(hist, 30), np.tile(ref, 30), "precipitation_sum")
    table = fit_quantile_mapping(fc, rf, season="none", quantiles=200, min_values=5, max_factor=10.0)
    assert table["dry_fraction_hist"].iat[0] == pytest.approx(0.6)
    assert table["dry_fraction_ref"].iat[0] == pytest.approx(0.4)
    zeros = _sim(np.zeros(6000), "precipitation_sum")
    out = apply_quantile_mapping(zeros, table)["precipitation_sum"].to_numpy()
    wet = out > 0
    assert wet.mean() == pytest.approx(1 / 3, abs=0.03)
    # Q_ref(0.6) read off the stored nodes (linear between them; the exact type-7 value is 2.4)
    top = np.interp(0.6, table["quantile"], table["ref"])
    assert 2.4 <= top < 2.5
    assert out[wet].min() >= 0.1 and out[wet].max() <= top + 1e-9
    # the dry-day frequency of the adjusted fitting sample matches the reference's (in-sample check)
    adjusted = apply_quantile_mapping(fc, table)["precipitation_sum"].to_numpy()
    assert (adjusted < 0.1).mean() == pytest.approx(0.4, abs=0.05)


def test_frequency_adaptation_ranks_drizzle_deterministically():
    """Sub-threshold forecast values rank the dry days: wetter drizzle becomes wet first (common practice)."""
    hist = np.array([0.01, 0.02, 0.03, 0.04, 0.05, 0.06, 1, 2, 3, 4])
    ref = np.array([0, 0, 0, 0, 1, 2, 3, 4, 5, 6], dtype=float)
    fc, rf = _frames(np.tile(hist, 30), np.tile(ref, 30), "precipitation_sum")
    table = fit_quantile_mapping(fc, rf, season="none", quantiles=100, min_values=5)
    out = apply_quantile_mapping(_sim(np.array([0.01, 0.02, 0.055, 0.06]), "precipitation_sum"), table)
    v = out["precipitation_sum"].to_numpy()
    assert v[0] == 0 and v[1] == 0 and v[2] > 0 and v[3] >= v[2]


def test_drizzle_removed_when_reference_drier():
    """Forecast wet days where the reference is dry at the same probability become 0 (factor 0)."""
    hist = np.array([0.5, 0.6, 0.7, 0.8, 1, 2, 3, 4, 5, 6])
    ref = np.array([0, 0, 0, 0, 0, 2, 3, 4, 5, 6], dtype=float)
    fc, rf = _frames(np.tile(hist, 20), np.tile(ref, 20), "precipitation_sum")
    table = fit_quantile_mapping(fc, rf, season="none", quantiles=20, min_values=5)
    out = apply_quantile_mapping(_sim(np.array([0.5, 0.55, 6.0]), "precipitation_sum"), table)
    v = out["precipitation_sum"].to_numpy()
    assert v[0] == 0 and v[1] == 0 and v[2] == pytest.approx(6.0)


def _xsdba_eqm(ref, hist, sim, kind, nodes, units):
    """xsdba 0.7.0 EmpiricalQuantileMapping (explicit nodes: its integer nquantiles omits the end points)."""
    xsdba = pytest.importorskip("xsdba")
    import xarray as xr

    t = pd.date_range("2001-01-01", periods=len(ref), freq="D")
    ts = pd.date_range("2001-01-01", periods=len(sim), freq="D")
    mk = lambda v, tt: xr.DataArray(v, dims="time", coords={"time": tt}, attrs={"units": units})  # noqa: E731
    eqm = xsdba.EmpiricalQuantileMapping.train(mk(ref, t), mk(hist, t), nquantiles=nodes, kind=kind, group="time")
    return eqm.adjust(mk(sim, ts), interp="linear", extrapolation="constant").to_numpy()


@pytest.mark.parametrize(
    ("kind", "var", "units"), [("+", "air_temperature_mean", "K"), ("*", "shortwave_radiation_mean", "W m-2")]
)
def test_agrees_with_xsdba(kind, var, units):
    """Same data, same explicit nodes, linear interpolation, constant extrapolation: xsdba's
    EmpiricalQuantileMapping (xsdba 0.7.0, reference library). Both compute type-7 quantiles in
    float64 and interpolate linearly, so only rounding differs: tolerance 1e-9 (absolute, values ~1-300).
    """
    rng = np.random.default_rng(1)
    n = 3 * 365
    if kind == "+":
        ref = 280 + 8 * rng.standard_normal(n)
        hist = 282 + 6 * rng.standard_normal(n)
        sim = 283 + 9 * rng.standard_normal(400)
    else:
        ref = rng.gamma(2.0, 60.0, n) + 1
        hist = rng.gamma(2.5, 40.0, n) + 1
        sim = rng.gamma(2.5, 50.0, 400) + 1
    nodes = quantile_nodes(50)
    expected = _xsdba_eqm(ref, hist, sim, kind, nodes, units)
    fc, rf = _frames(hist, ref, var)
    table = fit_quantile_mapping(fc, rf, season="none", quantiles=nodes, max_factor=1e9)
    got = apply_quantile_mapping(_sim(sim, var), table)[var].to_numpy()
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-9)


def test_monthly_groups_with_window_and_pooled_fallback():
    """Month groups use the valid date's month +- month_window; an unfitted month falls back to pooled."""
    dates = pd.date_range("2001-01-01", "2001-03-31", freq="D")
    n = len(dates)
    fc = pd.DataFrame({"zone": "z", "lead_days": 1, "date": dates, "air_temperature_mean": np.zeros(n)})
    ref = pd.DataFrame({"zone": "z", "date": dates, "air_temperature_mean": dates.month.to_numpy(float)})
    table = fit_quantile_mapping(fc, ref, month_window=0, quantiles=5, min_values=10)
    assert sorted(table["season"].unique()) == [0, 1, 2, 3]
    sim = _sim(np.zeros(3), "air_temperature_mean").assign(zone="z")
    sim["date"] = pd.to_datetime(["2005-02-14", "2005-03-01", "2005-07-01"])
    out = apply_quantile_mapping(sim, table)
    assert out["air_temperature_mean"].iloc[:2].tolist() == [2.0, 3.0]
    assert out.attrs["fallback"]["air_temperature_mean"] == 1
    wide = fit_quantile_mapping(fc, ref, month_window=1, quantiles=5, min_values=10)
    feb = wide[(wide["season"] == 2)]
    assert feb["n_values"].iat[0] == n  # January, February and March all feed February


def test_missing_kind_and_columns_are_errors():
    fc, rf = _frames(np.arange(30.0), np.arange(30.0), "air_temperature_mean")
    with pytest.raises(ExtractError, match="no kind"):
        fit_quantile_mapping(fc.assign(foo=1.0), rf.assign(foo=1.0), variables=["foo"])
    with pytest.raises(ExtractError, match="missing"):
        fit_quantile_mapping(fc, rf, variables=["precipitation_sum"])


@settings(max_examples=30, deadline=None)
@given(
    st.lists(st.floats(-30, 40, allow_nan=False), min_size=25, max_size=60),
    st.floats(-5, 5),
)
def test_pure_shift_is_removed(values, shift):
    """Property: when the forecast is the reference plus a constant, additive QM returns the reference."""
    ref = np.asarray(values)
    fc, rf = _frames(ref + shift, ref, "air_temperature_mean")
    table = fit_quantile_mapping(fc, rf, season="none", quantiles=10, min_values=5)
    out = apply_quantile_mapping(fc, table)
    np.testing.assert_allclose(out["air_temperature_mean"], ref, atol=1e-9)


@settings(max_examples=30, deadline=None)
@given(st.lists(st.floats(0, 80, allow_nan=False), min_size=25, max_size=60), st.floats(0.2, 4.0))
def test_adjusted_precipitation_non_negative_and_rows_independent(values, scale):
    """Property: adjusted precipitation is >= 0 and a row's result does not depend on the other rows."""
    ref = np.asarray(values)
    fc, rf = _frames(ref * scale, ref, "precipitation_sum")
    table = fit_quantile_mapping(fc, rf, season="none", quantiles=10, min_values=5)
    full = apply_quantile_mapping(fc, table)["precipitation_sum"].to_numpy()
    assert np.all(full >= 0)
    part = apply_quantile_mapping(fc.iloc[::3], table)["precipitation_sum"].to_numpy()
    np.testing.assert_array_equal(part, full[::3])


def test_doy_window_and_lead_groups():
    """Moving day-of-year windows (+-15 days around anchors every 5 days) and leads fitted together."""
    dates = pd.date_range("2001-01-01", "2002-12-31", freq="D")
    ref_vals = np.sin(2 * np.pi * dates.dayofyear.to_numpy() / 365.0) * 10
    fc = pd.concat(
        [
            pd.DataFrame({"zone": "z", "lead_days": h, "date": dates, "air_temperature_mean": ref_vals + h})
            for h in (1, 2)
        ]
    )
    ref = pd.DataFrame({"zone": "z", "date": dates, "air_temperature_mean": ref_vals})
    table = fit_quantile_mapping(fc, ref, season="doy", doy_window=15, doy_step=5, lead_groups=[[1, 2]], quantiles=9)
    assert set(map(tuple, table[["lead_min", "lead_max"]].drop_duplicates().to_numpy())) == {(1, 2)}
    assert set(table["season"]) == {0, *range(1, 367, 5)}
    # one window holds 31 days x 2 years x 2 leads
    assert table.loc[table["season"] == 181, "n_values"].iat[0] == 31 * 2 * 2
    out = apply_quantile_mapping(fc, table)
    # pooled leads 1 and 2: the mapping removes their common mean offset (1.5) to within the spread
    assert abs((out["air_temperature_mean"] - np.tile(ref_vals, 2)).mean()) < 0.05


def test_month_group_agrees_with_xsdba_on_that_month():
    """Calendar-month groups (month_window 0): the July table equals xsdba's EmpiricalQuantileMapping trained on
    July alone (xsdba 0.7.0, explicit nodes, linear interpolation, constant extrapolation); tolerance 1e-9."""
    rng = np.random.default_rng(5)
    dates = pd.date_range("2001-01-01", "2004-12-31", freq="D")
    ref = 10 + 8 * np.sin(2 * np.pi * dates.dayofyear.to_numpy() / 365) + rng.normal(0, 2, len(dates))
    hist = ref + 1.5 + rng.normal(0, 1.5, len(dates))
    fc = pd.DataFrame({"zone": "lake", "lead_days": 1, "date": dates, "air_temperature_mean": hist})
    rf = pd.DataFrame({"zone": "lake", "date": dates, "air_temperature_mean": ref})
    nodes = quantile_nodes(20)
    table = fit_quantile_mapping(fc, rf, month_window=0, quantiles=nodes)
    july = np.asarray(dates.month == 7)
    sim = 18 + 3 * rng.standard_normal(62)
    sim_frame = pd.DataFrame(
        {"zone": "lake", "lead_days": 1, "date": pd.date_range("2006-07-01", periods=31).append(
            pd.date_range("2007-07-01", periods=31)), "air_temperature_mean": sim}
    )  # fmt: skip
    got = apply_quantile_mapping(sim_frame, table)["air_temperature_mean"].to_numpy()
    expected = _xsdba_eqm(ref[july], hist[july], sim, "+", nodes, "degC")
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-9)
