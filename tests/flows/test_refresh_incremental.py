"""A monthly refresh processes only the new weather month and leaves the table a full rebuild would write.

On the reduced sample scenario, against the session's Prefect server on loopback: a lake variant whose
weather folder holds links to the first eleven monthly files; the twelfth "arrives" before the refresh.
The reference is a full build of the weather stage from all twelve files into another store.
"""

from __future__ import annotations

import pandas as pd
import pytest
import yaml
from _variants import write_variants

from lakefeed.config import load_project
from lakefeed.stages.weather import build_weather
from lakefeed.store import Store

pytestmark = pytest.mark.slow


def test_refresh_recomputes_only_the_new_month(small_sample, prefect_server, tmp_path) -> None:
    from lakefeed.flows.refresh import refresh

    folder = tmp_path / "weather"
    folder.mkdir()
    files = sorted((small_sample / "weather").glob("reanalysis_*.nc"))
    for f in files[:-1]:
        (folder / f.name).symlink_to(f)
    cfg = write_variants(small_sample, tmp_path / "config", ["alder"])
    sources = yaml.safe_load((cfg / "sources.yaml").read_text())
    sources["weather"]["paths"] = [str(folder / "reanalysis_*.nc")]
    (cfg / "sources.yaml").write_text(yaml.safe_dump(sources))
    (first,) = refresh([str(cfg)], sequential=True, stages=["weather"])
    assert first["status"] == "ok" and first["mode"] == "weather: full build"
    store = Store(str(tmp_path / "store"))
    before = store.num_rows("drivers_daily", "alder")

    (folder / files[-1].name).symlink_to(files[-1])  # the new month arrives
    (again,) = refresh([str(cfg)], sequential=True, stages=["weather"])
    assert again["status"] == "ok" and again["changed"] == "weather: 2022-12"
    assert again["mode"] == "weather: incremental from 2022-12-01"
    zones = store.read_table("drivers_daily", "alder")["zone"].nunique()
    assert again["rows_written"] == 32 * zones  # December and the first of January (local days), recomputed
    assert again["new_rows"] == store.num_rows("drivers_daily", "alder") - before == 31 * zones
    runs = store.read_table("run_summary", "alder")
    assert list(runs["mode"]) == ["weather: full build", "weather: incremental from 2022-12-01"]

    reference = Store(str(tmp_path / "reference"))
    build_weather(load_project(cfg / "lake-alder.yaml"), reference)
    pd.testing.assert_frame_equal(
        store.read_table("drivers_daily", "alder"), reference.read_table("drivers_daily", "alder"), check_exact=True
    )
