"""Change detection of the refresh: content hashes by source kind and month, and the stages they select."""

from __future__ import annotations

from pathlib import Path

import pytest

from lakefeed.exceptions import SourceError, StoreError
from lakefeed.flows._state import changes, plan_stages, stage_since
from lakefeed.flows.runtime import available_stages
from lakefeed.flows.tasks import is_transient
from lakefeed.store import run_lock

ORDER = ["weather", "hydrology", "target", "features", "forecast"]


def test_changes_by_month() -> None:
    old = {"weather": {"2022-01": "a", "2022-02": "b"}, "config": {"all": "c"}}
    new = {"weather": {"2022-01": "a", "2022-02": "B", "2022-03": "d"}, "config": {"all": "c"}}
    assert changes(old, new) == {"weather": ["2022-02", "2022-03"]}
    assert changes(new, new) == {}
    assert changes({"scenes": {"2022-01": "x"}}, {}) == {"scenes": ["removed:2022-01"]}


def test_plan_only_what_changed() -> None:
    recorded = {s: [] for s in ORDER}
    have = lambda table: True  # noqa: E731
    assert plan_stages(ORDER, {}, recorded=recorded, has_table=have) == []
    # new scenes: target, then features and forecast (which extends the feature table); not weather
    assert plan_stages(ORDER, {"scenes": ["2022-03"]}, recorded=recorded, has_table=have) == [
        "target",
        "features",
        "forecast",
    ]
    assert plan_stages(ORDER, {"forecast": ["2022-03"]}, recorded=recorded, has_table=have) == ["forecast"]
    assert plan_stages(ORDER, {"config": ["all"]}, recorded=recorded, has_table=have) == ORDER


def test_plan_reruns_a_stage_whose_table_vanished() -> None:
    recorded = {s: [] for s in ORDER} | {"weather": ["drivers_daily"]}
    plan = plan_stages(ORDER, {}, recorded=recorded, has_table=lambda t: t != "drivers_daily")
    assert plan == ["weather", "features", "forecast"]
    assert plan_stages(ORDER, {}, recorded={}, has_table=lambda t: True) == ORDER  # never ran


def test_weather_gets_its_earliest_changed_month() -> None:
    recorded = {s: [] for s in ORDER}
    assert stage_since("weather", {"weather": ["2022-12", "2022-11"]}, recorded=recorded) == "2022-11-01"
    assert stage_since("weather", {"weather": ["2022-12"], "scenes": ["all"]}, recorded=recorded) == "2022-12-01"
    # in full: the configuration changed, a file without a month, a month removed, no record of a run
    assert stage_since("weather", {"weather": ["2022-12"], "config": ["all"]}, recorded=recorded) is None
    assert stage_since("weather", {"weather": ["2022-12", "all"]}, recorded=recorded) is None
    assert stage_since("weather", {"weather": ["removed:2022-01"]}, recorded=recorded) is None
    assert stage_since("weather", {"weather": ["2022-12"]}, recorded={}) is None
    assert stage_since("weather", {}, recorded=recorded) is None  # rerun for a vanished table: in full
    assert stage_since("hydrology", {"hydrology": ["2022-12"]}, recorded=recorded) is None  # not incremental


def test_transient_errors_only() -> None:
    assert is_transient(TimeoutError("slow disk"))
    assert is_transient(OSError(5, "Input/output error"))
    assert not is_transient(FileNotFoundError(2, "No such file"))
    assert not is_transient(SourceError("weather: no file matches"))
    wrapped = SourceError("cannot read")
    wrapped.__cause__ = ConnectionResetError(104, "reset")
    assert is_transient(wrapped)


def test_store_lock_refuses_a_second_run(tmp_path: Path) -> None:
    with run_lock(tmp_path, what="refresh"):
        with pytest.raises(StoreError, match=r"in use by another run .*refresh: pid"):
            with run_lock(tmp_path, wait=0.3):
                pass
    with run_lock(tmp_path):  # released: the next run gets it
        pass


def test_all_stages_are_found() -> None:
    found, missing = available_stages()
    assert set(found) | set(missing) == {*ORDER, "skill"}


def test_skill_follows_features_and_forecast() -> None:
    order = [*ORDER, "skill"]
    recorded = {s: [] for s in order}
    have = lambda table: True  # noqa: E731
    assert plan_stages(order, {}, recorded=recorded, has_table=have) == []
    # new forecasts extend the feature table: its screening and baseline skill are redone
    assert plan_stages(order, {"forecast": ["2022-03"]}, recorded=recorded, has_table=have) == ["forecast", "skill"]
    assert plan_stages(order, {"scenes": ["2022-03"]}, recorded=recorded, has_table=have)[-2:] == ["forecast", "skill"]
    assert plan_stages(order, {"hydrology": ["2022-03"]}, recorded=recorded, has_table=have) == [
        "hydrology", "features", "forecast", "skill",
    ]  # fmt: skip


def test_fingerprint_rehashes_only_files_whose_size_or_time_changed(tmp_path: Path) -> None:
    """A file with its recorded size and modification time keeps its recorded hash (not read again); a touched
    file and ``--verify-hashes`` (no record) are hashed from their bytes (reference: hashlib.sha256)."""
    import hashlib
    import os

    import yaml

    from lakefeed.config import load_project
    from lakefeed.flows._state import fingerprint

    for name in ("lake.gpkg", "aois.gpkg", "subbasins.gpkg"):
        (tmp_path / name).write_text(name)
    (tmp_path / "w").mkdir()
    for month in ("2022-01", "2022-02"):
        (tmp_path / "w" / f"grid_{month}.nc").write_bytes(month.encode() * 10)
    (tmp_path / "sources.yaml").write_text(yaml.safe_dump({"weather": {"paths": [str(tmp_path / "w" / "*.nc")]}}))
    layers = {k: {"path": f"{k}.gpkg"} for k in ("lake", "aois", "subbasins")}
    cfg = {"id": "alder", "name": "Alder", "timezone": "UTC", "sources": "sources.yaml", **layers}
    (tmp_path / "lake-alder.yaml").write_text(yaml.safe_dump(cfg))
    project = load_project(tmp_path / "lake-alder.yaml")
    seen: dict = {}
    first = fingerprint(project, seen=seen)
    jan, feb = (str((tmp_path / "w" / f"grid_{m}.nc").absolute()) for m in ("2022-01", "2022-02"))
    assert seen[jan][2] == hashlib.sha256(b"2022-01" * 10).hexdigest()
    known = {k: [*v[:2], "recorded"] if k in (jan, feb) else v for k, v in seen.items()}
    again = fingerprint(project, known=known)  # unchanged size and time: the recorded hashes are taken
    assert again["weather"] != first["weather"] and again["config"] == first["config"]
    st = os.stat(feb)
    os.utime(feb, ns=(st.st_atime_ns, st.st_mtime_ns + 10**9))  # February touched: hashed again
    seen2: dict = {}
    touched = fingerprint(project, known=known, seen=seen2)
    assert seen2[jan][2] == "recorded" and seen2[feb][2] == hashlib.sha256(b"2022-02" * 10).hexdigest()
    assert changes({"weather": again["weather"]}, {"weather": touched["weather"]}) == {"weather": ["2022-02"]}
    assert fingerprint(project) == first  # verify: every file from its bytes
