"""The forecast stage: steps and units, bad inputs, and end to end on the reduced sample scenario."""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import shapely
from forecast_setup import lake_zone_project, weather_targets_features
from typer.testing import CliRunner

from lakefeed.config.sources import Accumulation, ForecastSource
from lakefeed.exceptions import ExtractError, SourceError
from lakefeed.extract.quantile_mapping import DEFAULT_KINDS
from lakefeed.features import blocked_folds, date_hash_folds
from lakefeed.geometry.weights import zone_weights
from lakefeed.sources.forecasts import open_forecasts
from lakefeed.stages import StageResult
from lakefeed.stages.forecast import adjust_forecasts, build_forecast, forecast_steps
from lakefeed.store import Store

_spec = importlib.util.spec_from_file_location(
    "fc_factory", Path(__file__).parents[1] / "sources" / "test_forecasts.py"
)
_factory = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(_factory)
make_archive = _factory.make_archive


def _weights(archive):
    grid = archive.as_grid()
    return zone_weights({"lake": shapely.box(9.1, 48.3, 9.6, 48.6)}, grid.lat, grid.lon)


def test_forecast_steps_convert_units(tmp_path):
    """Kelvin -> degC, metres of water per step -> mm per step, J m-2 per 6 h -> W m-2 (pint; common practice)."""
    issues = pd.date_range("2021-01-01", periods=3, freq="D")
    path = tmp_path / "fc.nc"
    make_archive(issues, temp_k=283.15, precip_m_per_step=0.002).to_netcdf(path)
    archive = open_forecasts(str(path))
    src = ForecastSource(paths=[str(path)], accumulation={"precip": Accumulation(kind="per_step")})
    cube, warnings = forecast_steps(archive, _weights(archive), source=src)
    assert warnings == []
    assert cube["air_temperature"].isel(forecast_period=0).values == pytest.approx(10.0)
    np.testing.assert_allclose(cube["precipitation"].isel(forecast_period=slice(1, None)), 2.0)
    assert np.isnan(cube["precipitation"].isel(forecast_period=0)).all()
    np.testing.assert_allclose(cube["shortwave_radiation"].isel(forecast_period=slice(1, None)), 200.0)
    np.testing.assert_allclose(cube["wind_speed"], 5.0)


def test_forecast_units_other_than_reanalysis(tmp_path):
    """A forecast in degC (reanalysis in K) is converted; a unit of another dimension is a clear error."""
    issues = pd.date_range("2021-01-01", periods=2, freq="D")
    ds = make_archive(issues)
    ds["air_temp"] = ds["air_temp"] - 273.15
    ds["air_temp"].attrs.update(units="degC", standard_name="air_temperature")
    ds.to_netcdf(tmp_path / "c.nc")
    archive = open_forecasts(str(tmp_path / "c.nc"))
    cube, _ = forecast_steps(archive, _weights(archive))
    assert cube["air_temperature"].isel(forecast_period=0).values == pytest.approx(10.0)
    ds["air_temp"].attrs["units"] = "m s-1"
    ds.to_netcdf(tmp_path / "bad.nc")
    archive = open_forecasts(str(tmp_path / "bad.nc"))
    with pytest.raises(SourceError, match=r"'air_temp' \(air_temperature\) has units 'm s-1'.*forecast\.units"):
        forecast_steps(archive, _weights(archive))


def test_overlap_too_short_is_a_clear_error():
    dates = pd.date_range("2021-01-01", periods=40, freq="D")
    ref = pd.DataFrame({"zone": "lake", "date": dates, "air_temperature_mean": 1.0})
    fc = ref.assign(issue_date=dates - pd.Timedelta(days=1), lead_days=1)
    with pytest.raises(ExtractError, match=r"overlap on 40 day.*min_overlap_days = 365"):
        adjust_forecasts(fc, ref, ForecastSource(paths=[]))


def test_cli_prints_bias_table(tmp_path, monkeypatch):
    """`lakefeed forecast` runs the stage and prints the before/after table (stage faked here)."""
    from lakefeed.cli import app
    from lakefeed.cli import forecast as cli_forecast

    table = pd.DataFrame({"variable": ["air_temperature_mean"], "lead_days": [3], "method": ["expanding"], "n": [30],
                          "mean_bias_raw": [1.2], "mean_bias_adjusted": [0.05], "ks_raw": [0.3], "ks_adjusted": [0.05],
                          "quantile_rmse_raw": [1.3], "quantile_rmse_adjusted": [0.2], "unit": ["degC"]})  # fmt: skip

    def fake(project, st, *, progress=None, allow_shrink=False):
        st.write_table("forecast_evaluation", project.id, table)
        return StageResult("forecast", project.id, tables={"forecast_evaluation": 1}, warnings=["a gap"])

    monkeypatch.setattr("lakefeed.stages.forecast.build_forecast", fake)  # the command imports it when run
    monkeypatch.setattr(cli_forecast.console, "width", 220)
    from lakefeed.sample._config import write_config

    lake_file = write_config(tmp_path / "config", data=str(tmp_path), geo=str(tmp_path), store=None)
    res = CliRunner().invoke(app, ["forecast", str(lake_file), "--store", str(tmp_path / "store")], terminal_width=200)
    assert res.exit_code == 0, res.output
    assert "air_temperature_mean" in res.output and "0.05" in res.output and "a gap" in res.output


