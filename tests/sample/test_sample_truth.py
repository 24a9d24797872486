"""The planted truth of the sample scenario is measurable from its files (reduced scenario, seed 7).

Each test reads the generated files the way a user would and recovers a planted quantity from
``truth/truth.json`` or the truth CSVs: cloud fraction, the dune/kite ratio, the daily reset of the
accumulated fields, the growth of the forecast bias with lead, the sampling design and the loads.
"""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
import xarray as xr
from rasterio.features import geometry_mask


@pytest.fixture(scope="module")
def truth(small_sample: Path) -> dict:
    return json.loads((small_sample / "truth" / "truth.json").read_text())


@pytest.fixture(scope="module")
def lake(small_sample: Path):
    return gpd.read_file(small_sample / "geometry" / "lake.gpkg").geometry.iloc[0]


@pytest.fixture(scope="module")
def aois(small_sample: Path) -> dict:
    gdf = gpd.read_file(small_sample / "geometry" / "aois.gpkg")
    return dict(zip(gdf["aoi_id"], gdf.geometry, strict=True))


def _read(small_sample: Path, scene_id: str) -> dict:
    sensor = scene_id.split("_")[0]
    out = {}
    for key in ("chla", "quality", "uncertainty"):
        with rasterio.open(small_sample / "scenes" / "data" / sensor / f"{scene_id}_{key}.tif") as src:
            out[key] = src.read(1)
            out["transform"] = src.transform
    return out


def _inside(geom, scene: dict) -> np.ndarray:
    return geometry_mask([geom], out_shape=scene["chla"].shape, transform=scene["transform"], invert=True)


def test_cloud_fraction_matches_the_plan(small_sample: Path, lake) -> None:
    scenes = pd.read_csv(small_sample / "truth" / "scenes_truth.csv")
    kite = scenes[scenes["sensor"] == "kite"]
    measured, lake_measured, reported = [], [], []
    for sid in kite["scene_id"]:
        s = _read(small_sample, sid)
        valid = s["chla"] != -9999
        in_lake = valid & _inside(lake, s)
        measured.append(((s["quality"] & 1) > 0)[valid].mean())
        lake_measured.append(((s["quality"] & 1) > 0)[in_lake].mean() if in_lake.any() else 0.0)
        item = json.loads((small_sample / "scenes" / "items" / f"{sid}.json").read_text())
        reported.append(item["properties"]["eo:cloud_cover"] / 100.0)
    measured = np.array(measured)
    # planted: a cloud fraction per scene over the whole grid; the water pixels see about the same
    assert abs(measured.mean() - kite["cloud_fraction"].mean()) < 0.08
    assert 0.3 < measured.mean() < 0.8  # a cloudy climate, but many usable scenes
    assert (np.array(lake_measured) < 0.05).sum() >= 8  # some nearly clear scenes
    np.testing.assert_allclose(reported, lake_measured, atol=0.011)


def test_dune_over_kite_ratio_on_same_day_clear_pixels(small_sample: Path, truth: dict, lake) -> None:
    scenes = pd.read_csv(small_sample / "truth" / "scenes_truth.csv")
    scenes["day"] = scenes["datetime"].str[:10]
    outliers = set(truth["outlier_scenes"])
    interior = lake.buffer(-600.0)  # two dune pixels away from the shore
    ratios = []
    for _, pair in scenes[~scenes["scene_id"].isin(outliers)].groupby("day"):
        if set(pair["sensor"]) != {"kite", "dune"}:
            continue
        medians = {}
        for sid, sensor in zip(pair["scene_id"], pair["sensor"], strict=True):
            s = _read(small_sample, sid)
            good = (s["quality"] == 0) & (s["chla"] != -9999) & _inside(interior, s)
            medians[sensor] = np.median(s["chla"][good]) if good.sum() >= (5 if sensor == "dune" else 200) else np.nan
        ratios.append(medians["dune"] / medians["kite"])
    ratios = np.array(ratios)
    ratios = ratios[np.isfinite(ratios)]
    assert len(ratios) >= 5
    assert truth["sensor_bias"]["dune"]["factor"] == 1.25 and truth["sensor_bias"]["kite"]["factor"] == 1.0
    assert np.median(ratios) == pytest.approx(truth["dune_over_kite_ratio"], rel=0.08)


