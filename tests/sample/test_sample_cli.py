"""`lakefeed sample`: arguments reach the generator; progress is drawn; the folder is reported."""

from __future__ import annotations

from pathlib import Path

from typer.testing import CliRunner

import lakefeed.sample as sample_pkg
from lakefeed.cli import app


def test_sample_command_passes_its_options(tmp_path: Path, monkeypatch) -> None:
    seen = {}

    def fake_generate(out, *, seed, years, small, progress):
        seen.update(out=Path(out), seed=seed, years=years, small=small)
        progress("weather", 1, 2)
        progress("weather", 2, 2)
        progress("done", 1, 1)
        return Path(out)

    monkeypatch.setattr(sample_pkg, "generate", fake_generate)
    result = CliRunner().invoke(app, ["sample", str(tmp_path / "s"), "--seed", "5", "--years", "2", "--small"])
    assert result.exit_code == 0, result.output
    assert seen == {"out": tmp_path / "s", "seed": 5, "years": 2, "small": True}
    assert "lake-tallow.yaml" in result.output.replace("\n", "")  # rich wraps long lines


def test_sample_command_rejects_zero_years(tmp_path: Path) -> None:
    result = CliRunner().invoke(app, ["sample", str(tmp_path), "--years", "0"])
    assert result.exit_code != 0


def test_regenerating_replaces_a_previous_scenario(tmp_path: Path) -> None:
    stale = tmp_path / "weather" / "reanalysis_2031-01.nc"
    stale.parent.mkdir(parents=True)
    stale.write_bytes(b"old")
    (tmp_path / "truth").mkdir()
    (tmp_path / "truth" / "truth.json").write_text("{}")
    (tmp_path / "notes.txt").write_text("mine")
    try:
        sample_pkg.generate(tmp_path, years=0)
    except ValueError:
        pass
    assert stale.exists()  # a bad argument writes and removes nothing
    assert (tmp_path / "notes.txt").read_text() == "mine"
