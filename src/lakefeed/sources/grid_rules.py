"""Rules a weather or forecast grid must satisfy: one module for ``lakefeed check`` and the build.

Takes a grid's per-file metadata (:class:`GridPart`: each file's own variable attributes and time
range, as :func:`lakefeed.sources.grids.open_grid` reads them), the config's ``units`` and
``accumulation`` sections and, for the value rules, per-step extremes of a converted field over the
cells the lake's zones weigh. Returns problem messages (units, accumulation, gaps) or raises
:class:`~lakefeed.exceptions.SourceError` (values outside physical bounds, a variable without any
value). The build (:func:`lakefeed.sources.grids.select_roles`,
:func:`lakefeed.stages.weather.hourly_drivers`) and the check (:mod:`lakefeed.checks.grids`) call the
same functions, so a grid the check passes is not refused by the build for these reasons.

Physical bounds (after conversion to canonical units): air and dew-point temperature -90..60 degC
(the lowest and highest air temperatures on record are about -89 and +57 degC, WMO world weather
extremes, from memory); shortwave radiation at most the top-of-atmosphere irradiance at perihelion,
1361 W m-2 (total solar irradiance, Kopp & Lean 2011, from memory) x 1.033 (FAO-56 Eq. 23,
inverse relative Earth-Sun distance), and not below -1 W m-2 (rounding; common practice);
precipitation not below -0.01 mm per step (rounding; common practice) and at most 400 mm per hour
(the highest hourly totals on record are about 305 mm, from memory); wind speed at most 150 m s-1
(common practice).

Must not: open files, compute dask arrays, convert values.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from lakefeed.exceptions import SourceError

__all__ = [
    "AMOUNT_UNITS",
    "BOUNDS",
    "ROLE_UNITS",
    "TOA_IRRADIANCE_W_M2",
    "Bound",
    "GridPart",
    "NoValueError",
    "check_any_value",
    "check_bounds",
    "key_problems",
    "part_at",
    "resolve_unit",
    "role_problems",
    "time_gaps",
]

#: Units each weather role must convert to (what the build can convert it to).
ROLE_UNITS: dict[str, tuple[str, ...]] = {
    "air_temperature": ("degC",),
    "dewpoint_temperature": ("degC",),
    "eastward_wind": ("m s-1",),
    "northward_wind": ("m s-1",),
    "shortwave_radiation": ("W m-2", "J m-2"),
    "precipitation": ("mm", "kg m-2", "mm s-1", "kg m-2 s-1"),
}
#: Of those, the amounts (accumulated over a step or since a reset): they need ``accumulation.kind``.
AMOUNT_UNITS = frozenset({"J m-2", "mm", "kg m-2"})
_KIND = {
    "air_temperature": "temperature",
    "dewpoint_temperature": "temperature",
    "eastward_wind": "speed",
    "northward_wind": "speed",
    "shortwave_radiation": "radiation (flux or amount)",
    "precipitation": "precipitation (depth, mass per area, or their rates)",
}

#: Total solar irradiance 1361 W m-2 (Kopp & Lean 2011, from memory) at perihelion (x 1.033, FAO-56 Eq. 23).
TOA_IRRADIANCE_W_M2 = 1361.0 * 1.033


@dataclass(frozen=True)
class Bound:
    """Plausible range of a converted field (``per_hour``: the bounds scale with the step length)."""

    lo: float | None
    hi: float | None
    unit: str
    per_hour: bool = False


#: Bounds per converted field of :func:`lakefeed.stages.weather.hourly_drivers` (see the module docstring).
BOUNDS: dict[str, Bound] = {
    "air_temperature": Bound(-90.0, 60.0, "degC"),
    "dewpoint": Bound(-90.0, 60.0, "degC"),
    "shortwave_radiation": Bound(-1.0, TOA_IRRADIANCE_W_M2, "W m-2"),
    "precipitation": Bound(-0.01, 400.0, "mm", per_hour=True),
    "wind_speed": Bound(None, 150.0, "m s-1"),
}


class NoValueError(SourceError):
    """A variable holds no value at any weighed cell of a whole file (``part``: that file, or None)."""

    def __init__(self, message: str, part: GridPart | None = None) -> None:
        super().__init__(message)
        self.part = part


@dataclass(frozen=True)
class GridPart:
    """One file of a grid: its own variables' attributes (as stored) and its first and last time stamps."""

    path: Path
    first: np.datetime64
    last: np.datetime64
    attrs: Mapping[str, Mapping[str, Any]]


def part_at(parts: Sequence[GridPart], time: Any) -> GridPart | None:
    """The file holding time stamp ``time`` (None when unknown)."""
    t = np.datetime64(pd.Timestamp(time).to_datetime64())
    return next((p for p in parts if p.first <= t <= p.last), None)


