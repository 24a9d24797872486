"""What one check reports: a name, whether it passed, what was found, and what to do.

Pure data; no I/O. ``status`` is one of ``ok``, ``problem``, ``warning`` (passed, but look at
it) and ``skipped`` (the source is not configured, or an earlier problem prevents the check).
Only ``problem`` makes ``lakefeed check`` fail (``warning`` too with ``--strict``).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass
from typing import Literal

__all__ = ["CheckResult", "Status", "failed", "guarded", "passed", "skipped", "warned"]

Status = Literal["ok", "problem", "warning", "skipped"]


@dataclass(frozen=True)
class CheckResult:
    """Outcome of one cheap check.

    Attributes
    ----------
    name
        Short label of what was checked (``"lake polygon"``, ``"weather variables"``).
    ok
        False only for a problem (something the user must fix).
    message
        What was found, naming files, config keys, ids and values.
    hint
        What to do about it (empty when nothing is to be done).
    status
        ``ok``, ``problem``, ``warning`` or ``skipped``; derived from ``ok`` when not given.
    """

    name: str
    ok: bool
    message: str
    hint: str = ""
    status: Status | None = None

    def __post_init__(self) -> None:
        if self.status is None:
            object.__setattr__(self, "status", "ok" if self.ok else "problem")
        if self.status == "problem" and self.ok:
            raise ValueError("a problem cannot be ok")


def passed(name: str, message: str) -> CheckResult:
    """A check that passed."""
    return CheckResult(name, True, message)


def failed(name: str, message: str, hint: str = "") -> CheckResult:
    """A problem the user must fix."""
    return CheckResult(name, False, message, hint)


def warned(name: str, message: str, hint: str = "") -> CheckResult:
    """Passed, but the user should look at it."""
    return CheckResult(name, True, message, hint, status="warning")


def skipped(name: str, message: str) -> CheckResult:
    """Not run: source not configured, or an earlier problem prevents it."""
    return CheckResult(name, True, message, status="skipped")


def guarded(name: str, run: Callable[[], Iterable[CheckResult]]) -> list[CheckResult]:
    """Run a check, turning any unexpected exception into a problem line naming the check.

    lakefeed errors carry their own message; other exceptions (a corrupt file a library
    chokes on) are shown with their type so the user can act on them.
    """
    from lakefeed.exceptions import LakefeedError

    try:
        return list(run())
    except LakefeedError as err:
        return [failed(name, str(err))]
    except Exception as err:  # a library failing on a corrupt input is still a finding of the check
        return [failed(name, f"{type(err).__name__}: {err}", "the file may be corrupt or in an unexpected format")]
