"""`lakefeed verify --repair` and the writing commands on a store built from the reduced sample.

A zeroed block inside a ``features`` part is named by ``verify`` and ``--repair`` rebuilds tables equal to
the ones before the damage (compared with pandas' assert_frame_equal). ``features --full`` keeps the forecast
stage's re-forecast rows (leads > 0), and a writing command refuses while a run holds the store.
"""

from __future__ import annotations

import importlib
import os
import shutil
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from lakefeed.cli import app
from lakefeed.exceptions import StoreError
from lakefeed.store import Store, run_lock, verify_store

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def built(small_sample: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """(lake config, store) after every stage ran once for the sample lake."""
    from lakefeed.config import load_project
    from lakefeed.stages.repair import STAGE_FUNCTIONS

    config = next((small_sample / "config").glob("lake-*.yaml"))
    project = load_project(config)
    root = tmp_path_factory.mktemp("built") / "store"
    store = Store(root)
    for module, func, kwargs in STAGE_FUNCTIONS.values():
        getattr(importlib.import_module(module), func)(project, store, **kwargs)
    return config, root


def _tables(store: Store) -> dict[str, pd.DataFrame]:
    out = {}
    for table in store.tables():
        frame = store.read_table(table).drop(columns=["lake"])
        out[table] = frame.sort_values(list(frame.columns[:4])).reset_index(drop=True)
    return out


def _assert_same(before: dict[str, pd.DataFrame], after: dict[str, pd.DataFrame]) -> None:
    assert sorted(before) == sorted(after)
    for table in before:
        pd.testing.assert_frame_equal(after[table], before[table], obj=table)


def test_verify_names_a_zeroed_block_and_repair_restores_equal_tables(built, tmp_path: Path) -> None:
    config, template = built
    shutil.copytree(template, tmp_path / "store")
    store = Store(tmp_path / "store")
    before = _tables(store)
    lake = store.lakes("features")[0]
    part = store.part_files("features", lake)[0]
    with open(part, "r+b") as f:  # a zeroed block inside the data: the footer stays valid
        f.seek(os.path.getsize(part) // 3)
        f.write(b"\0" * 256)
    runner = CliRunner()
    result = runner.invoke(app, ["verify", "--store", store.path])
    assert result.exit_code == 1
    assert f"{part} (table features, lake {lake})" in result.output
    result = runner.invoke(app, ["verify", str(config), "--store", store.path, "--repair"])
    assert result.exit_code == 0, result.output
    assert f"{lake}: repaired" in result.output
    assert verify_store(store) == []
    assert not (Path(store.path) / "_damaged").exists() or not any((Path(store.path) / "_damaged").iterdir())
    _assert_same(before, _tables(store))


def test_repair_without_the_lake_config_says_so(built, tmp_path: Path) -> None:
    _, template = built
    shutil.copytree(template, tmp_path / "store")
    store = Store(tmp_path / "store")
    part = store.part_files("drivers_daily", store.lakes("drivers_daily")[0])[0]
    os.truncate(part, os.path.getsize(part) - 10)
    result = CliRunner().invoke(app, ["verify", "--store", store.path, "--repair"])
    assert result.exit_code == 1
    assert "no lake configuration given" in result.output
    assert [e.path for e in verify_store(store)] == [part]  # nothing else touched


def test_features_full_keeps_the_re_forecast_rows(built, tmp_path: Path) -> None:
    config, template = built
    shutil.copytree(template, tmp_path / "store")
    store = Store(tmp_path / "store")
    before = _tables(store)
    leads = before["features"]["lead_days"]
    assert (leads > 0).sum() > 0  # the forecast stage's rows are there to be kept
    result = CliRunner().invoke(app, ["features", str(config), "--store", store.path, "--full"])
    assert result.exit_code == 0, result.output
    assert "forecast stage rerun" in result.output
    _assert_same(before, _tables(store))


def test_writing_commands_refuse_while_a_run_holds_the_store(built, tmp_path: Path) -> None:
    config, template = built
    shutil.copytree(template, tmp_path / "store")
    store = Store(tmp_path / "store")
    runner = CliRunner()
    with run_lock(store.path, what="refresh"):
        for args in (["features", str(config)], ["forecast", str(config)], ["verify", str(config), "--repair"]):
            if args[0] == "verify":  # a damaged part, so that the repair wants to write
                part = store.part_files("diagnostics", store.lakes("diagnostics")[0])[0]
                os.truncate(part, os.path.getsize(part) - 10)
            result = runner.invoke(app, [*args, "--store", store.path])
            assert isinstance(result.exception, StoreError), (args, result.output)
            assert "in use by another run (refresh: pid" in str(result.exception)
