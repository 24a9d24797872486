"""Which antecedent windows to compute: lengths, statistics per driver, and the window options.

Takes driver column names and the window settings (lengths in days, statistics, whether a window ends on
the target day, the largest admissible fraction of missing days); returns a validated, cached
:class:`WindowPlan` whose defaults come from one constant, :data:`lakefeed.config.lake.WINDOW_DEFAULTS`.
Must not open files or compute windows (:mod:`lakefeed.features.windows` does).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from lakefeed.config.lake import WINDOW_DEFAULTS
from lakefeed.exceptions import FeatureError

__all__ = ["STATISTICS", "WINDOW_DEFAULTS", "WindowPlan", "default_statistics", "feature_name"]

#: Statistics a window can be summarised by.
STATISTICS = ("mean", "sum", "min", "max")

_PLANS: dict[tuple, WindowPlan] = {}


def feature_name(column: str, stat: str, k: int) -> str:
    """Name of a window feature: ``<driver column>__<stat>_<k>d`` (e.g. ``tp_load__sum_10d``)."""
    return f"{column}__{stat}_{k}d"


def default_statistics(column: str) -> list[str]:
    """Statistics used for a driver column when the configuration names none.

    Sums for precipitation and loads (amounts accumulate), mean/min/max for temperatures,
    the mean for everything else (radiation, wind, humidity, discharge, concentrations).
    """
    words = set(column.lower().split("_"))
    if words & {"precipitation", "precip", "load", "sum"}:
        return ["sum"]
    if words & {"temperature", "dewpoint"}:
        return ["mean", "min", "max"]
    return ["mean"]


@dataclass(frozen=True)
class WindowPlan:
    """Which windows and statistics to compute for which driver columns.

    ``windows`` in days (positive, sorted, unique); ``stats`` maps driver column -> statistics;
    ``include_target_day``: a window ends on the target day (else the day before);
    ``max_missing_fraction``: a window with more than this fraction of its days missing is missing.
    Defaults from :data:`lakefeed.config.lake.WINDOW_DEFAULTS`.
    """

    windows: tuple[int, ...]
    stats: Mapping[str, tuple[str, ...]]
    include_target_day: bool = WINDOW_DEFAULTS.include_target_day
    max_missing_fraction: float = WINDOW_DEFAULTS.max_missing_fraction

    @classmethod
    def build(
        cls,
        columns: Sequence[str],
        *,
        windows: Sequence[int] = WINDOW_DEFAULTS.windows,
        stats: Mapping[str, Sequence[str]] | None = None,
        include_target_day: bool = WINDOW_DEFAULTS.include_target_day,
        max_missing_fraction: float = WINDOW_DEFAULTS.max_missing_fraction,
    ) -> WindowPlan:
        """Validate windows and statistics; columns without configured statistics get the defaults.

        Plans are cached by their arguments (a refresh builds the same plan for every lake and lead).
        """
        try:
            key = (
                tuple(columns),
                tuple(windows),
                tuple((k, tuple(v)) for k, v in (stats or {}).items()),
                bool(include_target_day),
                float(max_missing_fraction),
            )
            hash(key)
        except TypeError:
            return cls._build(columns, windows=windows, stats=stats, options=(include_target_day, max_missing_fraction))
        plan = _PLANS.get(key)
        if plan is None:
            plan = cls._build(columns, windows=windows, stats=stats, options=(include_target_day, max_missing_fraction))
            if len(_PLANS) > 256:
                _PLANS.clear()
            _PLANS[key] = plan
        return plan

    @classmethod
    def _build(
        cls,
        columns: Sequence[str],
        *,
        windows: Sequence[int],
        stats: Mapping[str, Sequence[str]] | None,
        options: tuple[bool, float],
    ) -> WindowPlan:
        ws = [int(w) for w in windows]
        bad = [w for w in ws if w <= 0]
        if bad or not ws:
            raise FeatureError(
                f"antecedent window lengths must be positive whole days; got {list(windows)}. "
                "Fix features.windows in the lake configuration (e.g. [1, 3, 7, 30])."
            )
        plan: dict[str, tuple[str, ...]] = {}
        for c in columns:
            chosen = list((stats or {}).get(c) or default_statistics(c))
            unknown = [s for s in chosen if s not in STATISTICS]
            if unknown:
                raise FeatureError(f"driver {c!r}: unknown statistic(s) {unknown}; use any of {list(STATISTICS)}")
            plan[c] = tuple(dict.fromkeys(chosen))
        include_target_day, max_missing_fraction = options
        if not 0.0 <= float(max_missing_fraction) <= 1.0:
            raise FeatureError(
                f"max_missing_fraction must lie in 0..1; got {max_missing_fraction}. "
                "Fix features.max_missing_fraction in the lake configuration."
            )
        return cls(
            windows=tuple(sorted(set(ws))),
            stats=plan,
            include_target_day=bool(include_target_day),
            max_missing_fraction=float(max_missing_fraction),
        )

    @cached_property
    def names(self) -> list[str]:
        """Feature column names in output order (driver, statistic, window)."""
        return [feature_name(c, s, k) for c, ss in self.stats.items() for s in ss for k in self.windows]

    def layout(self, columns: Sequence[str]) -> np.ndarray | None:
        """Positions of the features in the (drivers, statistics, windows) result block, or None when
        the block is already in :attr:`names` order (cached per driver column order)."""
        key = tuple(columns)
        cache = self.__dict__.setdefault("_layouts", {})
        if key not in cache:
            n_w, n_s = len(self.windows), len(STATISTICS)
            col_pos = {c: i for i, c in enumerate(columns)}
            si = {s: i for i, s in enumerate(STATISTICS)}
            flat = np.array(
                [(col_pos[c] * n_s + si[s]) * n_w + w for c, ss in self.stats.items() for s in ss for w in range(n_w)],
                dtype=np.int64,
            )
            whole = len(flat) == len(columns) * n_s * n_w and (flat == np.arange(len(flat))).all()
            cache[key] = None if whole else flat
        return cache[key]
