"""Incremental forecast stage: only new (or changed) issues are read, the tables equal a full build's.

On the reduced sample scenario (lake zone only, as tests/stages/test_forecast_stage.py): a forecast folder
of links to the first eleven monthly files; the twelfth arrives before the second build. The reference is
a full build over all twelve files into a copy of the store as it was before the forecast stage ran.
The fallbacks of :func:`lakefeed.stages._forecast_refresh.refresh_plan` are checked on small frames.
"""

from __future__ import annotations

import dataclasses
import shutil

import numpy as np
import pandas as pd
import pytest
from forecast_setup import lake_zone_project, weather_targets_features

import lakefeed.stages._forecast_refresh as fr
import lakefeed.stages.forecast as fc
from lakefeed.flows._state import stage_since
from lakefeed.store import Store

TABLES = ("forecast_drivers_daily", "bias_adjustment", "forecast_evaluation", "features")


@pytest.fixture(scope="module")
def prepared(small_sample, tmp_path_factory):
    """A store with weather, synthetic targets and hindcast features; a project reading a forecast folder."""
    base = tmp_path_factory.mktemp("fcrefresh")
    folder = base / "forecast"
    folder.mkdir()
    project = lake_zone_project(small_sample, min_overlap_days=30, paths=[str(folder / "forecast_*.nc")])
    store = Store(base / "store")
    weather_targets_features(project, store)
    files = sorted((small_sample / "forecast").glob("forecast_*.nc"))
    return project, base, folder, files


def _spy(monkeypatch) -> list[pd.DatetimeIndex]:
    seen: list[pd.DatetimeIndex] = []
    real = fc.daily_forecasts

    def spy(archive, project, **kw):
        seen.append(archive.issue_times)
        return real(archive, project, **kw)

    monkeypatch.setattr(fc, "daily_forecasts", spy)
    return seen


@pytest.mark.slow
def test_new_month_is_read_alone_and_tables_equal_a_full_build(prepared, monkeypatch):
    project, base, folder, files = prepared
    work = base / "work"
    shutil.copytree(base / "store", work)
    shutil.copytree(base / "store", base / "reference")
    for f in files[:-1]:
        (folder / f.name).symlink_to(f)
    seen = _spy(monkeypatch)
    store = Store(work)
    first = fc.build_forecast(project, store)
    assert first.reason == "full build (no stored table)"
    assert len(seen) == 1 and seen[0].max() < pd.Timestamp("2022-12-01")

    (folder / files[-1].name).symlink_to(files[-1])  # the new month arrives
    again = fc.build_forecast(project, store, since="2022-12-01")
    assert again.reason == "incremental from 2022-12-01"
    new = seen[1]
    assert len(new) == 31 and new.min() == pd.Timestamp("2022-12-01") and (new.month == 12).all()

    # only the reanalysis changed (the flow gives no since): the archive is not read at all
    third = fc.build_forecast(project, store)
    assert third.reason.startswith("incremental (forecast archive unchanged") and len(seen) == 2

    reference = Store(base / "reference")
    assert fc.build_forecast(project, reference, full=True).reason == "full build (requested)"
    for table in TABLES:
        pd.testing.assert_frame_equal(
            store.read_table(table, project.id), reference.read_table(table, project.id), check_exact=True
        )

    # settings the raw rows depend on changed (in memory, not in the YAML): full build
    src = project.sources.forecast.model_copy(update={"wet_day_threshold_mm": 0.2})
    other = dataclasses.replace(project, sources=project.sources.model_copy(update={"forecast": src}))
    assert fc.build_forecast(other, store).reason == "full build (configuration changed)"


# ---------------------------------------------------------------------------------------------- refresh_plan


def _stored(issues: pd.DatetimeIndex) -> pd.DataFrame:
    rows = []
    for t in issues:
        for lead in (1, 2):
            for adj in ("raw", "quantile_mapping"):
                rows.append({"zone": "lake", "issue_date": t.date(), "lead_days": lead, "adjustment": adj,
                             "issue_time": t, "date": (t + pd.Timedelta(days=lead)).date(), "flags": ""})  # fmt: skip
    frame = pd.DataFrame(rows)
    for c in fr.table_columns():
        if c not in frame:
            frame[c] = 1.0
    return frame[fr.table_columns()]


