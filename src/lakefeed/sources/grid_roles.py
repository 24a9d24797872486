"""Find a grid's variables by role, decode CF packing, resolve and check units file by file.

Takes a :class:`lakefeed.sources.grids.Grid` (its Dataset and each file's own attributes) and the
config's ``variables``/``units``/``accumulation`` sections. Returns the variables of the weather roles
with ``attrs['units']`` resolved. Each file is decoded with its own metadata: where the files of a
record carry different units for a variable (a month downloaded in degC among months in K), each
file's values are converted to the first file's unit before they are used together. The unit rules
are those of :mod:`lakefeed.sources.grid_rules`, which ``lakefeed check`` applies too.

Must not: compute the data, do science.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import xarray as xr

from lakefeed.exceptions import SourceError
from lakefeed.sources.grid_rules import GridPart, key_problems, role_problems

if TYPE_CHECKING:
    from lakefeed.sources.grid_model import Grid

__all__ = ["decode", "find_variable", "grid_parts", "select_roles"]


def find_variable(
    ds: xr.Dataset, role: str, *, mapping: Mapping[str, str] | None = None, where: str = "", section: str = "weather"
) -> str:
    """Name of the variable playing ``role``: by CF standard_name first, else by the config mapping."""
    from lakefeed.config.sources import WEATHER_ROLES  # imported here: keeps `lakefeed zonal` start-up short

    wanted = WEATHER_ROLES.get(role, (role,))
    for sn in wanted:
        for name, var in ds.data_vars.items():
            if var.attrs.get("standard_name") == sn:
                return str(name)
    if mapping and role in mapping:
        name = mapping[role]
        if name in ds.data_vars:
            return name
        raise SourceError(
            f"{section} grid {where}: variable {name!r} ({section}.variables.{role} in sources.yaml) is not in the "
            f"file; variables are {sorted(map(str, ds.data_vars))}; fix {section}.variables.{role}"
        )
    raise SourceError(
        f"{section} grid {where}: no variable with standard_name {' or '.join(map(repr, wanted))} and no mapping in "
        f"sources.yaml {section}.variables.{role}; add the file's variable name under that key "
        f"(variables are {sorted(map(str, ds.data_vars))})"
    )


def decode(var: xr.DataArray) -> xr.DataArray:
    """Lazily apply CF packing (fill values -> NaN, ``scale_factor``, ``add_offset``) in float64.

    Grids are opened undecoded so that zonal means can decode only the weighted cells; use this
    before any non-linear use. ``attrs['packing_step']`` keeps the scale factor (packing noise).
    """
    fills = [a for k in ("_FillValue", "missing_value") if k in var.attrs for a in np.atleast_1d(var.attrs[k])]
    scale = float(var.attrs.get("scale_factor", 1.0))
    offset = float(var.attrs.get("add_offset", 0.0))
    attrs = {
        k: v for k, v in var.attrs.items() if k not in ("_FillValue", "missing_value", "scale_factor", "add_offset")
    }
    out = var.astype(np.float64)
    for f in fills:
        out = out.where(var != f)
    if scale != 1.0 or offset != 0.0:
        out = out * scale + offset
    attrs["packing_step"] = float(var.attrs.get("packing_step", 0.0)) or (scale if "scale_factor" in var.attrs else 0.0)
    out = out.rename(var.name)
    out.attrs = attrs  # replaced, not updated: arithmetic keeps the packing attributes (xarray keep_attrs)
    return out


def grid_parts(grid: Grid) -> tuple[GridPart, ...]:
    """The grid's files with their own attributes; one part for the whole grid when it has none."""
    if grid.parts:
        return grid.parts
    t = grid.dataset["time"].values
    attrs = {str(n): dict(v.attrs) for n, v in grid.dataset.data_vars.items()}
    return (GridPart(Path(grid.label), t.min() if t.size else t, t.max() if t.size else t, attrs),)


def _per_file(var: xr.DataArray, parts: tuple[GridPart, ...], each: list[str | None], label: str) -> xr.DataArray:
    """``var`` decoded, each file's slice converted from its own unit to the first file's."""
    from lakefeed.units import convert

    target = str(each[0])
    pieces = []
    for part, unit in zip(parts, each, strict=True):
        piece = decode(var.sel(time=slice(part.first, part.last)))
        try:
            pieces.append(convert(piece, str(unit), target, water_equivalent=True))
        except SourceError as err:
            raise SourceError(
                f"weather grid {part.path}: variable {var.name!r} is in {unit!r} but {parts[0].path} has it in "
                f"{target!r}, and one cannot be converted to the other ({err}); fix the files' units attributes"
            ) from err
    out = xr.concat(pieces, dim="time") if len(pieces) > 1 else pieces[0]
    out.attrs = dict(pieces[0].attrs)
    return out.rename(var.name)


def select_roles(
    grid: Grid,
    roles: Iterable[str],
    *,
    mapping: Mapping[str, str] | None = None,
    units: Mapping[str, str] | None = None,
    accumulation: Mapping[str, Any] | None = None,
    packed: bool = False,
    section: str = "weather",
) -> dict[str, xr.DataArray]:
    """The variables of ``roles`` with ``attrs['units']`` resolved (config by role, then by variable name, then file).

    Every file's unit is checked (:func:`lakefeed.sources.grid_rules.role_problems`): all problems of all
    roles are raised together as one :class:`SourceError`. With ``accumulation`` (the config's section)
    an amount without a declared accumulation kind is a problem too. Each DataArray's attrs carry
    ``units``, ``standard_name`` (if any), ``source_name`` and ``packing_step`` (scale_factor of packed
    data, else 0) for noise clipping. Values are decoded (:func:`decode`) unless ``packed`` (then CF
    packing attributes stay for :func:`zonal_mean`); a variable whose files carry different units is
    always decoded, each file converted to the first file's unit.
    """
    parts = grid_parts(grid)
    problems = key_problems(
        grid.dataset, variables=mapping or {}, units=units or {}, accumulation=accumulation, section=section
    )
    if problems:
        raise SourceError("\n".join(f"{what}; {fix}" for what, fix in problems))
    names = {
        role: find_variable(grid.dataset, role, mapping=mapping, where=grid.label, section=section) for role in roles
    }
    each_unit: dict[str, list[str | None]] = {}
    for role, name in names.items():
        found, each = role_problems(role, name, parts, units=units or {}, accumulation=accumulation, section=section)
        problems += found
        each_unit[role] = each
    if problems:
        raise SourceError("\n".join(f"{what}; {fix}" for what, fix in problems))
    out = {}
    for role, name in names.items():
        var = grid.dataset[name]
        each = each_unit[role]
        attrs = dict(var.attrs)
        step = var.attrs.get("scale_factor", 0.0) or var.attrs.get("packing_step", 0.0)  # decoded: its record's
        attrs.update(units=str(each[0]), source_name=name, packing_step=float(step or 0.0))
        if len(set(each)) > 1:
            out[role] = _per_file(var.copy(deep=False).assign_attrs(attrs), parts, each, grid.label)
            continue
        var = var.copy(deep=False).assign_attrs(attrs)
        out[role] = var if packed else decode(var)
    return out
