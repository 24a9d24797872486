"""`lakefeed refresh` with bad input: the lake fails (exit code 1, status failed, the file or the lost dates
named) and its stored tables stay as they were; a deliberate removal goes through with --allow-shrink.

On the reduced sample scenario against the session's Prefect server on loopback: a lake variant reading a
private copy of the weather files, built by a first refresh of the weather stage.
"""

from __future__ import annotations

import os
import shutil

import pandas as pd
import pytest
import yaml
from _variants import write_variants
from typer.testing import CliRunner

from lakefeed.cli import app
from lakefeed.store import Store

pytestmark = pytest.mark.slow


def test_refresh_with_a_broken_or_removed_weather_month(small_sample, prefect_server, tmp_path) -> None:
    from lakefeed.flows.refresh import refresh

    folder = tmp_path / "weather"
    shutil.copytree(small_sample / "weather", folder)
    cfg = write_variants(small_sample, tmp_path / "config", ["alder"])
    sources = yaml.safe_load((cfg / "sources.yaml").read_text())
    sources["weather"]["paths"] = [str(folder / "reanalysis_*.nc")]
    (cfg / "sources.yaml").write_text(yaml.safe_dump(sources))
    lake_file = str(cfg / "lake-alder.yaml")
    (first,) = refresh([lake_file], sequential=True, stages=["weather"])
    assert first["status"] == "ok"
    store = Store(str(tmp_path / "store"))
    before = store.read_table("drivers_daily", "alder")

    december = folder / "reanalysis_2022-12.nc"
    good = december.read_bytes()
    december.write_bytes(os.urandom(len(good)))  # the month replaced with random bytes
    result = CliRunner().invoke(app, ["refresh", lake_file, "--sequential"])
    assert result.exit_code == 1, result.output
    runs = store.read_table("run_summary", "alder")
    assert runs["status"].iloc[-1] == "failed"
    assert "weather: SourceError" in runs["error"].iloc[-1] and str(december) in runs["error"].iloc[-1]
    pd.testing.assert_frame_equal(store.read_table("drivers_daily", "alder"), before, check_exact=True)

    december.write_bytes(good)
    december.unlink()  # now the month is removed: the record would end a month earlier
    result = CliRunner().invoke(app, ["refresh", lake_file, "--sequential"])
    assert result.exit_code == 1, result.output
    error = store.read_table("run_summary", "alder")["error"].iloc[-1]
    assert "weather: ShrinkError: refusing to write drivers_daily/lake=alder" in error
    assert "the record would end on 2022-12-01 instead of 2023-01-01 (lost: 2022-12-02..2023-01-01)" in error
    pd.testing.assert_frame_equal(store.read_table("drivers_daily", "alder"), before, check_exact=True)

    result = CliRunner().invoke(app, ["refresh", lake_file, "--sequential", "--allow-shrink"])
    assert result.exit_code == 0, result.output
    runs = store.read_table("run_summary", "alder")
    assert runs["status"].iloc[-1] == "ok" and "--allow-shrink" in runs["warnings"].iloc[-1]
    assert store.read_table("drivers_daily", "alder")["date"].max() == pd.Timestamp("2022-12-01").date()