# ---------------------------------------------------------------------------------------------- sample scenario


@pytest.fixture(scope="module")
def sample_run(small_sample, tmp_path_factory):
    """Weather, synthetic targets, hindcast features, then the forecast stage, on the lake zone only (speed).

    The reduced sample covers one year, so the minimum overlap is lowered to 30 days (the config's floor).
    """
    project = lake_zone_project(small_sample, min_overlap_days=30)
    store = Store(tmp_path_factory.mktemp("fcstore"))
    weather_targets_features(project, store)
    result = build_forecast(project, store)
    truth = json.loads((small_sample / "truth" / "truth.json").read_text())["forecast_bias"]["variables"]
    return project, store, result, truth


@pytest.mark.slow
def test_archive_length_recorded(sample_run):
    """The longest forecast period of the archive (hours), for the screens' lead notes; recomputed with xarray."""
    import xarray as xr

    project, store, _, _ = sample_run
    longest = 0
    for path in project.sources.forecast.paths:
        for f in sorted(Path(path).parent.glob(Path(path).name)):
            with xr.open_dataset(f) as ds:
                longest = max(longest, int(ds["forecast_period"].values.max() / np.timedelta64(1, "h")))
    meta = store.entry("forecast_drivers_daily", project.id)["metadata"]
    assert longest > 0 and meta["archive_hours"] == str(longest)


@pytest.mark.slow
def test_sample_tables_written(sample_run):
    project, store, result, _ = sample_run
    assert not result.skipped and set(result.tables) == {"forecast_drivers_daily", "bias_adjustment",
                                                         "forecast_evaluation", "features"}  # fmt: skip
    fd = store.read_table("forecast_drivers_daily", project.id)
    assert set(fd["adjustment"]) == {"raw", "quantile_mapping"}
    assert sorted(fd["lead_days"].unique()) == list(range(1, 10))  # 240 h at UTC+1/+2: full local days 1..9
    assert fd.attrs["units"]["air_temperature_mean"] == "degC"
    adj = fd[fd["adjustment"] == "quantile_mapping"].dropna(subset=["air_temperature_mean"])
    # no look-ahead: every adjusted forecast was fitted on reanalysis dated before its issue date
    assert (pd.to_datetime(adj["fitted_through"]) < pd.to_datetime(adj["issue_date"])).all()
    table = store.read_table("bias_adjustment", project.id)
    assert set(table["variable"]) == {v for v in DEFAULT_KINDS if v in fd.columns}


@pytest.mark.slow
def test_sample_planted_biases_removed_and_growth_visible(sample_run):
    """Planted (truth.json): air temperature +0.3 K per lead day, dewpoint +0.2 K per day, precipitation
    x (1.1 + 0.05 per day). Before adjustment the bias grows with lead at about the planted slope; after the
    out-of-sample adjustment the temperature bias is below 0.3 K at every lead (a tenth of the largest planted
    bias, ~2.9 K) and precipitation's mean absolute bias is under half the raw one (tolerances chosen for one
    year of monthly expanding refits)."""
    project, store, _, truth = sample_run
    assert truth["air_temp"]["kind"] == "additive" and truth["precip"]["kind"] == "multiplicative"
    ev = store.read_table("forecast_evaluation", project.id)
    ev = ev[ev["method"] == "expanding"]
    t = ev[ev["variable"] == "air_temperature_mean"].sort_values("lead_days")
    slope = np.polyfit(t["lead_days"], t["mean_bias_raw"], 1)[0]
    assert slope == pytest.approx(truth["air_temp"]["slope_per_day"], abs=0.05)
    assert t["mean_bias_raw"].is_monotonic_increasing
    assert (t["mean_bias_adjusted"].abs() < 0.3).all()
    d = ev[ev["variable"] == "dewpoint_mean"].sort_values("lead_days")
    # dewpoint: planted +0.2 K per day, but the generator caps dewpoint below air temperature, which trims it
    assert 0.1 < np.polyfit(d["lead_days"], d["mean_bias_raw"], 1)[0] <= truth["dewpoint"]["slope_per_day"] + 0.05
    assert (d["mean_bias_adjusted"].abs() < 0.3).all()
    p = ev[ev["variable"] == "precipitation_sum"].sort_values("lead_days")
    assert np.polyfit(p["lead_days"], p["mean_bias_raw"], 1)[0] > 0
    assert p["mean_bias_adjusted"].abs().mean() < 0.5 * p["mean_bias_raw"].abs().mean()
    assert (ev["ks_adjusted"] <= ev["ks_raw"] + 0.02).all()