def test_kite_recovers_aoi_truth_and_outliers_stand_out(small_sample: Path, truth: dict, aois: dict) -> None:
    chla = pd.read_csv(small_sample / "truth" / "chla_truth.csv", parse_dates=["date"])
    open_water = chla[chla["aoi"] == "open_water"].set_index("date")["chla"]
    scenes = pd.read_csv(small_sample / "truth" / "scenes_truth.csv")
    ratios, outlier_ratios = [], []
    for sid, when in zip(scenes["scene_id"], scenes["datetime"], strict=True):
        if not sid.startswith("kite"):
            continue
        s = _read(small_sample, sid)
        good = (s["quality"] == 0) & (s["chla"] != -9999) & _inside(aois["open_water"], s)
        if good.sum() < 200:
            continue
        r = np.median(s["chla"][good]) / open_water[pd.Timestamp(when[:10])]
        (outlier_ratios if sid in truth["outlier_scenes"] else ratios).append(r)
    assert len(ratios) >= 10
    assert np.median(ratios) == pytest.approx(1.0, abs=0.05)
    assert all(r == pytest.approx(truth["outlier_factor"], rel=0.15) for r in outlier_ratios)


def test_shore_pixels_are_contaminated_and_only_sometimes_flagged(small_sample: Path, lake) -> None:
    scenes = pd.read_csv(small_sample / "truth" / "scenes_truth.csv")
    clear = scenes[(scenes["sensor"] == "kite") & (scenes["cloud_fraction"] == 0) & (scenes["outlier_factor"] == 1)]
    assert len(clear) >= 3
    ratio, flagged = [], []
    for sid in clear["scene_id"]:
        s = _read(small_sample, sid)
        valid = s["chla"] != -9999
        shore = valid & _inside(lake, s) & ~_inside(lake.buffer(-20.0), s)  # within one kite pixel of the shore
        interior = valid & _inside(lake.buffer(-200.0), s) & (s["quality"] == 0)
        unflagged_shore = shore & ((s["quality"] & 0b0111) == 0)
        ratio.append(np.median(s["chla"][unflagged_shore & (s["quality"] == 0)]) / np.median(s["chla"][interior]))
        flagged.append(((s["quality"][unflagged_shore] & 8) > 0).mean())
    assert np.median(ratio) > 1.3  # a shore buffer is needed: quality 0 alone does not remove them
    assert 0.3 < np.mean(flagged) < 0.7  # the adjacency bit is set only for some of them


def test_uncertainty_band_is_relative_and_positive(small_sample: Path) -> None:
    s = _read(small_sample, "kite_20220101")
    valid = s["chla"] != -9999
    assert np.all((s["uncertainty"][valid] > 0.05) & (s["uncertainty"][valid] < 1.0))
    assert np.all(s["uncertainty"][~valid] == -9999) and np.all(s["quality"][~valid] == 255)


def test_accumulated_fields_reset_at_midnight(small_sample: Path) -> None:
    with xr.open_dataset(small_sample / "weather" / "reanalysis_2022-07.nc") as ds:
        cell = ds.sel(latitude=48.15, longitude=9.7, method="nearest")
        hours = pd.DatetimeIndex(ds["time"].values).hour[1:]
        for name, resets in (("precip", 5), ("sw_down", 30)):  # precipitation: only wet days show a reset
            step = np.diff(cell[name].values.astype(float))
            assert np.all(step[hours != 1] >= -1e-6 * np.abs(cell[name].values).max()), name  # running totals
            assert (step[hours == 1] < 0).sum() >= resets, name  # ... that restart after 00 UTC
        sw = cell["sw_down"].values.astype(float)
        at_midnight = sw[pd.DatetimeIndex(ds["time"].values).hour == 0][1:] / 86400.0  # J m-2 per day -> W m-2
        assert np.all((at_midnight > 20.0) & (at_midnight < 400.0))
        assert np.allclose(np.diff(sw)[hours >= 21], 0.0)  # no sun at night: the total stays put
        air, dew = ds["air_temp"].values, ds["dewpoint"].values
        ok = np.isfinite(air)
        assert np.all(dew[ok] < air[ok])
        assert 280.0 < np.nanmean(air) < 300.0  # July, K


def test_forecast_temperature_bias_grows_with_lead(small_sample: Path, truth: dict) -> None:
    def area_mean(folder: str, dim: str) -> pd.Series:
        parts = []
        for path in sorted((small_sample / folder).glob("*.nc")):
            with xr.open_dataset(path) as ds:
                parts.append(ds["air_temp"].mean(["latitude", "longitude"]).load())
        return xr.concat(parts, dim).to_series()

    area = area_mean("weather", "time")
    f = area_mean("forecast", "forecast_reference_time").reset_index()
    f["valid"] = f["forecast_reference_time"] + f["forecast_period"]
    f["lead_days"] = f["forecast_period"] / pd.Timedelta(days=1)
    f = f[f["lead_days"] == f["lead_days"].round()]  # same hour of day: the grid offsets cancel
    f["error"] = f["air_temp"] - area.reindex(f["valid"]).to_numpy()
    per_lead = f.dropna().groupby("lead_days")["error"].mean()
    slope = np.polyfit(per_lead.index, per_lead.to_numpy(), 1)[0]
    planted = truth["forecast_bias"]["variables"]["air_temp"]["slope_per_day"]
    assert planted == 0.3
    assert slope == pytest.approx(planted, abs=0.05)
    spread = f.dropna().groupby("lead_days")["error"].std()
    assert spread.iloc[-1] > spread.iloc[0]  # the noise grows with lead as well


