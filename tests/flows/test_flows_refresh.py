"""The refresh flow on several variants of the sample lake: Dask vs sequential, isolation, locking, deployment.

End-to-end on the reduced sample scenario against a Prefect server the session starts on loopback. Stages
are limited to weather and hydrology to keep the run short; the other stages go through the same tasks.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest
from _variants import write_variants

from lakefeed.exceptions import StoreError
from lakefeed.flows._state import state_path
from lakefeed.store import Store, run_lock

pytestmark = pytest.mark.slow
STAGES = ["weather", "hydrology"]
LAKES = ["alder", "birch"]


def _content(root: str, lakes: list[str]) -> dict[tuple[str, str], pd.DataFrame]:
    store = Store(root)
    return {(t, lk): store.read_table(t, lk) for t in ("drivers_daily", "hydrology_daily") for lk in lakes}


@pytest.fixture(scope="module")
def sequential_run(small_sample, prefect_server, tmp_path_factory):
    from lakefeed.flows.refresh import refresh

    cfg = write_variants(small_sample, tmp_path_factory.mktemp("seq") / "config", LAKES)
    summary = refresh([str(cfg)], sequential=True, stages=STAGES)
    return cfg, summary


def test_sequential_refresh_builds_every_lake(sequential_run) -> None:
    cfg, summary = sequential_run
    assert [s["status"] for s in summary] == ["ok"] * len(LAKES), summary
    root = str(cfg.parent / "store")
    store = Store(root)
    runs = store.read_table("run_summary")
    assert sorted(runs["lake"]) == LAKES and (runs["new_rows"] > 0).all()
    assert runs.attrs["units"]["new_rows"] == "1"
    state = json.loads(state_path(root, "alder").read_text())
    assert set(state["stages"]) == set(STAGES) and "2022-06" in state["sources"]["weather"]


def test_second_refresh_finds_nothing_new(sequential_run) -> None:
    from lakefeed.flows.refresh import refresh

    cfg, _ = sequential_run
    again = refresh([str(cfg)], sequential=True, stages=STAGES)
    assert [s["status"] for s in again] == ["unchanged"] * len(LAKES)
    assert all(s["new_rows"] == 0 and s["stages_run"] == "" for s in again)
    runs = Store(str(cfg.parent / "store")).read_table("run_summary", "birch")
    assert list(runs["status"]) == ["ok", "unchanged"]  # the summary table keeps the history


def test_dask_local_cluster_matches_sequential(sequential_run, small_sample, tmp_path_factory) -> None:
    from distributed import LocalCluster

    from lakefeed.flows.refresh import refresh

    cfg_seq, _ = sequential_run
    cfg = write_variants(small_sample, tmp_path_factory.mktemp("dask") / "config", LAKES)
    with LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
    ) as cluster:
        assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
        summary = refresh([str(cfg)], dask_address=cluster.scheduler_address, stages=STAGES)
    assert [s["status"] for s in summary] == ["ok"] * len(LAKES), summary
    seq = _content(str(cfg_seq.parent / "store"), LAKES)
    par = _content(str(cfg.parent / "store"), LAKES)
    for key, frame in seq.items():
        pd.testing.assert_frame_equal(frame, par[key], check_exact=True)


def test_lake_with_missing_files_fails_alone(small_sample, prefect_server, tmp_path) -> None:
    import shutil

    from lakefeed.flows.refresh import refresh

    missing = str(tmp_path / "nowhere" / "reanalysis_*.nc")
    corrupt = tmp_path / "weather"
    shutil.copytree(small_sample / "weather", corrupt)
    victim = corrupt / "reanalysis_2022-06.nc"
    victim.write_bytes(victim.read_bytes()[:5000])  # a file cut short in the middle of the record
    broken = {"lost": missing, "torn": str(corrupt / "reanalysis_*.nc")}
    cfg = write_variants(small_sample, tmp_path / "config", ["good", "lost", "torn"], broken=broken)
    summary = {s["lake"]: s for s in refresh([str(cfg)], sequential=True, stages=["weather"])}
    assert summary["good"]["status"] == "ok" and summary["good"]["new_rows"] > 0
    assert summary["lost"]["status"] == "failed"
    assert "no file matches" in summary["lost"]["error"] and "nowhere" in summary["lost"]["error"]
    # the torn file fails its lake, naming it (leaving it out would shorten the record); never a crash
    torn = summary["torn"]
    assert torn["status"] == "failed" and "reanalysis_2022-06.nc" in torn["error"], torn
    store = Store(str(tmp_path / "store"))
    assert store.has_table("drivers_daily", "good") and not store.has_table("drivers_daily", "lost")
    assert not store.has_table("drivers_daily", "torn")
    assert not state_path(tmp_path / "store", "lost").exists()  # nothing recorded: the next run retries it
    failed = store.read_table("run_summary", "lost")
    assert "no file matches" in failed["error"].iloc[-1]


def test_second_refresh_on_one_store_refuses(sequential_run) -> None:
    from lakefeed.flows.refresh import refresh

    cfg, _ = sequential_run
    with run_lock(cfg.parent / "store", what="refresh"):
        with pytest.raises(StoreError, match="in use by another run"):
            refresh([str(cfg)], sequential=True, stages=STAGES, wait=0.5)


def test_deployment_registered_with_monthly_cron(sequential_run, prefect_server) -> None:
    from prefect.client.orchestration import get_client

    from lakefeed.flows.deployments import register

    cfg, _ = sequential_run
    register(cfg, store=str(cfg.parent / "store"))
    with get_client(sync_client=True) as client:
        dep = client.read_deployment_by_name("refresh/monthly-refresh")
    assert len(dep.schedules) == 1
    schedule = dep.schedules[0].schedule
    assert schedule.cron == "0 3 5 * *"  # 03:00 on the 5th of each month
    assert schedule.timezone == "Europe/Berlin"  # the lakes' own time zone
    assert dep.parameters["configs"] == [str(cfg.resolve())]


def test_refresh_command_refuses_a_busy_store(sequential_run) -> None:
    from typer.testing import CliRunner

    from lakefeed.cli import app

    cfg, _ = sequential_run
    with run_lock(cfg.parent / "store", what="refresh"):
        result = CliRunner().invoke(app, ["refresh", str(cfg), "--sequential"])
    assert result.exit_code != 0
    assert isinstance(result.exception, StoreError) and "in use by another run" in str(result.exception)


def test_refresh_completes_after_an_interrupted_write(sequential_run) -> None:
    """A run killed mid-write leaves a stray temporary file and the previous tables; the next run completes."""
    from lakefeed.flows.refresh import refresh

    cfg, _ = sequential_run
    root = cfg.parent / "store"
    (root / "drivers_daily" / ".tmp-alder-killed.parquet").write_bytes(b"PAR1 half written")
    (root / "drivers_daily" / "lake=alder" / "part-0.parquet").unlink()  # this lake's table never landed
    summary = {s["lake"]: s for s in refresh([str(cfg)], sequential=True, stages=STAGES)}
    assert summary["alder"]["status"] == "ok" and summary["alder"]["stages_run"] == "weather"
    assert summary["birch"]["status"] == "unchanged"
    assert len(Store(str(root)).read_table("drivers_daily", "alder")) > 0


def test_build_lake_validates_backfills_and_reports(small_sample, prefect_server, tmp_path) -> None:
    from lakefeed.flows.refresh import build_lake

    missing = str(tmp_path / "nowhere" / "reanalysis_*.nc")
    cfg = write_variants(small_sample, tmp_path / "config", ["fresh", "lost"], broken={"lost": missing})
    summary = {s["lake"]: s for s in build_lake([str(cfg)], sequential=True, stages=["weather"])}
    assert summary["fresh"]["status"] == "ok" and summary["fresh"]["stages_run"] == "weather"
    assert summary["lost"]["status"] == "failed" and summary["lost"]["error"].startswith("checks failed")
    root = tmp_path / "store"
    assert (root / "reports" / "fresh.html").exists() and not (root / "reports" / "lost.html").exists()
    assert json.loads(state_path(root, "fresh").read_text())["stages"] == {"weather": ["drivers_daily"]}


def _consistent(root: Path) -> list[str]:
    """Problems of a store's files: listed parts missing, files a glob sees that no kept generation or writer's
    entry lists (half-written or stray), or a scan of the current generation's file list that differs from its
    manifest. (A plain glob also sees the superseded files of the older generations the store keeps; readers
    outside lakefeed read ``lakefeed.store.snapshot``.)"""
    import pyarrow.dataset as pads

    from lakefeed.store import snapshot

    store, problems = Store(str(root)), []
    kept: dict[tuple[str, str], set[str]] = {}
    for gen in sorted((root / "_generations").glob("0*.json")):
        for table, lakes in json.loads(gen.read_text())["partitions"].items():
            for lake, ref in lakes.items():
                kept.setdefault((table, lake), set()).update(p["file"] for p in ref["parts"])
    snap = snapshot(store)
    for table in store.tables():
        for lake in store.lakes(table):
            listed = [Path(p).name for p in store.part_files(table, lake)]
            writers = [Path(p).name for p in Store(str(root), staged=True).part_files(table, lake)]
            folder = root / table / f"lake={lake}"
            visible = sorted(p.name for p in folder.glob("*.parquet"))  # what DuckDB / pandas globs read
            if not set(listed) <= set(visible) or not set(visible) <= kept.get((table, lake), set()) | set(writers):
                problems.append(f"{table}/{lake}: listed {listed}, on disk {visible}")
            files = [f for f, lk in zip(snap.tables[table], snap.lakes[table], strict=True) if lk == lake]
            rows = pads.dataset(files, format="parquet").count_rows()
            if rows != store.num_rows(table, lake):
                problems.append(
                    f"{table}/{lake}: a dataset scan sees {rows} rows, the manifest {store.num_rows(table, lake)}"
                )
    return problems


def test_dask_worker_lost_mid_write(sequential_run, small_sample, tmp_path) -> None:
    """A worker process killed while it writes a drivers_daily part (its file cut to half): the run completes or
    the lake fails with its reason, no reader sees a half-written file, and a second refresh completes the store."""
    from _faults import KillMidWrite
    from distributed import Client, LocalCluster

    from lakefeed.flows.refresh import refresh

    cfg_seq, _ = sequential_run
    cfg = write_variants(small_sample, tmp_path / "config", LAKES)
    root = cfg.parent / "store"
    marker = tmp_path / "killed"
    with (
        LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1", dashboard_address=None
        ) as cluster,
        Client(cluster) as client,
    ):
        client.register_plugin(KillMidWrite(str(marker)))
        first = {s["lake"]: s for s in refresh([str(cfg)], dask_address=cluster.scheduler_address, stages=STAGES)}
        killed = Path(marker.read_text())  # the file the dead worker was writing
        assert killed.name.startswith(".tmp-") and "drivers_daily" in str(killed)
        assert all(s["status"] == "ok" or (s["status"] == "failed" and s["error"]) for s in first.values()), first
        assert _consistent(root) == []
        seq = _content(str(cfg_seq.parent / "store"), LAKES)
        done = [lk for lk, s in first.items() if s["status"] == "ok"]
        for lk in done:
            for t in ("drivers_daily", "hydrology_daily"):
                pd.testing.assert_frame_equal(Store(str(root)).read_table(t, lk), seq[(t, lk)], check_exact=True)
        second = refresh([str(cfg)], dask_address=cluster.scheduler_address, stages=STAGES)
    assert all(s["status"] in ("ok", "unchanged") for s in second), second
    assert _consistent(root) == []
    par = _content(str(root), LAKES)
    for key, frame in seq.items():
        pd.testing.assert_frame_equal(frame, par[key], check_exact=True)