@pytest.mark.slow
def test_sample_reforecast_rows_appended(sample_run):
    project, store, _, _ = sample_run
    feats = store.read_table("features", project.id)
    assert sorted(feats["lead_days"].unique()) == [0, 1, 3, 5, 10]
    hind = feats[feats["lead_days"] == 0]
    assert hind["forecast_days"].isna().all()
    re = feats[feats["lead_days"] > 0]
    assert set(re.groupby("lead_days")["forecast_days"].first()) == {0, 2, 4, 9}
    assert (re["issue_date"] == re["target_date"] - pd.to_timedelta(re["lead_days"], unit="D")).all()
    assert feats.attrs["units"]["forecast_fraction"] == "1"
    # same columns as the hindcast rows plus the forecast share
    assert re["air_temperature_mean__mean_3d"].notna().mean() > 0.5
    assert (re["fold"] >= -1).all()
    # every re-forecast row carries the calendar fold of its target date (the hindcast rows' rule)
    opts = project.lake.features
    expected = blocked_folds(pd.to_datetime(re["target_date"]), k=opts.folds, embargo_days=opts.effective_embargo_days)
    np.testing.assert_array_equal(re["fold"].to_numpy(), expected)
    hind_fold = hind.set_index("target_date")["fold"]
    same = re[re["target_date"].isin(hind_fold.index)]
    assert len(same) and (same["fold"].to_numpy() == hind_fold.loc[same["target_date"]].to_numpy()).all()


def test_reforecast_folds_are_the_calendar_folds_of_their_target_dates():
    """A re-forecast row's fold is its target date's calendar fold (half-years modulo k; by hand, k=2:
    2024 H1 = block 4048 -> 0, 2024 H2 -> 1; embargo 30 d takes out 2024-07-01..07-30), never one fitted to the
    re-forecast dates; random folds are the date hash of the features stage."""
    from lakefeed.config.lake import FeatureOptions
    from lakefeed.stages.forecast_features import reforecast_folds

    rows = pd.DataFrame({"aoi": "a", "target_date": pd.to_datetime(["2024-07-01", "2024-07-31", "2024-08-03",
                                                                    "2024-01-10", "2024-05-31"])})  # fmt: skip
    assert reforecast_folds(rows, FeatureOptions(folds=2)).tolist() == [-1, 1, 1, -1, 0]
    assert reforecast_folds(rows, FeatureOptions(folds=2, embargo_days=0)).tolist() == [1, 1, 1, 0, 0]
    ropts = FeatureOptions(folds=3, fold_kind="random")
    assert reforecast_folds(rows, ropts).tolist() == date_hash_folds(rows["target_date"], k=3).tolist()


def test_stored_table_is_reused_when_nothing_changed():
    """A second run with the same settings and reanalysis reuses the stored quantile table (no refit)."""
    rng = np.random.default_rng(0)
    dates = pd.date_range("2021-01-01", periods=200, freq="D")
    ref = pd.DataFrame({"zone": "lake", "date": dates, "air_temperature_mean": rng.normal(10, 3, len(dates))})
    fc = pd.concat(
        [ref.assign(issue_date=dates - pd.Timedelta(days=h), lead_days=h,
                    air_temperature_mean=ref["air_temperature_mean"] + 0.5 * h) for h in (1, 2)],
        ignore_index=True,
    )  # fmt: skip
    src = ForecastSource(paths=[], min_overlap_days=30, quantiles=10)
    adj1, table, ev, info1 = adjust_forecasts(fc, ref, src)
    assert not info1["reused"] and set(ev["variable"]) == {"air_temperature_mean"}
    adj2, table2, _, info2 = adjust_forecasts(fc, ref, src, stored=table)
    assert info2["reused"]
    pd.testing.assert_frame_equal(table.reset_index(drop=True), table2.reset_index(drop=True))
    pd.testing.assert_frame_equal(adj1, adj2)
    other = src.model_copy(update={"quantiles": 12})
    assert not adjust_forecasts(fc, ref, other, stored=table)[3]["reused"]
