"""What a run records for one lake: stages run, tables written, skips, warnings, how each stage ran, errors.

Takes the stage results (as the tasks return them: plain dicts of :class:`lakefeed.stages.StageResult`);
gives the lake's row of the run summary. Must not run anything or touch the store.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any

__all__ = ["LakeRecord"]


@dataclass
class LakeRecord:
    """One lake's outcome in a run (status ``ok``, ``unchanged`` or ``failed``)."""

    lake: str
    status: str = "ok"
    stages_run: list[str] = field(default_factory=list)
    tables: dict[str, int] = field(default_factory=dict)
    skipped: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    mode: list[str] = field(default_factory=list)
    error: str = ""
    changed: str = ""
    started: float = field(default_factory=time.perf_counter)

    def fail(self, error: str) -> None:
        """Mark the lake failed with ``error`` (``<step>: <type>: <message>``)."""
        self.status, self.error = "failed", error

    def add(self, stage: str, result: dict[str, Any]) -> None:
        """Record a stage's result: tables written, skip reason, warnings, and how an incremental stage ran."""
        self.stages_run.append(stage)
        self.tables.update(result["tables"])
        if result["skipped"]:
            self.skipped.append(f"{stage}: {result['reason']}")
        self.warnings += [f"{stage}: {w}" for w in result["warnings"]]
        if result["reason"] and not result["skipped"]:  # how an incremental stage ran (from a day, or in full)
            self.mode.append(f"{stage}: {result['reason']}")

    def summary(self, new_rows: int) -> dict[str, Any]:
        """The lake's row of the run summary; ``new_rows``: rows the stored tables gained."""
        return {
            "lake": self.lake,
            "status": self.status,
            "stages_run": ",".join(self.stages_run),
            "new_rows": int(new_rows),
            "rows_written": int(sum(self.tables.values())),
            "changed": self.changed,
            "mode": "; ".join(self.mode),
            "skipped": "; ".join(self.skipped),
            "error": self.error,
            "warnings": "; ".join(self.warnings),
            "seconds": round(time.perf_counter() - self.started, 3),
        }
