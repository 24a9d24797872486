"""Value rules of a weather grid applied to what the weather path computed (shared with ``lakefeed check``).

Takes a grid, its zone weights and, per converted field of
:func:`lakefeed.stages.weather.hourly_drivers`, the lazy field, its computed zonal result (with
``cell_min``/``cell_max`` of the weighed cells), the conversion to canonical units and the file's
variable name. Applies :func:`lakefeed.sources.grid_rules.check_bounds` (physical bounds after
conversion, naming file, time and cell) and :func:`~lakefeed.sources.grid_rules.check_any_value` (a
variable without any value over the weighed cells in a whole file). Only the one offending time step
is read again, to name its cell. Must not: hold science, write anything.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import TYPE_CHECKING, Any

import numpy as np
import xarray as xr

from lakefeed.sources.grid_roles import decode, grid_parts
from lakefeed.sources.grid_rules import check_any_value, check_bounds

if TYPE_CHECKING:
    from lakefeed.geometry.weights import ZoneWeights
    from lakefeed.sources.grids import Grid

__all__ = ["check_values"]

Item = tuple[xr.DataArray, xr.Dataset, Callable[[Any], Any], str]


def _locator(grid: Grid, weights: ZoneWeights, field: xr.DataArray, conv: Callable[[Any], Any]) -> Any:
    cells = weights.cells()

    def locate(i: int, which: str) -> tuple[float, float, float]:
        step = field.isel(time=i)
        step = decode(step) if any(k in step.attrs for k in ("scale_factor", "add_offset", "_FillValue")) else step
        vals = np.asarray(conv(np.asarray(step.values, dtype=float).ravel()[cells]), dtype=float)
        k = int(np.nanargmin(vals) if which == "min" else np.nanargmax(vals))
        r, c = divmod(int(cells[k]), weights.shape[1])
        return float(grid.lat[r]), float(grid.lon[c]), float(vals[k])

    return locate


def check_values(
    grid: Grid, weights: ZoneWeights, items: Mapping[str, Item], *, step_hours: float, section: str = "weather"
) -> None:
    """Raise :class:`~lakefeed.exceptions.SourceError` for the first field breaking a value rule.

    ``items``: field -> (lazy field as zonal-averaged, its computed zonal Dataset, conversion of values
    to canonical units, the file's variable name).
    """
    parts = grid_parts(grid)
    n_cells = [int(weights.cells(z).size) for z in weights.zones]
    for field, (data, zonal, conv, name) in items.items():
        time = np.asarray(zonal["cell_min"]["time"].values)
        lows = np.asarray(conv(np.asarray(zonal["cell_min"].values, dtype=float)), dtype=float)
        highs = np.asarray(conv(np.asarray(zonal["cell_max"].values, dtype=float)), dtype=float)
        check_bounds(
            field,
            lows,
            highs,
            time,
            step_hours=step_hours,
            parts=parts,
            label=grid.label,
            source_name=name,
            locate=_locator(grid, weights, data, conv),
            section=section,
        )
        valid = np.asarray((zonal["valid_fraction"] > 0).values)
        check_any_value(
            field,
            valid,
            time,
            zones=[str(z) for z in weights.zones],
            n_cells=n_cells,
            parts=parts,
            label=grid.label,
            source_name=name,
            section=section,
        )
