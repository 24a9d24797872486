"""The weather grid's cells and values as the build sees them, checked cheaply.

Takes an opened :class:`~lakefeed.sources.grids.Grid`, the weather source config and the lake's zones
as the weather stage builds them (:func:`build_zones`). Weighs the cells with the stage's own function
(:func:`lakefeed.stages.weather.get_weights`, no cache), so the cells counted here are the cells the
build weighs, and runs the stage's own reading path (:func:`lakefeed.stages.weather.hourly_drivers`:
units file by file, de-accumulation, physical bounds, variables without values) on a sample of every
file's time steps: the first and last :data:`SAMPLE_STEPS` of each. A sampled file that shows no value
is read whole before it is reported, so the check and the build name the same problem. A value out of
bounds between the sampled steps is found by the build only. Must not: write anything.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from lakefeed.checks._result import CheckResult, failed, passed, warned
from lakefeed.exceptions import LakefeedError
from lakefeed.sources.grid_rules import NoValueError

if TYPE_CHECKING:
    import geopandas as gpd

    from lakefeed.config import WeatherSource
    from lakefeed.geometry.weights import ZoneWeights
    from lakefeed.sources.grids import Grid

__all__ = ["SAMPLE_STEPS", "value_results", "zone_cell_results"]

#: Time steps read at the start and at the end of every file.
SAMPLE_STEPS = 24


def zone_cell_results(
    grid: Grid, weights: ZoneWeights, variable: str, *, section: str = "weather"
) -> list[CheckResult]:
    """Per zone: the cells the build weighs, and how many hold no data (NaN) at the first step.

    A zone partly in no-data cells is a warning (its ``valid_fraction`` drops); wholly, a warning too
    here: whether that holds for a whole file is the value rule's to say (:func:`value_results`).
    """
    name = f"{section} data over zones"
    from lakefeed.sources.grid_roles import decode

    first = decode(grid.dataset[variable].isel(time=0))
    flat = np.asarray(first.values, dtype=float).ravel()
    out = []
    for zone in weights.zones:
        cells = weights.cells(zone)
        missing = int(np.isnan(flat[cells]).sum())
        what = f"{zone}: {missing} of the {cells.size} cells the build weighs are no-data (NaN) in {variable!r}"
        if missing:
            out.append(warned(name, f"{what} at the first step", f"the {zone}'s valid fraction will be below 1"))
        else:
            out.append(passed(name, f"{zone}: all {cells.size} cells the build weighs hold data at the first step"))
    return out


def _sample(time: np.ndarray, grid: Grid, full: Sequence[int]) -> np.ndarray:
    """Indices of the first and last sampled steps of every file (all steps of the files in ``full``)."""
    t = np.asarray(time)
    keep = np.zeros(t.size, bool)
    for k, part in enumerate(grid.parts):
        idx = np.flatnonzero((t >= part.first) & (t <= part.last))
        if k in full:
            keep[idx] = True
        else:
            keep[idx[:SAMPLE_STEPS]] = True
            keep[idx[-SAMPLE_STEPS:]] = True
    return np.flatnonzero(keep)


def value_results(
    grid: Grid,
    src: WeatherSource,
    zones: gpd.GeoDataFrame,
    *,
    allow_partial_coverage: bool = False,
    section: str = "weather",
) -> list[CheckResult]:
    """The cells the build weighs per zone, and the build's value rules on a sample of every file."""
    from lakefeed.sources.grid_roles import find_variable
    from lakefeed.stages.weather import get_weights, hourly_drivers

    try:
        weights, _ = get_weights(zones, grid, allow_partial_coverage=allow_partial_coverage)
    except LakefeedError as err:
        return [failed(f"{section} grid extent", str(err))]
    temp = find_variable(grid.dataset, "air_temperature", mapping=src.variables, where=grid.label)
    out = zone_cell_results(grid, weights, temp, section=section)
    time = grid.dataset["time"].values
    full: list[int] = []
    while True:
        sub = dataclasses.replace(grid, dataset=grid.dataset.isel(time=_sample(time, grid, full)))
        try:
            hourly_drivers(sub, weights, source=src)
        except NoValueError as err:  # seen in the sample: read that file whole before saying so
            k = next((i for i, p in enumerate(grid.parts) if p is err.part), -1)
            if k < 0 or k in full:
                return [*out, failed(f"{section} values", str(err))]
            full.append(k)
            continue
        except LakefeedError as err:
            return [*out, failed(f"{section} values", str(err))]
        break
    n = sub.dataset.sizes["time"]
    out.append(
        passed(
            f"{section} values",
            f"{n} of {time.size} time steps ({len(grid.parts)} file(s), first and last {SAMPLE_STEPS} of each) "
            "within physical bounds after unit conversion, every variable with values",
        )
    )
    return out
