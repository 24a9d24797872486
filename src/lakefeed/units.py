"""Unit handling: one pint registry (with CF unit parsing) for the whole package.

Every conversion in lakefeed goes through :func:`convert` or :func:`factor`; no bare
conversion factors live elsewhere in the code. ``CANONICAL`` lists the output unit of each
canonical quantity (docs/architecture.md, "Units").
"""

from __future__ import annotations

import logging
from functools import lru_cache
from typing import Any

import numpy as np
import pint

from lakefeed.exceptions import SourceError

# cf_xarray's registry redefines a few pint units on load; pint logs each one as a warning, which
# would bury a run's own messages in every log.
logging.getLogger("pint.util").setLevel(logging.ERROR)

try:  # cf-xarray ships a pint registry that understands CF/UDUNITS strings ("kg m-2 s-1").
    from cf_xarray.units import units as _cf_units

    ureg: pint.UnitRegistry = _cf_units
except Exception:  # pragma: no cover - cf_xarray is a hard dependency; keep a plain fallback
    ureg = pint.UnitRegistry()

__all__ = ["CANONICAL", "convert", "factor", "parse_unit", "ureg"]

#: Canonical output unit per quantity (docs/architecture.md, "Units").
CANONICAL: dict[str, str] = {
    "air_temperature": "degC",
    "dewpoint": "degC",
    "shortwave_radiation": "W m-2",
    "wind_speed": "m s-1",
    "precipitation": "mm d-1",
    "vapour_pressure": "kPa",
    "relative_humidity": "%",
    "discharge": "m3 s-1",
    "concentration": "mg L-1",
    "load": "kg d-1",
    "chlorophyll_a": "mg m-3",
}

_ALIASES = {
    "degrees_C": "degC",
    "degrees_Celsius": "degC",
    "celsius": "degC",
    "deg_C": "degC",
    "degree_Celsius": "degC",
    "ug L-1": "microgram / liter",
    "ug/L": "microgram / liter",
    "ug l-1": "microgram / liter",
    "mg/L": "milligram / liter",
    "mg l-1": "milligram / liter",
    "mg m-3": "milligram / meter ** 3",
    "mmol m-3": "millimole / meter ** 3",
    "%": "percent",
    "percent": "percent",
    "1": "dimensionless",
    "": "dimensionless",
    "mm d-1": "millimeter / day",
    "mm/day": "millimeter / day",
    "kg d-1": "kilogram / day",
    "kg/day": "kilogram / day",
    "m3 s-1": "meter ** 3 / second",
    "m3/s": "meter ** 3 / second",
}


@lru_cache(maxsize=256)
def parse_unit(text: str | None) -> pint.Unit:
    """Parse a CF/UDUNITS or common unit string into a pint unit.

    Raises :class:`SourceError` naming the string when it cannot be parsed.
    """
    if text is None:
        raise SourceError("unit is missing; declare it in the file's 'units' attribute or the config")
    key = text.strip()
    key = _ALIASES.get(key, key)
    try:
        return ureg.Unit(key)
    except Exception:
        try:
            return ureg.parse_units(key)
        except Exception as err:
            raise SourceError(
                f"unit {text!r} is not understood; use a UDUNITS/CF unit string such as "
                "'K', 'degC', 'm s-1', 'kg m-2' or 'mg L-1'"
            ) from err


def factor(from_unit: str, to_unit: str) -> float:
    """Multiplicative factor from ``from_unit`` to ``to_unit`` (not for offset units like degC)."""
    src, dst = parse_unit(from_unit), parse_unit(to_unit)
    try:
        return float(ureg.Quantity(1.0, src).to(dst).magnitude)
    except pint.DimensionalityError as err:
        raise SourceError(f"cannot convert {from_unit!r} to {to_unit!r}: {err}") from err


def convert(
    values: Any,
    from_unit: str,
    to_unit: str,
    *,
    molar_mass_g_per_mol: float | None = None,
    water_equivalent: bool = False,
) -> Any:
    """Convert ``values`` (scalar, numpy, dask or xarray) from one unit to another.

    Offset units (K to degC) are handled. Lazy inputs stay lazy: the conversion is
    computed on a scalar and applied as ``a * x + b``. For molar concentrations
    (``mmol m-3``) to mass concentrations give ``molar_mass_g_per_mol``. With
    ``water_equivalent=True`` a mass of water per area (``kg m-2``, or a flux
    ``kg m-2 s-1``) converts to a depth (``mm``, ``mm d-1``) through the density of
    liquid water, 1000 kg m-3 (common practice for precipitation).
    """
    src, dst = parse_unit(from_unit), parse_unit(to_unit)
    if src == dst:
        return values
    if water_equivalent and src.dimensionality != dst.dimensionality:
        density = ureg.Quantity(1000.0, "kg m-3")
        try:
            a = float((ureg.Quantity(1.0, src) / density).to(dst).magnitude)
        except pint.DimensionalityError as err:
            raise SourceError(f"cannot convert {from_unit!r} to {to_unit!r} as liquid water equivalent") from err
        return values * a
    if molar_mass_g_per_mol is not None and src.dimensionality != dst.dimensionality:
        mm = ureg.Quantity(molar_mass_g_per_mol, "g/mol")
        q0 = (ureg.Quantity(0.0, src) * mm).to(dst).magnitude
        q1 = (ureg.Quantity(1.0, src) * mm).to(dst).magnitude
    else:
        try:
            q0 = ureg.Quantity(0.0, src).to(dst).magnitude
            q1 = ureg.Quantity(1.0, src).to(dst).magnitude
        except pint.DimensionalityError as err:
            raise SourceError(
                f"cannot convert {from_unit!r} to {to_unit!r} (different dimensions); "
                "check the 'units' attribute of the input or the unit declared in the config"
            ) from err
    a = float(q1 - q0)
    b = float(q0)
    if b == 0.0:
        return values * a if a != 1.0 else values
    return values * a + b if a != 1.0 else values + b


def is_convertible(from_unit: str | None, to_unit: str) -> bool:
    """True when ``from_unit`` parses and converts to ``to_unit``."""
    try:
        convert(np.float64(1.0), from_unit or "", to_unit)
    except SourceError:
        return False
    return from_unit is not None
