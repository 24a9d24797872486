"""Store generations: readers see whole runs, a killed run leaves the previous generation, old ones are collected."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
import threading
from pathlib import Path

import pandas as pd
import pyarrow.dataset as ds
import pytest

from lakefeed.exceptions import StoreError
from lakefeed.store import Store, snapshot


def _rows(n: int, value: float) -> pd.DataFrame:
    return pd.DataFrame({"aoi": "a", "target_date": pd.date_range("2024-01-01", periods=n), "chla": value})


def _run(root: Path, n: int, value: float) -> None:
    """A two-stage run: features drops to a few rows first, then the second stage restores them all."""
    store = Store(root, staged=True)
    store.write_table("features", "tallow", _rows(3, value), time_column="target_date")
    store.write_table("diagnostics", "tallow", _rows(n, value), time_column="target_date")
    store.write_table("features", "tallow", _rows(n, value), time_column="target_date")
    store.publish()


def test_a_reader_during_runs_sees_only_whole_generations(tmp_path: Path) -> None:
    """A reader polling while runs write sees, in every read, a table count of a published run and both tables
    from the same run (the same value) — never the features table of a half-done run."""
    _run(tmp_path, 20, 0.0)
    seen: list[tuple[int, float, float]] = []
    stop = threading.Event()

    def poll() -> None:
        reader = Store(tmp_path)
        while not stop.is_set():
            pinned = reader.pinned()
            f = pinned.read_table("features", "tallow")
            d = pinned.read_table("diagnostics", "tallow")
            seen.append((len(f), float(f["chla"].iloc[0]), float(d["chla"].iloc[0])))

    thread = threading.Thread(target=poll)
    thread.start()
    for i in range(1, 15):
        _run(tmp_path, 20, float(i))
    stop.set()
    thread.join()
    assert seen and all(n == 20 and fv == dv for n, fv, dv in seen), [s for s in seen if s[0] != 20][:3]


def test_a_killed_run_leaves_the_previous_generation_and_the_next_run_completes(tmp_path: Path) -> None:
    _run(tmp_path, 10, 1.0)
    before = Store(tmp_path).read_table("features", "tallow")
    code = (
        "import os, sys, pandas as pd\n"
        "from lakefeed.store import Store\n"
        "s = Store(sys.argv[1], staged=True)\n"
        "s.write_table('features', 'tallow', pd.DataFrame({'aoi': 'a', 'target_date': pd.date_range('2024-01-01',"
        " periods=3), 'chla': 9.0}), time_column='target_date')\n"
        "os._exit(1)\n"  # killed between the stages, before the publish
    )
    assert subprocess.run([sys.executable, "-c", code, str(tmp_path)], check=False).returncode == 1
    reader = Store(tmp_path)
    pd.testing.assert_frame_equal(reader.read_table("features", "tallow"), before)
    assert Store(tmp_path, staged=True).num_rows("features", "tallow") == 3  # the writers' view has the kill's rows
    _run(tmp_path, 12, 2.0)
    after = reader.read_table("features", "tallow")
    assert len(after) == 12 and (after["chla"] == 2.0).all()


def test_old_generations_are_kept_then_collected(tmp_path: Path) -> None:
    store = Store(tmp_path, keep_generations=2)
    for i in range(5):
        store.write_table("features", "tallow", _rows(4 + i, float(i)), time_column="target_date")
    gens = sorted(p.name for p in (tmp_path / "_generations").glob("0*.json"))
    assert gens == ["00000004.json", "00000005.json"]
    assert json.loads((tmp_path / "_manifest.json").read_text())["keep_generations"] == 2
    on_disk = sorted(p.name for p in (tmp_path / "features" / "lake=tallow").glob("*.parquet"))
    assert len(on_disk) == 2  # the parts of the two kept generations, no more
    assert len(store.at(4).read_table("features", "tallow")) == 7  # a reader still on the older kept generation
    with pytest.raises(StoreError, match="not kept"):
        store.at(3)
    assert len(Store(tmp_path).read_table("features", "tallow")) == 8
    later = Store(tmp_path)  # the option is recorded in the store: another writer keeps 2 too
    later.write_table("features", "tallow", _rows(2, 9.0), time_column="target_date")
    assert len(list((tmp_path / "_generations").glob("0*.json"))) == 2


def test_snapshot_is_one_generation_for_outside_readers(tmp_path: Path) -> None:
    store = Store(tmp_path)
    store.write_table("features", "tallow", _rows(5, 1.0), time_column="target_date")
    store.write_table("features", "tallow", _rows(6, 2.0), time_column="target_date")
    snap = snapshot(store)
    assert snap.generation == 2 and snap.lakes["features"] == ["tallow"]
    table = ds.dataset(snap.tables["features"], partitioning="hive", partition_base_dir=str(tmp_path / "features"))
    frame = table.to_table().to_pandas()
    assert len(frame) == 6 and (frame["chla"] == 2.0).all() and set(frame["lake"]) == {"tallow"}
    # a plain glob sees the superseded file of the kept older generation too
    assert len(list((tmp_path / "features" / "lake=tallow").glob("*.parquet"))) == 2


def test_a_store_without_generations_is_read_and_upgraded_at_its_first_write(tmp_path: Path) -> None:
    """A store of the previous layout (schema version 2: entry files, no generations) reads as before; its first
    write publishes a first generation listing every partition."""
    store = Store(tmp_path)
    store.write_table("features", "tallow", _rows(5, 1.0), time_column="target_date")
    store.write_table("diagnostics", "rowan", _rows(2, 1.0), time_column="target_date")
    shutil.rmtree(tmp_path / "_generations")
    (tmp_path / "_manifest.json").write_text(json.dumps({"schema_version": 2, "package_version": "0.2.0"}))
    old = Store(tmp_path)
    assert old.generation() is None and old.tables() == ["diagnostics", "features"]
    assert len(old.read_table("features", "tallow")) == 5
    old.write_table("features", "birch", _rows(3, 1.0), time_column="target_date")
    assert old.generation() == 1
    assert json.loads((tmp_path / "_manifest.json").read_text())["schema_version"] == 3
    assert old.lakes("features") == ["birch", "tallow"] and old.lakes("diagnostics") == ["rowan"]
