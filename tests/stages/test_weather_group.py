"""The weather stage for many lakes at once: each lake's table equals its one-lake table, the grid is read once.

Lakes of the reduced sample scenario moved over its grid (layers translated in their projected CRS), in two
time zones, and one lake moved off the grid (its zones fail): the grouped run must give every other lake
exactly (``pandas.testing.assert_frame_equal``, no tolerance) the table of a one-lake run into another store,
fail the bad lake alone, and read each time block of each grid file once (a spy on the HDF5 reader).
"""

from __future__ import annotations

from collections import Counter

import pandas as pd
import pytest
from many_lakes_setup import lake_configs

from lakefeed.config import load_project
from lakefeed.exceptions import GeometryError
from lakefeed.sources._h5read import H5Variable
from lakefeed.stages.weather import build_weather
from lakefeed.stages.weather_group import build_weather_many
from lakefeed.store import Store

pytestmark = pytest.mark.slow

#: lake id -> (shift east m, shift north m, time zone); "offgrid" lies 600 km east of the grid.
LAKES = {
    "tallow": (0.0, 0.0, "Europe/Berlin"),
    "east": (14_000.0, -7_000.0, "UTC"),
    "north": (-9_000.0, 6_000.0, "Europe/Berlin"),
    "offgrid": (600_000.0, 0.0, "UTC"),
}


def _reads(monkeypatch: pytest.MonkeyPatch) -> Counter:
    seen: Counter = Counter()
    real = H5Variable.__getitem__

    def spy(self, key):
        seen[(self.path, self.name, str(key))] += 1
        return real(self, key)

    monkeypatch.setattr(H5Variable, "__getitem__", spy)
    return seen


def test_grouped_weather_equals_one_lake_runs_and_reads_once(small_sample, tmp_path, monkeypatch) -> None:
    files = lake_configs(small_sample, tmp_path, LAKES)
    projects = [load_project(f) for f in files.values()]
    reads = _reads(monkeypatch)
    store = Store(tmp_path / "group")
    got = build_weather_many(projects, store)
    assert isinstance(got["offgrid"], GeometryError)  # the lake off the grid fails alone
    assert "outside the grid" in str(got["offgrid"])
    assert [k for k, v in got.items() if not isinstance(v, Exception)] == ["tallow", "east", "north"]
    assert max(reads.values()) == 1, "a block of a grid file was read twice"
    group_reads = sum(reads.values())
    for lake in ("tallow", "east", "north"):
        reads.clear()
        alone = Store(tmp_path / f"alone-{lake}")
        one = build_weather(load_project(files[lake]), alone)
        assert sum(reads.values()) == group_reads  # one lake reads as many blocks as the group
        assert got[lake] == one  # same rows written, reason and warnings
        pd.testing.assert_frame_equal(
            store.read_table("drivers_daily", lake), alone.read_table("drivers_daily", lake), check_exact=True
        )
        assert store.entry("drivers_daily", lake)["inputs"] == alone.entry("drivers_daily", lake)["inputs"]
    east = store.read_table("drivers_daily", "east")
    tallow = store.read_table("drivers_daily", "tallow")
    assert not east["air_temperature_mean"].equals(tallow["air_temperature_mean"])  # lakes of their own


def test_grouped_refresh_from_a_month_equals_one_lake_refresh(small_sample, tmp_path) -> None:
    files = lake_configs(small_sample, tmp_path, {k: v for k, v in LAKES.items() if k != "offgrid"})
    projects = [load_project(f) for f in files.values()]
    store = Store(tmp_path / "group")
    assert all(
        isinstance(r, object) and not isinstance(r, Exception) for r in build_weather_many(projects, store).values()
    )
    got = build_weather_many(projects, store, since="2022-12-01")
    for lake, f in files.items():
        assert got[lake].reason.startswith("incremental from"), got[lake].reason
        alone = Store(tmp_path / f"alone-{lake}")
        build_weather(load_project(f), alone)
        one = build_weather(load_project(f), alone, since="2022-12-01")
        assert got[lake] == one
        pd.testing.assert_frame_equal(
            store.read_table("drivers_daily", lake), alone.read_table("drivers_daily", lake), check_exact=True
        )


def test_grouped_weather_on_a_local_dask_cluster_equals_sequential(small_sample, tmp_path) -> None:
    """On a real ``distributed.LocalCluster`` over loopback (two worker processes) the time chunks of the group
    are computed by the workers: the tables equal the sequential ones exactly."""
    from distributed import Client, LocalCluster, get_task_stream

    files = lake_configs(small_sample, tmp_path, {k: v for k, v in LAKES.items() if k in ("tallow", "east")})
    projects = [load_project(f) for f in files.values()]
    sequential = Store(tmp_path / "sequential")
    build_weather_many(projects, sequential)
    cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None)
    try:
        with Client(cluster) as client:
            store = Store(tmp_path / "cluster")
            with get_task_stream(client) as stream:
                got = build_weather_many(projects, store)
            keys = [str(t["key"]) for t in stream.data]
            workers = {t["worker"] for t in stream.data if "apply_weights_many" in str(t["key"])}
            assert any("apply_weights_many" in k for k in keys) and workers  # time chunks ran on the workers
    finally:
        cluster.close()
    for lake in files:
        assert not isinstance(got[lake], Exception)
        pd.testing.assert_frame_equal(
            store.read_table("drivers_daily", lake), sequential.read_table("drivers_daily", lake), check_exact=True
        )
