"""Errors on the command line are one line; the traceback only with --verbose (lakefeed.cli)."""

from __future__ import annotations

import logging
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from lakefeed.cli import _NoTraceback
from lakefeed.cli._app import app
from lakefeed.exceptions import SourceError

runner = CliRunner()


def _log_failure(err: BaseException) -> logging.LogRecord:
    try:
        raise err
    except type(err):
        info = sys.exc_info()
        return logging.LogRecord("prefect.flow_runs", logging.ERROR, __file__, 1, "run failed: %r", (err,), info)


def test_run_logs_keep_the_message_and_drop_the_traceback() -> None:
    record = _log_failure(SourceError("weather grid x.nc: not a NetCDF file"))
    assert _NoTraceback().filter(record) and record.exc_info is None
    text = logging.Formatter().format(record)
    assert "Traceback" not in text and "not a NetCDF file" in text
    record = _log_failure(ZeroDivisionError("division by zero"))  # a bug: say how to see the traceback
    _NoTraceback().filter(record)
    assert "`lakefeed --verbose ...`" in logging.Formatter().format(record)


def test_store_that_is_a_file_is_one_line(tmp_path: Path) -> None:
    f = tmp_path / "store"
    f.write_text("x")
    cmd = [sys.executable, "-c", "from lakefeed.cli import main; main()", "query", "SELECT 1", "--store", str(f)]
    out = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert out.returncode == 1
    assert "Traceback" not in out.stderr
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1 and "StoreError: store" in lines[0] and "is a file, not a folder" in lines[0]
    verbose = subprocess.run([*cmd[:3], "--verbose", *cmd[3:]], capture_output=True, text=True, timeout=120)
    assert verbose.returncode == 1 and "Traceback" in verbose.stderr


@pytest.mark.parametrize(
    ("args", "words"),
    [
        (["/no/such/grid.nc"], "no such file or folder"),
        (["/no/such/*.nc"], "the pattern matches no file"),
        (["{grid}", "--tz", "Mars/Olympus"], "'Mars/Olympus' is not an IANA time zone"),
        (["{grid}", "--reset-hour", "24"], "an hour of the day in UTC, 0..23"),
    ],
)
def test_zonal_arguments_are_usage_errors(tmp_path: Path, args: list[str], words: str) -> None:
    grid = tmp_path / "grid.nc"
    grid.write_bytes(b"")
    zones = tmp_path / "zones.gpkg"
    zones.write_bytes(b"")
    argv = ["zonal", *(a.format(grid=grid) for a in args), "--zones", str(zones), "--id-field", "id"]
    result = runner.invoke(app, [*argv, "--out", str(tmp_path / "out.parquet")])
    assert result.exit_code == 2, result.output
    assert words in " ".join(result.output.split())
    assert not (tmp_path / "out.parquet").exists()
