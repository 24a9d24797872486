"""What a stage reports back: rows written per table, warnings, skip reason."""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass
class StageResult:
    """Outcome of one stage for one lake."""

    stage: str
    lake: str
    tables: dict[str, int] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    skipped: bool = False
    reason: str = ""
