"""`lakefeed check` predicts the weather build: a corpus of broken copies of the mini scenario.

Each variant breaks (or legitimately varies) the weather inputs or the weather config of the mini
scenario (``_mini.py``: two back-to-back files of 48 hourly steps on an 11 x 11 grid). On each, the
check runs (:func:`lakefeed.checks.check_paths`) and so does the build (``load_project`` and
:func:`lakefeed.stages.weather.build_weather`). They must agree: both accept, or the build refuses
and the check reports a problem whose words (message and fix) are in the build's error. Each variant
also states what is expected (accept, or a phrase of the refusal), so agreement on the wrong answer fails.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
import yaml

from lakefeed.checks import check_paths
from lakefeed.exceptions import LakefeedError

F1, F2 = "reanalysis_2024-01-01.nc", "reanalysis_2024-01-03.nc"
ACCEPT = ""


def _write(ds: xr.Dataset, path: Path, encoding: dict | None = None) -> None:
    tmp = path.with_suffix(".tmp")
    ds.to_netcdf(tmp, encoding=encoding)
    os.replace(tmp, path)


def edit(name: str, change: Callable[[xr.Dataset], xr.Dataset | None], encoding: dict | None = None) -> Callable:
    """A variant changing one weather file (``change`` edits the decoded Dataset in place or returns a new one)."""

    def apply(root: Path) -> None:
        path = root / "weather" / name
        ds = xr.load_dataset(path)
        out = change(ds)
        _write(ds if out is None else out, path, encoding)

    return apply


def both(change: Callable[[xr.Dataset], xr.Dataset | None]) -> Callable:
    def apply(root: Path) -> None:
        edit(F1, change)(root)
        edit(F2, change)(root)

    return apply


def sources(change: Callable[[dict], None]) -> Callable:
    """A variant changing the weather section of sources.yaml."""

    def apply(root: Path) -> None:
        path = root / "config" / "sources.yaml"
        cfg = yaml.safe_load(path.read_text())
        change(cfg["weather"])
        path.write_text(yaml.safe_dump(cfg, sort_keys=False))

    return apply


def raw(name: str, data: Callable[[bytes], bytes]) -> Callable:
    def apply(root: Path) -> None:
        path = root / "weather" / name
        path.write_bytes(data(path.read_bytes()))

    return apply


def seq(*steps: Callable) -> Callable:
    def apply(root: Path) -> None:
        for s in steps:
            s(root)

    return apply


def attr(var: str, **attrs: object) -> Callable[[xr.Dataset], None]:
    def change(ds: xr.Dataset) -> None:
        for k, v in attrs.items():
            if v is None:
                ds[var].attrs.pop(k, None)
            else:
                ds[var].attrs[k] = v

    return change


def values(var: str, fn: Callable[[np.ndarray], np.ndarray], **attrs: object) -> Callable[[xr.Dataset], None]:
    def change(ds: xr.Dataset) -> None:
        ds[var].values = fn(ds[var].values.astype("float64")).astype(ds[var].dtype)
        attr(var, **attrs)(ds)

    return change


def times(index: Callable[[int], list[int]] | None = None, shift: pd.Timedelta | None = None) -> Callable:
    def change(ds: xr.Dataset) -> xr.Dataset:
        out = ds.isel(time=index(ds.sizes["time"])) if index else ds
        if shift is not None:
            out = out.assign_coords(time=out["time"].values + shift.to_timedelta64())
        return out

    return change


def nan_at(var: str, where: tuple) -> Callable[[xr.Dataset], None]:
    def change(ds: xr.Dataset) -> None:
        ds[var][where] = np.nan

    return change


def packed(var: str, scale: float, offset: float) -> dict:
    return {var: {"dtype": "int16", "scale_factor": scale, "add_offset": offset, "_FillValue": -32767}}


def _drop(ds: xr.Dataset, var: str) -> xr.Dataset:
    return ds.drop_vars(var)


K = 273.15
ALL = (slice(None), slice(None), slice(None))
LAKE_CELLS = (slice(None), slice(3, 6), slice(4, 7))  # 8.9..9.1 E, 47.8..48.0 N: the lake and its AOIs
LAKE_EARLY = (slice(0, 30), slice(3, 6), slice(4, 7))

# name -> (variant, "" to be accepted or a phrase of the expected refusal)
CORPUS: dict[str, tuple[Callable[[Path], None], str]] = {
    # units: per file, by the file's variable name, dimension, missing, not understood
    "metres, second file": (edit(F2, attr("air_temp", units="m")), "has units 'm'"),
    "metres, first file": (edit(F1, attr("air_temp", units="m")), "which is not a temperature unit"),
    "units not understood": (edit(F2, attr("air_temp", units="kelvinish")), "not understood as a unit"),
    "no units, second file": (edit(F2, attr("air_temp", units=None)), "has no units"),
    "no units, both files": (both(attr("air_temp", units=None)), "(and 1 other file(s) of 2)"),
    "no units, declared by variable name": (
        seq(both(attr("air_temp", units=None)), sources(lambda w: w.setdefault("units", {}).update(air_temp="K"))),
        ACCEPT,
    ),
    "units keyed by variable name": (sources(lambda w: w.setdefault("units", {}).update(air_temp="K")), ACCEPT),
    "variable-name key, wrong dimension": (
        sources(lambda w: w.setdefault("units", {}).update(air_temp="m")),
        "(weather.units.air_temp)",
    ),
    "unknown units key": (sources(lambda w: w.setdefault("units", {}).update(t2m="K")), "weather.units.t2m"),
    "dewpoint in m s-1": (edit(F2, attr("dewpoint", units="m s-1")), "'dewpoint' (dewpoint_temperature)"),
    "wind in K": (edit(F2, attr("wind_u", units="K")), "which is not a speed unit"),
    "precipitation in K": (edit(F2, attr("precip", units="K")), "which is not a precipitation"),
    "shortwave in m": (edit(F1, attr("sw_down", units="m")), "which is not a radiation"),
    # each file decoded with its own units (a month in other units, correctly labelled)
    "second file in degC": (edit(F2, values("air_temp", lambda v: v - K, units="degC")), ACCEPT),
    "second file in degF": (edit(F2, values("air_temp", lambda v: (v - K) * 9 / 5 + 32, units="degF")), ACCEPT),
    "second file wind in km/h": (edit(F2, values("wind_u", lambda v: v * 3.6, units="km h-1")), ACCEPT),
    "second file precipitation in mm": (edit(F2, values("precip", lambda v: v * 1000, units="mm")), ACCEPT),
    "second file packed with its own scale": (
        edit(F2, lambda ds: None, encoding=packed("air_temp", 0.01, 270.0)),
        ACCEPT,
    ),
    "second file packed in degC": (
        edit(F2, values("air_temp", lambda v: v - K, units="degC"), encoding=packed("air_temp", 0.002, 0.0)),
        ACCEPT,
    ),
    # plausibility after conversion
    "Kelvin values labelled degC, second file": (edit(F2, attr("air_temp", units="degC")), "outside the physical"),
    "Kelvin values labelled degC, first file": (edit(F1, attr("air_temp", units="degC")), "-90..60 degC"),
    "Kelvin declared degC in the config": (
        sources(lambda w: w.setdefault("units", {}).update(air_temperature="degC")),
        "is 280 degC",
    ),
    "dewpoint Kelvin labelled degC": (edit(F2, attr("dewpoint", units="degC")), "dewpoint is 275 degC"),
    "air temperature 150 K": (edit(F2, values("air_temp", lambda v: v * 0 + 150.0)), "is -123.15 degC"),
    "wind in mm s-1 labelled m s-1": (edit(F2, values("wind_u", lambda v: v * 1000)), "wind_speed is"),
    "shortwave 100 times too large": (edit(F2, values("sw_down", lambda v: v * 100)), "shortwave_radiation is"),
    "precipitation 10000 times too large": (edit(F2, values("precip", lambda v: v * 1e4)), "precipitation is"),
    "running total decreasing": (edit(F2, values("precip", lambda v: v * 0 - 1e-3)), "negative beyond packing"),
    # amounts need an accumulation kind
    "no precipitation accumulation": (sources(lambda w: w["accumulation"].pop("precipitation")), "is an amount"),
    "shortwave accumulation none": (
        sources(lambda w: w["accumulation"].update(shortwave_radiation={"kind": "none"})),
        "kind is none",
    ),
    "accumulation keyed by variable name": (
        sources(lambda w: w["accumulation"].update(precip=w["accumulation"].pop("precipitation"))),
        ACCEPT,
    ),
    # variables found by standard_name, else by the mapping
    "no standard_name, no mapping": (both(attr("air_temp", standard_name=None)), "no variable with standard_name"),
    "no standard_name, mapped": (
        seq(
            both(attr("air_temp", standard_name=None)),
            sources(lambda w: w.setdefault("variables", {}).update(air_temperature="air_temp")),
        ),
        ACCEPT,
    ),
    "mapped to an absent variable": (
        seq(
            both(attr("air_temp", standard_name=None)),
            sources(lambda w: w.setdefault("variables", {}).update(air_temperature="t2m")),
        ),
        "variable 't2m'",
    ),
    "unknown variables key": (
        sources(lambda w: w.setdefault("variables", {}).update(air_temperatur="air_temp")),
        "did you mean 'air_temperature'?",
    ),
    "variable missing from the second file": (edit(F2, lambda ds: _drop(ds, "wind_v")), "is missing from the file"),
    # time axes
    "gap inside the second file": (edit(F2, times(lambda n: [i for i in range(n) if i != 10])), ACCEPT),
    "gap between the files": (edit(F2, times(shift=pd.Timedelta(days=1))), ACCEPT),
    "duplicated hour": (edit(F2, times(lambda n: [0, 1, 2, 2, *range(3, n)])), "duplicate step"),
    "shuffled hours": (edit(F2, times(lambda n: [1, 0, *range(2, n)])), "out of order step"),
    "overlapping files": (edit(F2, times(shift=-pd.Timedelta(hours=12))), "out of order step"),
    "source time zone": (sources(lambda w: w.update(time_zone="Europe/Berlin")), ACCEPT),
    "other time units and calendar": (
        edit(F2, lambda ds: ds["time"].encoding.update(units="minutes since 2000-01-01", calendar="standard")),
        ACCEPT,
    ),
    # missing values
    "all-NaN air temperature in the second file": (edit(F2, nan_at("air_temp", ALL)), "has no value"),
    "all-NaN precipitation in the first file": (edit(F1, nan_at("precip", ALL)), "precipitation (variable 'precip')"),
    "no value over the lake in the second file": (edit(F2, nan_at("air_temp", LAKE_CELLS)), "zone 'lake'"),
    "first hours missing over the lake": (edit(F2, nan_at("air_temp", LAKE_EARLY)), ACCEPT),
    "no value far from the lake": (edit(F2, nan_at("air_temp", (slice(None), 0, 0))), ACCEPT),
    # unreadable or odd files
    "random bytes": (raw(F2, lambda b: os.urandom(len(b))), "not a NetCDF"),
    "truncated file": (raw(F2, lambda b: b[: len(b) // 3]), F2),
    "empty file": (raw(F2, lambda b: b""), F2),
    "other grid in the second file": (
        edit(F2, lambda ds: ds.assign_coords(longitude=ds["longitude"] + 0.05)),
        "differs from",
    ),
    # weather config values
    "reset hour 25": (
        sources(lambda w: w["accumulation"].update(precipitation={"kind": "since_reset", "reset_hour": 25})),
        "reset_hour",
    ),
    "unknown source time zone": (sources(lambda w: w.update(time_zone="Mars/Olympus")), "Mars/Olympus"),
    "paths match nothing": (sources(lambda w: w.update(paths=["../weather/nothing_*.nc"])), "nothing_*.nc"),
}


def _build(lake: Path) -> str:
    """The weather build's outcome: "" when it succeeds, else its error's text."""
    from lakefeed.config import load_project
    from lakefeed.stages.weather import build_weather
    from lakefeed.store import Store

    try:
        build_weather(load_project(lake), Store(lake.parent.parent / "store"))
    except LakefeedError as err:
        return str(err)
    return ""


def test_corpus_is_large_enough() -> None:
    assert len(CORPUS) >= 40
    assert sum(e == ACCEPT for _, e in CORPUS.values()) >= 10


@pytest.mark.parametrize("case", list(CORPUS))
def test_check_predicts_build(case: str, mini_template: Path, tmp_path: Path) -> None:
    root = tmp_path / "mini"
    shutil.copytree(mini_template, root)
    lake = root / "config" / "lake-mini.yaml"
    variant, expected = CORPUS[case]
    variant(root)
    (report,) = check_paths([lake])
    problems = [r for r in report.results if not r.ok]
    refused = _build(lake)
    if not refused:
        assert not problems, f"check refused what build accepts: {[r.message for r in problems]}"
        assert expected == ACCEPT, f"build accepted {case!r}"
        return
    assert expected in refused, refused
    # a config problem's fix is the check's general advice ("fix that key ... then run check again")
    same = [r for r in problems if r.message.split("\n")[0] in refused and (r.hint in refused or r.name == "config")]
    assert same, f"build refused with:\n{refused}\ncheck said: {[(r.message, r.hint) for r in problems]}"


def test_each_file_decoded_with_its_own_units(mini_template: Path, tmp_path: Path) -> None:
    """A month in degC (labelled so) among months in K gives the drivers of an all-K record.

    K -> degC is an offset of 273.15 (SI Brochure, 9th edition, section 2.3.1); the packed copy in degC is
    stored with its own scale_factor, decoded with it.
    """
    from lakefeed.store import Store

    tables = {}
    for case, variant in (
        ("kelvin", lambda root: None),
        ("celsius", CORPUS["second file in degC"][0]),
        ("packed celsius", CORPUS["second file packed in degC"][0]),
    ):
        root = tmp_path / case
        shutil.copytree(mini_template, root)
        variant(root)
        assert _build(root / "config" / "lake-mini.yaml") == ""
        tables[case] = Store(root / "store").read_table("drivers_daily", "mini")
    base = tables["kelvin"]
    assert base["air_temperature_mean"].dropna().round(4).eq(round(280.0 - 273.15, 4)).all()
    for case in ("celsius", "packed celsius"):
        pd.testing.assert_frame_equal(tables[case], base, atol=0.002)  # 0.002 degC: the packing step


def test_zarr_store_with_a_missing_chunk(mini_template: Path, tmp_path: Path) -> None:
    """An absent Zarr chunk is refused by the build and by the check, counted, in the same words."""
    import _mini

    root = tmp_path / "mini"
    shutil.copytree(mini_template, root)
    store = root / "weather" / "grid.zarr"
    ds = _mini.weather_dataset(pd.date_range("2024-01-01", periods=96, freq="h")).chunk({"time": 24})
    ds.to_zarr(store, consolidated=False)
    sources(lambda w: w.update(paths=["../weather/grid.zarr"]))(root)
    lake = root / "config" / "lake-mini.yaml"
    assert _build(lake) == ""
    chunk = sorted(p for p in (store / "air_temp").rglob("*") if p.is_file() and p.name != "zarr.json")[1]
    chunk.unlink()
    refused = _build(lake)
    assert "Zarr chunks missing ('air_temp' 1 of 4)" in refused
    (report,) = check_paths([lake])
    assert [r.message for r in report.results if not r.ok] == [refused]
