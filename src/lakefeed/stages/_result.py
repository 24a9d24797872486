"""What a stage reports back: rows written per table, warnings, skip reason."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

#: Progress callback: (description, done, total). The CLI draws rich bars; flows log.
Progress = Callable[[str, int, int], None]


def no_progress(description: str, done: int, total: int) -> None:
    """A progress callback that does nothing."""


@dataclass
class StageResult:
    """Outcome of one stage for one lake."""

    stage: str
    lake: str
    tables: dict[str, int] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    skipped: bool = False
    reason: str = ""