def _plan(monkeypatch, *, stored=None, since="2022-02-01", inputs=None, entry=None):
    issues = pd.date_range("2022-01-30", "2022-02-02", freq="D")
    monkeypatch.setattr(fr, "_file_issues", lambda path: issues[issues.month == (1 if "01" in path else 2)])
    files = ["/a/forecast_2022-01.nc", "/a/forecast_2022-02.nc"]
    old = {files[0]: "h1", files[1]: "h2", "/a/lake.gpkg": "g", "drivers_daily/lake=x": "d"}
    base = {"parts": [1], "config_hash": "c", "metadata": {fr.SIGNATURE: "s"}, "columns": fr.table_columns(),
            "inputs": old}  # fmt: skip
    stored = _stored(issues[:3]) if stored is None else stored
    inputs = inputs or {files[0]: "h1", files[1]: "h2new", "/a/lake.gpkg": "g"}
    return fr.refresh_plan(base | (entry or {}), stored, issues, files=files, since=since, inputs=inputs,
                           config_hash="c", signature="s")  # fmt: skip


def test_plan_reads_since_and_changed_files(monkeypatch):
    plan = _plan(monkeypatch)
    assert list(plan.read) == list(pd.date_range("2022-02-01", "2022-02-02", freq="D"))
    assert sorted(plan.reuse["issue_time"].unique()) == list(pd.date_range("2022-01-30", "2022-01-31", freq="D"))
    assert (plan.reuse["lead_days"].dtype, plan.reuse["issue_date"].dtype) == (np.int16, "datetime64[ns]")
    # no since, the January file changed: its issues are read too (the hashes decide, not the caller)
    every = _stored(pd.date_range("2022-01-30", "2022-02-02", freq="D"))
    changed = {"/a/forecast_2022-01.nc": "x", "/a/forecast_2022-02.nc": "h2", "/a/lake.gpkg": "g"}
    plan = _plan(monkeypatch, since=None, stored=every, inputs=changed)
    assert list(plan.read) == list(pd.date_range("2022-01-30", "2022-01-31", freq="D"))
    assert sorted(plan.reuse["issue_time"].unique()) == list(pd.date_range("2022-02-01", "2022-02-02", freq="D"))


@pytest.mark.parametrize(
    ("kw", "reason"),
    [
        ({"entry": {"parts": []}}, "no stored table"),
        ({"entry": {"config_hash": "other"}}, "configuration changed"),
        ({"entry": {"metadata": {}}}, "configuration changed"),
        ({"entry": {"columns": ["zone"]}}, "stored columns differ"),
        (
            {"inputs": {"/a/forecast_2022-01.nc": "h1", "/a/forecast_2022-02.nc": "h2", "/a/lake.gpkg": "new"}},
            "a geometry layer changed",
        ),
        ({"inputs": {"/a/forecast_2022-02.nc": "h2", "/a/lake.gpkg": "g"}}, "a forecast file recorded"),
        ({"since": "2022-01-01"}, "every forecast issue is new or changed"),
        ({"stored": _stored(pd.DatetimeIndex(["2022-01-30"]))}, "the stored raw issues differ"),
    ],
)
def test_plan_full_build_fallbacks(monkeypatch, kw, reason):
    plan = _plan(monkeypatch, **kw)
    assert plan.reuse is None and plan.reason.startswith(reason)


def test_forecast_since_follows_forecast_months():
    recorded = {"forecast": ["forecast_drivers_daily"]}
    assert stage_since("forecast", {"forecast": ["2022-12"]}, recorded=recorded) == "2022-12-01"
    # only the reanalysis changed: no since, the stage finds the archive unchanged by its hashes
    assert stage_since("forecast", {"weather": ["2022-12"]}, recorded=recorded) is None
