"""Configuration values checked against the data: windows and leads vs the weather record, quality bits vs the
quality band's bit depth (on the reduced sample scenario, whose quality bands are 8-bit unsigned integers)."""

from __future__ import annotations

from datetime import date
from pathlib import Path

import pandas as pd

from lakefeed.checks._open import Period
from lakefeed.checks.meaning import check_quality_bits, check_record_length
from lakefeed.config import load_project


def _lake(small_sample: Path):  # the sample lake (sensors kite and dune, bits 0..3)
    return load_project(small_sample / "config" / "lake-tallow.yaml")


def test_windows_longer_than_the_weather_record_are_a_problem(small_sample) -> None:
    project = _lake(small_sample)
    year = Period(pd.Timestamp("2022-01-01"), pd.Timestamp("2022-12-31 23:00"))
    (ok,) = check_record_length(project.lake, year)
    assert ok.status == "ok" and "longest window 30 d" in ok.message
    long = project.lake.model_copy(update={"features": project.lake.features.model_copy(update={"windows": [7, 4000]})})
    lines = check_record_length(long, year)
    assert [r.status for r in lines] == ["problem", "problem"]  # with the leads and with the forecast leads
    # the same words as the features stage at its start (FeatureOptions.record_problems)
    assert [r.message for r in lines] == long.features.record_problems(date(2022, 1, 1), date(2022, 12, 31))
    assert "the longest window (4000 d) plus lead(s) [0] d do not fit in the record" in lines[0].message
    assert "the weather record 2022-01-01..2022-12-31 has 365 day(s)" in lines[0].message
    # 365 days: a 364-day window with lead 0 fits, with lead 1 it does not
    edge = long.features.model_copy(update={"windows": [364], "forecast_leads": [1]})
    assert edge.record_problems(date(2022, 1, 1), date(2022, 12, 31))[0].startswith(
        "features.windows/features.forecast_leads: the longest window (364 d) plus lead(s) [1] d"
    )
    assert len(edge.record_problems(date(2022, 1, 1), date(2022, 12, 31))) == 1


def test_quality_bits_beyond_the_band_depth_are_a_problem(small_sample) -> None:
    project = _lake(small_sample)
    lines = check_quality_bits(project.sources.scenes, project.lake)
    assert [r.status for r in lines] == ["ok", "ok"] and "8-bit quality band" in lines[0].message
    kite = project.lake.sensors["kite"].model_copy(update={"bad_quality_bits": [0, 9, 12]})
    lake = project.lake.model_copy(update={"sensors": {**project.lake.sensors, "kite": kite}})
    bad = [r for r in check_quality_bits(project.sources.scenes, lake) if r.status == "problem"]
    assert len(bad) == 1
    assert bad[0].message.startswith("sensors.kite.bad_quality_bits: bit(s) [9, 12] outside the 8-bit quality band")
    assert "use bits 0..7" in bad[0].hint


def test_check_command_refuses_windows_longer_than_the_record(mini: Path) -> None:
    """The mini scenario's weather record is 4 days: the default 30-day windows are a problem line."""
    import yaml
    from typer.testing import CliRunner

    from lakefeed.cli import app

    cfg = yaml.safe_load(mini.read_text())
    del cfg["features"]
    mini.write_text(yaml.safe_dump(cfg))
    result = CliRunner().invoke(app, ["check", str(mini)])
    assert result.exit_code == 1
    assert "the longest window (30 d) plus lead(s) [0] d do not fit in the record" in " ".join(result.output.split())