def resolve_unit(
    role: str, name: str, attrs: Mapping[str, Any], units: Mapping[str, str], section: str
) -> tuple[str | None, str]:
    """(unit, where it comes from): the config by role, else by the file's variable name, else the attribute."""
    for key in (role, name):
        if key in units:
            return units[key], f"{section}.units.{key}"
    unit = attrs.get("units")
    return (str(unit) if unit is not None and str(unit).strip() else None), f"units attribute of {name!r}"


def _parses(unit: str) -> bool:
    from lakefeed.units import parse_unit

    try:
        parse_unit(unit)
    except SourceError:
        return False
    return True


def _target(role: str, unit: str) -> str | None:
    from lakefeed.units import is_convertible

    return next((t for t in ROLE_UNITS.get(role, ()) if is_convertible(unit, t)), None)


def role_problems(
    role: str,
    name: str,
    parts: Sequence[GridPart],
    *,
    units: Mapping[str, str],
    accumulation: Mapping[str, Any] | None,
    section: str = "weather",
) -> tuple[list[tuple[str, str]], list[str | None]]:
    """Problems (what, fix) of one role's variable in every file, and each file's unit (None: it has none).

    A file whose unit is missing, cannot be parsed or is not a unit of the role's quantity (a temperature
    in metres) is a problem naming the file, the variable, the unit and where it comes from; files with
    the same problem are named together. An amount (J m-2, mm, kg m-2) needs ``accumulation.kind``
    (not checked when ``accumulation`` is None: the caller de-accumulated already).
    """
    found: dict[tuple[str, str], list[Path]] = {}
    each: list[str | None] = []
    for part in parts:
        unit, where = resolve_unit(role, name, part.attrs.get(name, {}), units, section)
        each.append(unit)
        if part.attrs and name not in part.attrs:
            problem = (
                f"variable {name!r} ({role}) is missing from the file",
                "every file of a source needs the same variables: download the file again",
            )
        elif unit is None:
            problem = (
                f"variable {name!r} ({role}) has no units",
                f"declare them under {section}.units.{role} or add a units attribute to the file",
            )
        elif not _parses(unit):
            problem = (
                f"variable {name!r} ({role}) has units {unit!r} ({where}), which is not understood as a unit",
                f"use a UDUNITS/CF unit string (e.g. 'K', 'degC', 'm s-1', 'J m-2') in the file or under "
                f"{section}.units.{role}",
            )
        elif _target(role, unit) is None:
            problem = (
                f"variable {name!r} ({role}) has units {unit!r} ({where}), which is not a {_KIND.get(role, role)} "
                f"unit (convertible to {' or '.join(map(repr, ROLE_UNITS.get(role, ())))})",
                f"fix the units attribute or declare the right unit under {section}.units.{role}",
            )
        elif accumulation is not None:
            acc = accumulation.get(role) or accumulation.get(name)
            kind = None if acc is None else getattr(acc, "kind", None)
            if _target(role, unit) not in AMOUNT_UNITS or kind not in (None, "none"):
                continue
            problem = (
                f"variable {name!r} ({role}) is an amount ({unit}) but {section}.accumulation.{role}.kind is "
                f"{'not set' if kind is None else 'none'}",
                f"set {section}.accumulation.{role}.kind to since_reset or per_step",
            )
        else:
            continue
        found.setdefault(problem, []).append(part.path)
    out = []
    for (what, fix), paths in found.items():
        more = f" (and {len(paths) - 1} other file(s) of {len(parts)})" if len(paths) > 1 else ""
        out.append((f"{section} grid {paths[0]}{more}: {what}", fix))
    return out, each


def key_problems(
    ds: Any,
    *,
    variables: Mapping[str, str],
    units: Mapping[str, str],
    accumulation: Mapping[str, Any] | None,
    section: str = "weather",
) -> list[tuple[str, str]]:
    """Config keys that name neither a role nor (for ``units``/``accumulation``) a variable of the grid ``ds``."""
    import difflib

    from lakefeed.config.sources import WEATHER_ROLES

    out = []
    for key, mapping in (("variables", variables), ("units", units), ("accumulation", accumulation or {})):
        for role in mapping:
            if role not in WEATHER_ROLES and (key == "variables" or role not in ds.data_vars):
                guess = difflib.get_close_matches(role, list(WEATHER_ROLES), n=1)
                out.append(
                    (
                        f"{section}.{key}.{role}: unknown role" + (f"; did you mean {guess[0]!r}?" if guess else ""),
                        f"keys are roles ({', '.join(WEATHER_ROLES)})"
                        + ("" if key == "variables" else " or variable names of the file"),
                    )
                )
    return out


