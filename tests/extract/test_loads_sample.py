"""End to end on the sample scenario: catchment, hydrology_daily and station loads against the planted truth.

The generator (lakefeed.sample) plants the true daily loads in ``truth/loads_truth.csv``: for each direct
inflow and their sum (``subbasin`` = ``LAKE``), Q x C of the model outputs. The samples at SB02 are the true
daily concentrations with 5 % measurement error, about 3-weekly routine dates plus extra high-flow dates,
TP below 0.025 mg L-1 reported censored at that limit.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from lakefeed.config import load_project
from lakefeed.extract.load_estimation import compare_methods
from lakefeed.sources.hydrology import read_hydrology
from lakefeed.sources.samples import read_samples
from lakefeed.stages.hydrology import build_hydrology, catchment_of
from lakefeed.store import Store

# Relative error of the annual load each method can honestly meet on the small sample scenario
# (one year, about 28 samples, a third of them chosen at high flow). Set from the spread over eight
# generator seeds (largest error seen, rounded up), not from this seed alone:
# - rating curves and interpolation are nearly unbiased under flow-biased sampling;
# - the unstratified ratio estimator and the flow-weighted mean are biased high by the extra high-flow
#   samples (strongly for TP, whose concentration rises with flow); stratifying by flow removes most of it.
# largest |error| over seeds 1-8 in brackets (measured with this code, 2026-12)
TOLERANCE = {
    "tn": {
        "interpolation": 0.08,  # [0.055]
        "rating_curve": 0.10,  # [0.079]
        "rating_curve_ferguson": 0.10,  # [0.080]
        "beale": 0.20,  # [0.159] biased low: TN concentration falls with flow
        "beale_season": 0.12,  # [0.089]
        "beale_flow": 0.10,  # [0.077]
        "fwmc": 0.20,  # [0.150]
        "composite": 0.07,  # [0.048] regression + interpolated residuals: the best here (docs/architecture.md)
    },
    "tp": {
        "interpolation": 0.15,  # [0.124]
        "rating_curve": 0.15,  # [0.095]
        "rating_curve_ferguson": 0.15,  # [0.102]
        "beale": 0.45,  # [0.384] biased high: TP concentration rises with flow
        "beale_season": 0.30,  # [0.220]
        "beale_flow": 0.12,  # [0.086]
        "fwmc": 0.45,  # [0.361]
        "composite": 0.10,  # [0.066]
    },
}


@pytest.fixture(scope="module")
def project(small_sample: Path):
    return load_project(next((small_sample / "config").glob("lake-*.yaml")))


@pytest.fixture(scope="module")
def truth(small_sample: Path) -> pd.DataFrame:
    return pd.read_csv(small_sample / "truth" / "loads_truth.csv", parse_dates=["date"])


def test_catchment_of_the_sample(project) -> None:
    c = catchment_of(project)
    assert c.rule == "lake_id" and c.direct_inflows == ("SB01", "SB02", "SB03")
    assert "SB13" not in c.subbasin_ids  # drains OUTSIDE
    assert c.n_subbasins == 12 and c.area_km2 > 0


def test_hydrology_daily_matches_truth(project, truth: pd.DataFrame, tmp_path: Path) -> None:
    store = Store(tmp_path / "store")
    result = build_hydrology(project, store)
    assert result.tables["hydrology_daily"] == 365 and result.tables["load_estimates"] > 0
    table = store.read_table("hydrology_daily", project.id)
    assert list(table.columns[:9]) == [
        "lake",
        "date",
        "inflow_discharge",
        "tn_load",
        "tp_load",
        "tn_fwmc",
        "tp_fwmc",
        "load_method",
        "flags",
    ]
    assert table.attrs["units"]["tn_load"] == "kg d-1" and table.attrs["units"]["inflow_discharge"] == "m3 s-1"
    assert table.attrs["units"]["tp_fwmc"] == "mg L-1"
    lake = truth[truth["subbasin"] == "LAKE"].set_index("date")
    # the NetCDF stores float32: 1e-5 relative
    np.testing.assert_allclose(table["inflow_discharge"], lake["discharge"], rtol=1e-5)
    for n in ("tn", "tp"):
        np.testing.assert_allclose(table[f"{n}_load"], lake[f"{n}_load"], rtol=1e-5)
        parts = table[[f"{n}_load_SB01", f"{n}_load_SB02", f"{n}_load_SB03"]].sum(axis=1)
        np.testing.assert_allclose(table[f"{n}_load"], parts, rtol=1e-12)  # conservation
    assert table["tp_load_station_west_inflow"].notna().all()
    assert (table["flags"] == "").all()


@pytest.mark.parametrize("nutrient", ["tn", "tp"])
def test_station_estimators_against_truth(project, truth: pd.DataFrame, nutrient: str) -> None:
    station = project.sources.samples[0]
    flow = read_hydrology(project.sources.hydrology, subbasin_ids=[station.subbasin])["discharge"][station.subbasin]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        samples = read_samples(station.path)
    true_total = truth.loc[truth["subbasin"] == station.subbasin, f"{nutrient}_load"].sum()
    results = compare_methods(samples[samples["nutrient"] == nutrient], flow)
    for name, est in results.items():
        err = est.total_kg / true_total - 1
        assert abs(err) <= TOLERANCE[nutrient][name], f"{nutrient} {name}: {err:+.1%}"
        assert est.lower_kg < est.total_kg < est.upper_kg


def test_stage_skips_without_hydrology_and_stops_on_bad_samples(project, tmp_path: Path) -> None:
    import dataclasses

    from lakefeed.exceptions import ExtractError

    bare = dataclasses.replace(project, sources=project.sources.model_copy(update={"hydrology": None}))
    result = build_hydrology(bare, Store(tmp_path / "a"))
    assert result.skipped and "hydrology" in result.reason
    late = tmp_path / "late.csv"
    late.write_text("date,nutrient,concentration,censored\n2031-06-01,tp,0.05,false\n")
    station = project.sources.samples[0].model_copy(update={"path": str(late)})
    bad = dataclasses.replace(project, sources=project.sources.model_copy(update={"samples": [station]}))
    with pytest.raises(ExtractError, match=r"outside the flow record.*2031-06-01"):
        build_hydrology(bad, Store(tmp_path / "b"))
