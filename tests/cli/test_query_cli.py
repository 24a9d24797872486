"""`lakefeed query`: which store it reads (like every other command) and the caution beside trophic columns."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from lakefeed.cli import app
from lakefeed.exceptions import ConfigError
from lakefeed.extract.trophic import CAUTION
from lakefeed.store import Store

runner = CliRunner()


def _store_with_classes(root: Path) -> None:
    frame = pd.DataFrame(
        {
            "aoi": ["a1", "a1"],
            "date": pd.to_datetime(["2022-06-01", "2022-06-02"]).date,
            "chla": [12.0, 30.0],
            "tsi": [55.0, 64.0],
            "oecd_class": ["eutrophic", "hypertrophic"],
        }
    )
    Store(root).write_table("target_daily", "lk", frame, units={"chla": "mg m-3", "tsi": "1"})


def _run(*args: str) -> tuple[int, str]:
    done = runner.invoke(app, ["query", *args], env={"COLUMNS": "300"})
    return done.exit_code, " ".join(done.output.split())


def test_query_reads_the_store_of_the_sources_file(tmp_path: Path) -> None:
    _store_with_classes(tmp_path / "data" / "st")
    config = tmp_path / "config"
    config.mkdir()
    (config / "sources.yaml").write_text("store: ../data/st\n", encoding="utf-8")
    code, out = _run("SELECT aoi, tsi, oecd_class FROM target_daily", "--config", str(config / "sources.yaml"))
    assert code == 0, out
    assert f"store {tmp_path / 'data' / 'st'} (store: of {config / 'sources.yaml'})" in out
    assert "hypertrophic" in out


def test_query_defaults_to_store_in_the_working_folder(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    _store_with_classes(tmp_path / "store")
    monkeypatch.chdir(tmp_path)
    code, out = _run("SELECT count(*) AS n FROM target_daily")
    assert code == 0, out
    assert "store store (default ./store)" in out


def test_query_prints_the_caution_with_trophic_columns(tmp_path: Path) -> None:
    _store_with_classes(tmp_path / "st")
    code, out = _run("SELECT aoi, oecd_class FROM target_daily", "--store", str(tmp_path / "st"))
    assert code == 0, out
    assert " ".join(CAUTION.split()) in out
    code, out = _run("SELECT aoi, chla FROM target_daily", "--store", str(tmp_path / "st"))
    assert code == 0 and "inform only" not in out  # no classes in the answer, no caution


def test_query_config_without_store_says_what_to_do(tmp_path: Path) -> None:
    (tmp_path / "sources.yaml").write_text("dask_address: null\n", encoding="utf-8")
    done = runner.invoke(app, ["query", "SELECT 1", "--config", str(tmp_path / "sources.yaml")])
    assert isinstance(done.exception, ConfigError)  # main() prints it as one line and exits 1
    assert "sets no 'store:'" in str(done.exception) and "--store" in str(done.exception)
