"""Pieces of the demo's screen: the timing table per step and the note on leads beyond the forecast archive."""

from __future__ import annotations

import pandas as pd
from rich.console import Console

from lakefeed.cli.demo import StepClock, forecast_lead_notes


def test_lead_beyond_the_archive_is_named() -> None:
    feats = pd.DataFrame({"lead_days": [1, 3, 10, 10], "forecast_days": [0.0, 2.0, 9.0, 9.0]})
    notes = forecast_lead_notes([1, 3, 5, 10], list(range(1, 10)), feats)
    assert notes == [
        "lead 10 uses forecast days 1-9: the archive's forecasts end inside day 10 (longest full local day: 9); "
        "its bias is shown at lead 9"
    ]
    assert forecast_lead_notes([1, 3, 5], list(range(1, 10)), feats) == []  # every lead inside the archive
    with_hours = forecast_lead_notes([10], list(range(1, 10)), feats, archive_hours=240)
    assert with_hours[0].startswith("lead 10 uses forecast days 1-9: the 240 h archive ends inside day 10")


def test_step_clock_records_each_step_and_the_rest() -> None:
    seen: list[tuple[str, int, int]] = []
    clock = StepClock(lambda d, n, t: seen.append((d, n, t)))
    clock("weather: reading", 0, 3)
    clock("weather: done", 3, 3)
    clock("report: writing", 0, 1)
    assert [s[0] for s in seen] == ["weather: reading", "weather: done", "report: writing"]  # passed on
    assert list(clock.spans) == ["weather", "report"]
    console = Console(width=120, record=True)
    console.print(clock.table(10.0, title="time per stage"))
    text = console.export_text()
    assert "weather" in text and "report" in text and "other (start-up" in text and "10.0" in text


def test_step_clock_counts_a_step_from_the_previous_steps_last_report(monkeypatch) -> None:
    """A stage computes before its first report: its time runs from the previous stage's last report."""
    import time

    ticks = iter([0.0, 1.0, 5.0, 6.0])  # weather reports at 0 s and 1 s; features first reports at 5 s, ends 6 s
    monkeypatch.setattr(time, "perf_counter", lambda: next(ticks))
    clock = StepClock(lambda *_: None)
    for text in ("weather: a", "weather: b", "features: a", "features: b"):
        clock(text, 0, 1)
    assert {k: b - a for k, (a, b) in clock.spans.items()} == {"weather": 1.0, "features": 5.0}
