"""Configuration values checked against the data they apply to: what pydantic cannot know from the file alone.

Takes the lake configuration, the sources' periods and the scene source; returns check lines. Windows and
leads are compared with the weather record (the same words as the features stage uses when it starts:
:meth:`lakefeed.config.lake.FeatureOptions.record_problems`); each sensor's ``bad_quality_bits`` with the bit
depth of its quality band (one scene of the sensor is opened, metadata only). Never writes anything.
"""

from __future__ import annotations

from lakefeed.checks._open import Period
from lakefeed.checks._result import CheckResult, failed, passed, skipped
from lakefeed.config.lake import LakeConfig
from lakefeed.config.sources import SceneSource

__all__ = ["check_quality_bits", "check_record_length"]


def check_record_length(lake: LakeConfig, weather: Period | None) -> list[CheckResult]:
    """One line: do the feature windows and leads fit in the weather record (none without its period)?"""
    if weather is None:
        return []
    problems = lake.features.record_problems(weather.start.date(), weather.end.date())
    if problems:
        return [
            failed("feature windows", p, "fix features.windows / features.leads in the lake config") for p in problems
        ]
    longest = max(lake.features.windows)
    return [
        passed("feature windows", f"longest window {longest} d and the leads fit in the weather record ({weather})")
    ]


def _band_bits(href: str) -> tuple[int | None, str]:
    """Bit depth of band 1 of a raster (None for a floating-point band) and its data type name."""
    import numpy as np
    import rasterio

    with rasterio.open(href) as src:
        kind = np.dtype(src.dtypes[0])
    return (kind.itemsize * 8 if kind.kind in "iu" else None), kind.name


def check_quality_bits(src: SceneSource | None, lake: LakeConfig) -> list[CheckResult]:
    """Per sensor with ``bad_quality_bits``: are the bits within its quality band's bit depth?

    Opens the quality band of the first scene of each such sensor (metadata only); no line when no sensor
    declares bits or the scenes have no quality band.
    """
    wanted = {name: s.bad_quality_bits for name, s in lake.sensors.items() if s.bad_quality_bits}
    if src is None or not wanted or (src.quality_asset is None and src.folder is None):
        return []
    from lakefeed.sources.scenes import list_scenes

    scenes = list_scenes(src)
    out: list[CheckResult] = []
    for name, bits in wanted.items():
        rows = scenes[(scenes["sensor"] == name) & scenes["quality_href"].notna()]
        if rows.empty:
            out.append(skipped("quality bits", f"sensor {name}: no scene with a quality band"))
            continue
        href = str(rows["quality_href"].iloc[0])
        depth, kind = _band_bits(href)
        key = f"sensors.{name}.bad_quality_bits"
        if depth is None:
            out.append(
                failed(
                    "quality bits",
                    f"{key}: the quality band of {href} is {kind}, not an integer band: bits cannot be tested",
                    "use bad_quality_values or an integer band",
                )
            )
        elif bad := [b for b in bits if b >= depth]:
            out.append(
                failed(
                    "quality bits",
                    f"{key}: bit(s) {bad} outside the {depth}-bit quality band ({kind}) of "
                    f"{href}: they would never flag a pixel",
                    f"use bits 0..{depth - 1}",
                )
            )
        else:
            out.append(passed("quality bits", f"sensor {name}: bits {bits} within the {depth}-bit quality band"))
    return out
