"""Do the sources' time periods overlap? Pure: takes periods, returns check lines.

Each source's period is what its metadata says (weather and hydrology time axes, sample
dates, scene dates, forecast issue times). The common period is the latest start to the
earliest end; an empty common period is a problem naming the sources that do not overlap.
"""

from __future__ import annotations

from collections.abc import Mapping

from lakefeed.checks._open import Period
from lakefeed.checks._result import CheckResult, failed, passed, skipped

__all__ = ["check_coverage", "common_period"]


def common_period(periods: Mapping[str, Period]) -> Period | None:
    """The period all sources cover (None if they do not all overlap or there are none)."""
    if not periods:
        return None
    start = max(p.start for p in periods.values())
    end = min(p.end for p in periods.values())
    return Period(start, end) if start <= end else None


def check_coverage(periods: Mapping[str, Period | None]) -> list[CheckResult]:
    """One line: each source's period and the common period, or which sources do not overlap."""
    known = {k: p for k, p in periods.items() if p is not None}
    if len(known) < 2:
        return [skipped("time coverage", f"fewer than two sources with a known period ({', '.join(known) or 'none'})")]
    each = "; ".join(f"{k} {p}" for k, p in known.items())
    common = common_period(known)
    if common is None:
        latest = max(known, key=lambda k: known[k].start)
        earliest = min(known, key=lambda k: known[k].end)
        return [
            failed(
                "time coverage",
                f"the sources do not overlap in time: {latest} starts {known[latest].start:%Y-%m-%d} after "
                f"{earliest} ends {known[earliest].end:%Y-%m-%d} ({each})",
                "use source files covering a common period",
            )
        ]
    days = (common.end - common.start).days + 1
    return [passed("time coverage", f"common period {common} ({days} days); {each}")]
