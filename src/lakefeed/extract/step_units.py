"""Amounts per time step in the units of the daily drivers: precipitation in mm per step, shortwave
radiation as a mean flux in W m-2 (pure; no I/O).

Takes: a grid variable's values, its unit text and the step length in seconds. Gives: the converted values.
Water density 1000 kg m-3 turns a mass per area into a depth (common practice).
"""

from __future__ import annotations

import xarray as xr

from lakefeed.exceptions import SourceError
from lakefeed.units import parse_unit, ureg

__all__ = ["WATER_DENSITY_KG_M3", "to_mm_per_step", "to_watts"]

#: Density of liquid water (kg m-3) used to turn kg m-2 of precipitation into mm.
WATER_DENSITY_KG_M3 = 1000.0


def to_mm_per_step(values: xr.DataArray, unit: str, step_s: float) -> xr.DataArray:
    """Precipitation per time step in mm from an amount (m, kg m-2) or a flux (m s-1, kg m-2 s-1) over
    ``step_s`` seconds."""
    q = ureg.Quantity(1.0, parse_unit(unit))
    if q.check("[mass] / [length] ** 2") or q.check("[mass] / [length] ** 2 / [time]"):
        q = q / ureg.Quantity(WATER_DENSITY_KG_M3, "kg m-3")
    if q.check("[length] / [time]"):
        q = q * ureg.Quantity(step_s, "s")
    if not q.check("[length]"):
        raise SourceError(f"precipitation unit {unit!r} is not an amount, depth or flux; declare weather.units")
    return values * float(q.to("mm").magnitude)


def to_watts(values: xr.DataArray, unit: str, step_s: float) -> xr.DataArray:
    """Mean shortwave flux in W m-2 from an energy per step (J m-2 over ``step_s`` seconds) or a flux."""
    q = ureg.Quantity(1.0, parse_unit(unit))
    if q.check("[mass] / [time] ** 2"):  # J m-2 per step
        q = q / ureg.Quantity(step_s, "s")
    if not q.check("[mass] / [time] ** 3"):
        raise SourceError(f"shortwave unit {unit!r} is neither J m-2 nor W m-2; declare weather.units")
    return values * float(q.to("W m-2").magnitude)
