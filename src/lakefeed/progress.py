"""Progress reporting shared by every layer: the callback type and the callback that does nothing.

Takes nothing; gives :data:`Progress` (``(description, done, total)``; the CLI draws rich bars, flows
log) and :func:`no_progress`. Must not import any other lakefeed module.
"""

from __future__ import annotations

from collections.abc import Callable

__all__ = ["Progress", "no_progress"]

#: Progress callback: (description, done, total). The CLI draws rich bars; flows log.
Progress = Callable[[str, int, int], None]


def no_progress(description: str, done: int, total: int) -> None:
    """A progress callback that does nothing."""
