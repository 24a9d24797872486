"""Inflow and loads from model outputs: conversion factor, conservation, gaps (lakefeed.extract.loads)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pint
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from lakefeed.exceptions import ExtractError
from lakefeed.extract.loads import inflow_loads, inflow_members, load_factor, station_members, summed_flow

DAYS = pd.date_range("2024-03-01", periods=3, freq="D", name="date")


def wide(values: dict[str, list[float]]) -> pd.DataFrame:
    return pd.DataFrame(values, index=DAYS[: len(next(iter(values.values())))])


def test_load_factor_against_pint() -> None:
    # Unit arithmetic: 1 m3 s-1 x 1 mg L-1 = 1 g s-1 = 86.4 kg d-1, derived with a fresh pint registry.
    ureg = pint.UnitRegistry()
    expected = (ureg.Quantity(1.0, "m**3/s") * ureg.Quantity(1.0, "mg/L")).to("kg/day").magnitude
    assert load_factor() == pytest.approx(expected, rel=1e-12)
    assert expected == pytest.approx(86.4, rel=1e-12)
    assert load_factor("m3 s-1", "ug L-1", "kg d-1") == pytest.approx(0.0864, rel=1e-12)


def test_hand_worked_loads_and_fwmc() -> None:
    q = wide({"A": [1.0, 2.0, 0.0], "B": [3.0, 2.0, 0.0], "C": [9.0, 9.0, 9.0]})
    tn = wide({"A": [2.0, 1.0, 5.0], "B": [1.0, 1.0, 5.0], "C": [7.0, 7.0, 7.0]})
    out = inflow_loads(q, {"tn": tn}, members=["A", "B"])
    # day 1: Q = 4, load = (1 x 2 + 3 x 1) x 86.4 = 432 kg d-1, fwmc = 5 / 4 = 1.25 mg L-1
    assert out["inflow_discharge"].tolist() == [4.0, 4.0, 0.0]
    np.testing.assert_allclose(out["tn_load"], [432.0, 345.6, 0.0])
    np.testing.assert_allclose(out["tn_fwmc"].iloc[:2], [1.25, 1.0])
    assert np.isnan(out["tn_fwmc"].iloc[2])  # no flow: no concentration, but the load is a true zero
    np.testing.assert_allclose(out["tn_load_A"], [172.8, 172.8, 0.0])
    assert out["flags"].tolist() == ["", "", ""]
    assert "C" not in "".join(out.columns.str.replace("_load_", ""))


def test_gap_is_missing_and_flagged_never_zero() -> None:
    q = wide({"A": [1.0, np.nan, 1.0], "B": [1.0, 1.0, 1.0]})
    tp = wide({"A": [0.1, 0.1, 0.1], "B": [0.2, 0.2, np.nan]})
    out = inflow_loads(q, {"tp": tp}, members=["A", "B"])
    assert np.isnan(out["inflow_discharge"].iloc[1]) and np.isnan(out["tp_load"].iloc[1])
    assert np.isnan(out["tp_load"].iloc[2]) and out["inflow_discharge"].iloc[2] == 2.0
    assert out["flags"].tolist() == ["", "gap_discharge(A)", "gap_tp(B)"]
    assert not (out["tp_load"] == 0).any()


def test_members_routed_and_local() -> None:
    assert inflow_members(["A", "B"], ["A", "B", "C"], discharge_kind="routed") == ["A", "B"]
    assert inflow_members(["A", "B"], ["A", "B", "C"], discharge_kind="local") == ["A", "B", "C"]
    with pytest.raises(ExtractError, match="routed"):
        inflow_members(["A"], ["A"], discharge_kind="sideways")  # type: ignore[arg-type]


def test_station_flow_hand_worked_nested_chain() -> None:
    """Hand-worked: D -> C -> B -> A (nested chain) and E -> A; a station on B takes B + C + D."""
    q = wide({"A": [1.0, 1.0, 1.0], "B": [2.0, 2.0, 2.0], "C": [4.0, np.nan, 4.0], "D": [8.0, 8.0, 8.0]})
    members = station_members("B", ["D", "C"], discharge_kind="local")
    assert members == ["B", "C", "D"]
    flow = summed_flow(q, members)
    assert flow.iloc[0] == 14.0 and flow.iloc[2] == 14.0
    assert np.isnan(flow.iloc[1])  # a member's gap is a missing day, never a smaller flow
    assert station_members("B", ["D", "C"], discharge_kind="routed") == ["B"]
    assert summed_flow(q, ["B"]).tolist() == [2.0, 2.0, 2.0]
    with pytest.raises(ExtractError, match=r"\['X'\] of station s have no series"):
        summed_flow(q, ["B", "X"], name="station s")
    with pytest.raises(ExtractError, match="routed"):
        station_members("B", [], discharge_kind="sideways")  # type: ignore[arg-type]


def test_missing_member_is_an_error() -> None:
    q = wide({"A": [1.0, 1.0, 1.0]})
    with pytest.raises(ExtractError, match=r"\['B'\]"):
        inflow_loads(q, {"tn": q}, members=["A", "B"])


# Discharges are either exactly zero or at least 1 mL s-1: smaller (subnormal) floats lose all
# precision when scaled, which is floating-point underflow, not a property of the loads.
positive = st.one_of(st.just(0.0), st.floats(min_value=1e-6, max_value=1e4, allow_nan=False))


@settings(max_examples=60, deadline=None)
@given(
    arrays(np.float64, (5, 3), elements=positive),
    arrays(np.float64, (5, 3), elements=st.floats(min_value=0.0, max_value=50.0)),
    st.floats(min_value=0.01, max_value=100.0),
)
def test_conservation_and_scaling(q: np.ndarray, c: np.ndarray, scale: float) -> None:
    """Lake total = sum over inflows; scaling every discharge by s scales every load by s (mass conservation)."""
    days = pd.date_range("2024-01-01", periods=5, freq="D")
    ids = ["A", "B", "C"]
    qf, cf = pd.DataFrame(q, index=days, columns=ids), pd.DataFrame(c, index=days, columns=ids)
    out = inflow_loads(qf, {"tn": cf}, members=ids)
    np.testing.assert_allclose(out["tn_load"], out[[f"tn_load_{i}" for i in ids]].sum(axis=1), rtol=1e-12)
    np.testing.assert_allclose(out["inflow_discharge"], qf.sum(axis=1), rtol=1e-12)
    scaled = inflow_loads(qf * scale, {"tn": cf}, members=ids)
    np.testing.assert_allclose(scaled["tn_load"], out["tn_load"] * scale, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(scaled["tn_fwmc"], out["tn_fwmc"], rtol=1e-9)
