"""The incremental-refresh contract every stage follows: one plan type, one mode enumeration.

A stage that can extend its stored table asks its own planner (``refresh_plan`` in
:mod:`lakefeed.stages._weather_refresh`, :mod:`lakefeed.stages._target_refresh`,
:mod:`lakefeed.stages._forecast_refresh`, :mod:`lakefeed.stages._features_inputs`) how to run. Each
planner checks the stored table itself (manifest entry, columns, configuration and input hashes) and
returns a :class:`RefreshPlan`: the first day to recompute, why a full build is needed when it is, and
what is reused from the store. :meth:`RefreshPlan.summary` is the text the stage puts in
``StageResult.reason``, which the run summary shows in its ``mode`` column. Must not read or write data.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from enum import StrEnum
from typing import Any

import pandas as pd

__all__ = ["PENDING", "RefreshMode", "RefreshPlan"]

#: Manifest metadata key of a table whose write stopped before its last step (value: the first day missing).
PENDING = "pending_from"


class RefreshMode(StrEnum):
    """How a stage runs.

    ``FULL``: every row is recomputed from all inputs. ``TAIL``: the rows from :attr:`RefreshPlan.day` on
    are recomputed from the inputs that day needs; the stored rows before it are kept. ``CHECK``: as
    ``TAIL``, after all inputs were read to compare their fingerprint up to the day with the stored one
    (the stage falls back to ``FULL`` when they differ).
    """

    FULL = "full"
    TAIL = "tail"
    CHECK = "check"


@dataclass(frozen=True)
class RefreshPlan:
    """What a stage recomputes, and what it reuses from the store.

    Attributes
    ----------
    mode
        :class:`RefreshMode`.
    day
        First day recomputed (a ``datetime.date`` or ``pandas.Timestamp``); None for a full build.
    reason
        Why a full build is needed (for ``FULL``), or a stage's own wording of an incremental run
        (empty: :meth:`summary` says ``incremental from <day>``).
    reuse
        Stored rows kept as they are (target: raw per-scene rows; forecast: raw daily drivers), or None.
    read
        Forecast issue times (UTC) to read again, or None.
    known
        Values carried over without computing them again: content hashes of inputs not read again
        ({absolute path: sha256}), or the stored "known through" dates of the inputs (features).
    """

    mode: RefreshMode
    day: Any = None
    reason: str = ""
    reuse: pd.DataFrame | None = None
    read: pd.DatetimeIndex | None = None
    known: Mapping[str, Any] = field(default_factory=dict)

    @classmethod
    def full(cls, reason: str = "", **known: Any) -> RefreshPlan:
        """A full build, and why (empty: no reason to give, e.g. no ``since`` was asked for)."""
        return cls(RefreshMode.FULL, reason=reason, known=known)

    @property
    def is_full(self) -> bool:
        """True for a full build."""
        return self.mode is RefreshMode.FULL

    def summary(self) -> str:
        """The run summary's text: ``full build (<why>)``, ``incremental from YYYY-MM-DD`` or the stage's wording."""
        if self.is_full:
            return f"full build ({self.reason})" if self.reason else "full build"
        if self.reason:
            return self.reason
        return f"incremental from {pd.Timestamp(self.day).date()}"