def test_samples_follow_the_design(small_sample: Path, truth: dict) -> None:
    samples = pd.read_csv(small_sample / "samples" / "tributary_samples.csv", parse_dates=["date"])
    assert list(samples.columns) == ["date", "nutrient", "concentration", "censored"]
    per_year = samples[samples["nutrient"] == "tp"].groupby(samples["date"].dt.year).size()
    assert per_year.between(20, 40).all()
    limit = truth["loads"]["tp_detection_limit_mg_per_l"]
    cens = samples[samples["censored"]]
    assert len(cens) >= 1 and set(cens["nutrient"]) == {"tp"}
    assert np.allclose(cens["concentration"], limit)
    assert (samples.loc[~samples["censored"] & (samples["nutrient"] == "tp"), "concentration"] >= limit).all()
    q = pd.read_csv(small_sample / "hydrology" / "discharge.csv", parse_dates=["date"]).set_index("date")
    station = q[truth["loads"]["sampled_subbasin"]]
    sampled = station.loc[samples["date"].unique()]
    high = station > station.quantile(0.85)  # 15 % of the days ...
    assert (sampled > station.quantile(0.85)).mean() > 2 * high.mean()  # ... hold far more of the samples


def test_loads_truth_is_flow_times_concentration(small_sample: Path, truth: dict) -> None:
    loads = pd.read_csv(small_sample / "truth" / "loads_truth.csv", parse_dates=["date"])
    direct = truth["loads"]["direct_inflows"]
    assert sorted(set(loads["subbasin"]) - {"LAKE"}) == direct
    hyd = {
        n: pd.read_csv(small_sample / "hydrology" / f"{n}.csv", parse_dates=["date"]).set_index("date")
        for n in ("discharge", "tp")
    }
    one = loads[loads["subbasin"] == direct[0]].set_index("date")
    expected = hyd["discharge"][direct[0]] * hyd["tp"][direct[0]] * 86.4  # m3 s-1 * mg L-1 = g s-1 = 86.4 kg d-1
    np.testing.assert_allclose(one["tp_load"], expected.loc[one.index], rtol=2e-4)
    total = loads[loads["subbasin"] == "LAKE"].set_index("date")["tn_load"]
    parts = loads[loads["subbasin"] != "LAKE"].groupby("date")["tn_load"].sum()
    np.testing.assert_allclose(total, parts.loc[total.index], rtol=1e-5)
    # concentration-discharge: TP rises with flow (planted b > 0), TN falls slightly (b < 0)
    q = hyd["discharge"]["SB02"]
    slope = np.polyfit(np.log(q), np.log(hyd["tp"]["SB02"]), 1)[0]
    assert slope == pytest.approx(truth["loads"]["rating"]["tp"]["b"], abs=0.15)


def test_chlorophyll_truth_follows_its_drivers(small_sample: Path, truth: dict) -> None:
    chla = pd.read_csv(small_sample / "truth" / "chla_truth.csv", parse_dates=["date"])
    assert sorted(chla["aoi"].unique()) == ["bathing_bay", "intake", "open_water"]
    assert len(chla) == 3 * 365
    p = truth["chla_model"]["parameters"]
    one = chla[chla["aoi"] == "open_water"].set_index("date")
    np.testing.assert_allclose(one["f_t"], p["THETA"] ** (one["water_temperature_proxy"] - 20.0), rtol=1e-4)
    np.testing.assert_allclose(one["f_i"], one["shortwave"] / (one["shortwave"] + p["I_K"]), rtol=1e-4)
    model = p["C_MAX"] * one["f_t"] * one["f_i"] * one["f_p"] + p["BACKGROUND"] + one["bloom"]
    noise = np.log(one["lake_chla"] / model)
    assert noise.std() < 2.5 * p["NOISE_SD"] and abs(noise.mean()) < 0.1
    peak = one["bloom"].idxmax()
    assert p["BLOOM_DOY_MIN"] - 1 <= peak.dayofyear <= p["BLOOM_DOY_MAX"] + 1  # late winter
    assert one.loc[peak, "lake_chla"] > 2 * one.loc["2022-01", "lake_chla"].mean()
    bay = chla[chla["aoi"] == "bathing_bay"]["chla"].to_numpy()
    assert np.all(bay > one["chla"].to_numpy())  # the shallow arm is greener (planted pattern)