def time_gaps(time: np.ndarray, parts: Sequence[GridPart], *, section: str = "weather") -> list[str]:
    """One note per gap in a regular time axis (a step missing inside or between files).

    Not an error: the build keeps the days around a gap with no value and the flag ``missing_hours``.
    """
    t = np.asarray(time, dtype="datetime64[ns]")
    if t.size < 3:
        return []
    d = np.diff(t)
    steps, counts = np.unique(d, return_counts=True)
    step = steps[np.argmax(counts)]
    out = []
    for i in np.flatnonzero(d > step):
        a, b = pd.Timestamp(t[i]), pd.Timestamp(t[i + 1])
        n = int(d[i] // step) - 1
        pa, pb = part_at(parts, t[i]), part_at(parts, t[i + 1])
        where = str(pa.path) if pa is not None and pa is pb else " and ".join(str(p.path) for p in (pa, pb) if p)
        out.append(
            f"{section} grid {where or 'record'}: {n} time step(s) missing between {a} and {b}; the local days "
            "they touch get no values (flag missing_hours): add the missing hours or file"
        )
    return out


Locate = Callable[[int, str], tuple[float, float, float]]


def check_bounds(
    field: str,
    lows: np.ndarray,
    highs: np.ndarray,
    time: np.ndarray,
    *,
    step_hours: float,
    parts: Sequence[GridPart],
    label: str,
    source_name: str,
    locate: Locate,
    section: str = "weather",
) -> None:
    """Raise when a converted field leaves its physical bounds (:data:`BOUNDS`), naming file, time and cell.

    ``lows``/``highs``: per-step minimum and maximum over the weighed cells, in ``BOUNDS[field].unit``.
    ``locate(i, "min"|"max")`` gives (latitude, longitude, value) of the extreme cell at step ``i``.
    """
    b = BOUNDS.get(field)
    if b is None:
        return
    scale = step_hours if b.per_hour else 1.0
    with np.errstate(invalid="ignore"):
        below = np.asarray(lows) < b.lo * scale if b.lo is not None else np.zeros(len(time), bool)
        above = np.asarray(highs) > b.hi * scale if b.hi is not None else np.zeros(len(time), bool)
    bad = np.flatnonzero(below | above)
    if not bad.size:
        return
    i = int(bad[0])  # the first offending step
    lat, lon, value = locate(i, "min" if below[i] else "max")
    t = pd.Timestamp(time[i])
    part = part_at(parts, t)
    where = str(part.path) if part is not None else label
    per = f" per {step_hours:g} h step" if b.per_hour else ""
    rng = f"{'' if b.lo is None else f'{b.lo * scale:g}'}..{'' if b.hi is None else f'{b.hi * scale:g}'}"
    raise SourceError(
        f"{section} grid {where}: {field} is {value:.6g} {b.unit}{per} at {t} UTC in the cell at "
        f"{lat:.4f} N, {lon:.4f} E (variable {source_name!r}, after unit conversion), outside the physical "
        f"range {rng} {b.unit}{per}; the file's units or scaling are probably wrong "
        f"(e.g. Kelvin values labelled degC): fix the file's attributes or declare {section}.units"
    )


def check_any_value(
    field: str,
    valid: np.ndarray,
    time: np.ndarray,
    *,
    zones: Sequence[str],
    n_cells: Sequence[int],
    parts: Sequence[GridPart],
    label: str,
    source_name: str,
    section: str = "weather",
) -> None:
    """Raise :class:`NoValueError` when a field has no value over a zone's weighed cells in a whole file.

    ``valid``: (time, zone), True where at least one of the zone's cells holds a value. Files are those of
    ``parts`` (or the whole record when there are none); ``n_cells``: cells each zone weighs.
    """
    v = np.asarray(valid, dtype=bool).reshape(len(time), len(zones))
    t = np.asarray(time, dtype="datetime64[ns]")
    groups: list[tuple[GridPart | None, np.ndarray]] = (
        [(p, (t >= p.first) & (t <= p.last)) for p in parts] if parts else [(None, np.ones(t.size, bool))]
    )
    for part, sel in groups:
        if not sel.any():
            continue
        empty = [k for k in range(len(zones)) if not v[sel, k].any()]
        if empty:
            where = str(part.path) if part is not None else label
            k = empty[0]
            also = f" (also {len(empty) - 1} other zone(s))" if len(empty) > 1 else ""
            raise NoValueError(
                f"{section} grid {where}: {field} (variable {source_name!r}) has no value (all NaN or fill value) "
                f"at any of the {n_cells[k]} cells zone {zones[k]!r} weighs{also}, at any time step of the file; "
                "replace the file (download it again), leave it out of the paths or use a grid with data there",
                part,
            )
