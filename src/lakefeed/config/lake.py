"""Configuration model of one lake: geometry, areas of interest, sensors, targets, features."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from datetime import date
from pathlib import Path
from typing import Literal
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pydantic import Field, field_validator, model_validator

from lakefeed.config._base import LayerRef, StrictModel, tz_hint

SLUG = re.compile(r"^[a-z0-9][a-z0-9_-]{0,62}$")
#: Bits of the widest integer quality band (64-bit): bit numbers 0..63.
MAX_QUALITY_BITS = 64


class AoiLayer(LayerRef):
    """Areas of interest: polygons inside the lake, each with a unique id in ``id_field``."""

    id_field: str = "aoi_id"


class SubbasinLayer(LayerRef):
    """Sub-basin network: one polygon per sub-basin with its id and its downstream id.

    ``lake_id``: the id used in ``downstream_field`` for "drains into the lake" (if any).
    ``direct_inflows``: ids listed by hand as draining directly into the lake (optional).
    ``outside_ids``: downstream ids that mean "drains out of the area, not into the lake",
    compared case-insensitively (default ``0, -1, NONE, NAN, OUTSIDE``: common practice, the
    same as :data:`lakefeed.geometry.network.DEFAULT_OUTSIDE_IDS`). Empty downstream values
    always mean that. Any other downstream id that is not a sub-basin id (nor the lake's) is
    a dangling reference (an error).
    ``outlet_field``: optional field with outlet point WKT; else outlets are not used.
    """

    id_field: str = "subbasin_id"
    downstream_field: str = "downstream_id"
    lake_id: str | None = None
    direct_inflows: list[str] | None = None
    outside_ids: list[str] = Field(default_factory=lambda: ["0", "-1", "NONE", "NAN", "OUTSIDE"])


class ZoneOptions(StrictModel):
    """Which zones get weather drivers and how partial grid coverage is treated."""

    lake_surface: bool = True
    aois: bool = True
    catchment: bool = True
    subbasins: bool = False
    allow_partial_coverage: bool = False


class SensorConfig(StrictModel):
    """One satellite sensor (a user-defined label) and how its scenes are screened.

    Units: ``shore_buffer_m`` metres; ``pixel_size_m`` metres; ``uncertainty`` is the relative
    (fraction) 1-sigma uncertainty of a single AOI value when the scene has no uncertainty band.
    """

    pixel_size_m: float = Field(gt=0)
    shore_buffer_m: float | None = Field(default=None, ge=0)
    uncertainty: float = Field(default=0.3, gt=0)
    reference: bool = False
    bad_quality_bits: list[int] = Field(default_factory=list)
    bad_quality_values: list[int] = Field(default_factory=list)

    @field_validator("bad_quality_bits")
    @classmethod
    def _bits(cls, v: list[int]) -> list[int]:
        bad = [b for b in v if not 0 <= b < MAX_QUALITY_BITS]
        if bad:
            raise ValueError(
                f"quality bits are numbered 0 (lowest) to {MAX_QUALITY_BITS - 1}; got {bad} (the band's own bit "
                "depth is checked by `lakefeed check` when the scenes are opened)"
            )
        return v

    @property
    def effective_shore_buffer_m(self) -> float:
        """Inward shoreline buffer in metres: configured, else one pixel of the sensor."""
        return self.pixel_size_m if self.shore_buffer_m is None else self.shore_buffer_m


class TargetOptions(StrictModel):
    """Acceptance and screening of chlorophyll-a scene statistics (units: mg m-3 for values)."""

    min_valid_fraction: float = Field(default=0.5, ge=0, le=1)
    min_valid_pixels: int = Field(default=5, ge=1)
    max_cv: float = Field(default=1.0, gt=0)
    valid_range: tuple[float, float] = (0.01, 1000.0)
    outlier_window_days: int = Field(default=31, ge=3)
    #: Widest outlier window (days): a window holding fewer than 3 other values is widened up to it.
    outlier_max_window_days: int = Field(default=91, ge=3)
    outlier_threshold: float = Field(default=3.5, gt=0)
    matchup_window_days: int = Field(default=0, ge=0)
    min_matchups: int = Field(default=10, ge=3)
    bias_model: Literal["linear", "ratio"] = "ratio"

    @field_validator("valid_range")
    @classmethod
    def _range(cls, v: tuple[float, float]) -> tuple[float, float]:
        lo, hi = v
        if not (math.isfinite(lo) and math.isfinite(hi)) or lo < 0 or lo >= hi:
            raise ValueError(
                f"[low, high] in mg m-3 with 0 <= low < high; got {[lo, hi]}"
                + (" (reversed: every value would be rejected; swap them)" if lo > hi else "")
            )
        return v

    @model_validator(mode="after")
    def _widest_window(self) -> TargetOptions:
        if self.outlier_max_window_days < self.outlier_window_days:
            raise ValueError(
                f"outlier_max_window_days ({self.outlier_max_window_days}) must be at least outlier_window_days "
                f"({self.outlier_window_days}); raise it or lower outlier_window_days"
            )
        return self


class Threshold(StrictModel):
    """A named chlorophyll-a level (mg m-3) whose exceedance is flagged in ``target_daily``.

    Such flags inform; decisions on bathing and drinking water follow local regulations and
    the responsible authority.
    """

    name: str
    value: float = Field(gt=0)
    description: str = ""

    @field_validator("name")
    @classmethod
    def _slug(cls, v: str) -> str:
        if not re.fullmatch(r"[a-z0-9_]+", v):
            raise ValueError(f"threshold name {v!r} must be lower-case letters, digits, '_'")
        return v


Statistic = Literal["mean", "sum", "min", "max"]


@dataclass(frozen=True)
class WindowDefaults:
    """Defaults of the antecedent-window options, shared by :class:`FeatureOptions` and the features core.

    ``windows``: lengths in days; ``include_target_day``: whether a window ends on the target day;
    ``max_missing_fraction``: largest fraction of missing days a window may have (0..1).
    """

    windows: tuple[int, ...] = (1, 3, 5, 7, 10, 15, 30)
    include_target_day: bool = False
    max_missing_fraction: float = 0.2


#: The one source of the window defaults (:class:`lakefeed.features.window_plan.WindowPlan` and the config).
WINDOW_DEFAULTS = WindowDefaults()


class FeatureOptions(StrictModel):
    """Antecedent windows, leads, folds. Window lengths and embargo are in days."""

    windows: list[int] = Field(default_factory=lambda: list(WINDOW_DEFAULTS.windows))
    include_target_day: bool = WINDOW_DEFAULTS.include_target_day
    max_missing_fraction: float = Field(default=WINDOW_DEFAULTS.max_missing_fraction, ge=0, le=1)
    drivers: dict[str, list[Statistic]] | None = None
    leads: list[int] = Field(default_factory=lambda: [0])
    forecast_leads: list[int] = Field(default_factory=lambda: [1, 3, 5, 10])
    driver_zone: str = "lake"
    folds: int = Field(default=5, ge=2)
    fold_kind: Literal["blocked", "random"] = "blocked"
    #: Length of the calendar blocks of blocked folds (months, counted from January).
    fold_block_months: int = Field(default=6, ge=1, le=120)
    #: Days after each block boundary whose rows are in no fold; None: the longest antecedent window.
    embargo_days: int | None = Field(default=None, ge=0)
    min_observations: int = Field(default=140, ge=1)

    @property
    def effective_embargo_days(self) -> int:
        """The embargo in days: ``embargo_days``, or the longest antecedent window when it is not set."""
        return max(self.windows) if self.embargo_days is None else self.embargo_days

    @field_validator("windows")
    @classmethod
    def _positive_windows(cls, v: list[int]) -> list[int]:
        bad = [w for w in v if w <= 0]
        if bad:
            raise ValueError(f"window lengths must be positive whole days; got {bad}")
        if not v:
            raise ValueError("at least one window length is needed")
        return sorted(set(v))

    @field_validator("leads")
    @classmethod
    def _non_negative(cls, v: list[int]) -> list[int]:
        bad = [h for h in v if h < 0]
        if bad:
            raise ValueError(f"lead times must be >= 0 days (0: the target day itself); got {bad}")
        if not v:
            raise ValueError("at least one lead time is needed (0: the target day itself)")
        return sorted(set(v))

    @field_validator("forecast_leads")
    @classmethod
    def _positive(cls, v: list[int]) -> list[int]:
        bad = [h for h in v if h <= 0]
        if bad:
            raise ValueError(f"forecast lead times must be >= 1 day (lead 1: the first day after the issue); got {bad}")
        return sorted(set(v))

    def record_problems(self, first: date, last: date, *, record: str = "the weather record") -> list[str]:
        """Windows and leads longer than the driver record ``first``..``last`` (dates, inclusive): one text each.

        A row needs its longest window plus its lead within the record, so a longer one leaves its feature
        columns empty for every row. Used by ``lakefeed check`` (the weather files' period) and at the start
        of the features stage (the stored drivers), with the same words.
        """
        days = (last - first).days + 1
        span = f"{record} {first:%Y-%m-%d}..{last:%Y-%m-%d} has {days} day(s)"
        out = []
        longest = max(self.windows)
        for key, leads in (("leads", self.leads), ("forecast_leads", self.forecast_leads)):
            too_long = [h for h in leads if longest + h >= days]
            if too_long:
                out.append(
                    f"features.windows/features.{key}: the longest window ({longest} d) plus lead(s) {too_long} d "
                    f"do not fit in the record: {span}; no row could have that window complete. Use shorter "
                    "windows or leads, or a longer record"
                )
        return out


class SkillOptions(StrictModel):
    """Feature screening and baseline skill (``feature_screening``, ``baseline_skill``; :mod:`lakefeed.verify`)."""

    #: |Spearman rho| at or above which features share a cluster (one representative kept).
    cluster_threshold: float = Field(default=0.95, gt=0, le=1)
    #: |Spearman rho| with the target above which a feature is flagged ``suspect_leak``.
    leak_threshold: float = Field(default=0.98, gt=0, le=1)
    #: Largest fraction of missing values over the target dates of a feature kept.
    max_missing_fraction: float = Field(default=0.5, ge=0, le=1)
    #: Length (days) of the circular window smoothing the day-of-year climatology.
    climatology_window_days: int = Field(default=31, ge=1, le=365)


class LakeConfig(StrictModel):
    """One lake or reservoir. Loaded from ``config/lake-<id>.yaml``."""

    id: str
    name: str
    timezone: str
    #: Elevation of the lake surface in metres above sea level (clear-sky radiation, FAO-56 Eq. 37);
    #: None means 0 m (sea level).
    elevation_m: float | None = Field(default=None, ge=-500, le=9000)
    sources: Path
    lake: LayerRef
    aois: AoiLayer
    subbasins: SubbasinLayer
    zones: ZoneOptions = Field(default_factory=ZoneOptions)
    sensors: dict[str, SensorConfig] = Field(default_factory=dict)
    target: TargetOptions = Field(default_factory=TargetOptions)
    thresholds: list[Threshold] = Field(default_factory=list)
    features: FeatureOptions = Field(default_factory=FeatureOptions)
    skill: SkillOptions = Field(default_factory=SkillOptions)

    @field_validator("id")
    @classmethod
    def _slug(cls, v: str) -> str:
        if not SLUG.fullmatch(v):
            raise ValueError(
                f"lake id {v!r} must be a plain slug: lower-case letters, digits, '-' or '_' "
                "(no slashes, dots or spaces), starting with a letter or digit"
            )
        return v

    @field_validator("timezone")
    @classmethod
    def _tz(cls, v: str) -> str:
        try:
            ZoneInfo(v)
        except (ZoneInfoNotFoundError, ValueError) as err:
            raise ValueError(f"unknown time zone {v!r}; {tz_hint(v)}") from err
        return v

    @model_validator(mode="after")
    def _one_reference(self) -> LakeConfig:
        refs = [k for k, s in self.sensors.items() if s.reference]
        if len(refs) > 1:
            raise ValueError(f"only one sensor may be the reference; got {refs}")
        return self

    @property
    def reference_sensor(self) -> str | None:
        """Label of the reference sensor, or None."""
        refs = [k for k, s in self.sensors.items() if s.reference]
        return refs[0] if refs else None


__all__ = [
    "AoiLayer",
    "FeatureOptions",
    "LakeConfig",
    "SensorConfig",
    "SkillOptions",
    "SubbasinLayer",
    "TargetOptions",
    "Threshold",
    "ZoneOptions",
]
_ = Path
