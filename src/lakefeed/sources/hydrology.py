"""Read per-sub-basin daily model outputs (discharge, nutrient concentrations).

Takes a :class:`~lakefeed.config.HydrologySource` (CF discrete-sampling-geometry timeSeries
NetCDF, one wide CSV per variable, or a long table) and returns one wide ``pandas.DataFrame``
per variable role: a continuous daily ``DatetimeIndex`` named ``date`` (days missing from the
file are added as NaN, never as zero), one column per sub-basin id (``str``), values in the
canonical unit (discharge m3 s-1, concentrations mg L-1). Units come from the file's
``units`` attribute (NetCDF) or the source config's ``units`` (CSV, long tables without a unit
column); conversion goes through :mod:`lakefeed.units`. Molar concentrations (``mmol m-3``)
of total nitrogen and phosphorus use the molar mass of N (14.007 g mol-1) and P
(30.974 g mol-1). Inside :func:`shared_reads` (the hydrology stage for many lakes) each model output
is read from disk once for every lake that names it; each lake still selects, checks and converts its
own sub-basins. Must not compute loads.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterable, Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from lakefeed.config import HydrologySource
from lakefeed.exceptions import SourceError
from lakefeed.sources.locations import readable_path
from lakefeed.units import CANONICAL, convert, parse_unit

__all__ = ["MOLAR_MASS_G_PER_MOL", "STANDARD_NAMES", "read_hydrology", "shared_reads", "to_canonical_unit"]

#: Raw reads kept by the innermost :func:`shared_reads` block: (source config, roles) -> what the file held.
_SHARED: list[dict[tuple[str, tuple[str, ...]], dict[str, tuple[pd.DataFrame, str | None]]]] = []


@contextlib.contextmanager
def shared_reads() -> Iterator[None]:
    """Within this block :func:`read_hydrology` reads each model output (same source config, same roles) once.

    The raw values of the file are kept until the block ends (memory: one copy of each output read); every
    call still selects, checks and converts the sub-basins it asks for, so it returns what it would alone.
    """
    _SHARED.append({})
    try:
        yield
    finally:
        _SHARED.pop()


#: Molar mass (g mol-1) of the element a concentration role is expressed as (IUPAC standard atomic weights).
MOLAR_MASS_G_PER_MOL: dict[str, float] = {"tn": 14.007, "tp": 30.974, "no3": 14.007, "nh4": 14.007, "po4": 30.974}
#: CF standard names that identify a role in a NetCDF file without a name mapping.
STANDARD_NAMES: dict[str, tuple[str, ...]] = {"discharge": ("water_volume_transport_in_river_channel",)}


def _canonical(role: str) -> str:
    return CANONICAL["discharge"] if role == "discharge" else CANONICAL["concentration"]


def to_canonical_unit(values: np.ndarray, unit: str, role: str) -> np.ndarray:
    """Discharge to m3 s-1, a concentration to mg L-1 (molar ones through :data:`MOLAR_MASS_G_PER_MOL`).

    Raises :class:`SourceError` when the unit is not understood or does not fit the role.
    """
    molar = MOLAR_MASS_G_PER_MOL.get(role) if role != "discharge" else None
    if molar is not None and "[substance]" not in parse_unit(str(unit)).dimensionality:
        molar = None  # a mass concentration: no molar mass needed
    return convert(values, str(unit), _canonical(role), molar_mass_g_per_mol=molar)


def _to_canonical(frame: pd.DataFrame, role: str, unit: str | None, where: str) -> pd.DataFrame:
    """Convert to the role's canonical unit and reject negative values."""
    if unit is None or str(unit).strip() == "":
        raise SourceError(
            f"hydrology output {where}: variable {role!r} has no unit; add a 'units' attribute to the file or "
            f"declare it in sources.yaml hydrology.units.{role} (e.g. 'm3 s-1', 'mg L-1', 'ug L-1', 'mmol m-3')"
        )
    try:
        values = to_canonical_unit(frame.to_numpy(dtype=float), str(unit), role)
    except SourceError as err:
        raise SourceError(f"hydrology output {where}: variable {role!r}: {err}") from err
    out = pd.DataFrame(values, index=frame.index, columns=frame.columns)
    neg = out.lt(0)
    if neg.to_numpy().any():
        stacked = out.where(neg).stack()
        shown = [f"{c} on {d:%Y-%m-%d}: {v:g}" for (d, c), v in stacked.head(5).items()]
        raise SourceError(
            f"hydrology output {where}: {int(neg.to_numpy().sum())} negative {role} value(s), e.g. {shown}; "
            "discharge and concentrations must be >= 0 (mark missing values as empty/NaN, not negative)"
        )
    return out


def _daily(frame: pd.DataFrame, where: str) -> pd.DataFrame:
    """Dates to a continuous daily index named ``date``; duplicate dates are an error."""
    idx = pd.DatetimeIndex(pd.to_datetime(frame.index)).tz_localize(None).normalize()
    frame = frame.set_axis(idx, axis=0)
    dup = idx[idx.duplicated()].unique()
    if len(dup):
        raise SourceError(f"hydrology output {where}: duplicate dates {[f'{d:%Y-%m-%d}' for d in dup[:5]]}")
    frame = frame.sort_index()
    full = pd.date_range(idx.min(), idx.max(), freq="D", name="date")
    frame = frame.reindex(full)
    frame.columns = pd.Index([str(c) for c in frame.columns])
    return frame


def _read_dsg(path: Path, roles: list[str], source: HydrologySource) -> dict[str, tuple[pd.DataFrame, str | None]]:
    try:
        ds = xr.open_dataset(path, decode_times=True)
    except Exception as err:
        raise SourceError(
            f"hydrology output {path}: cannot open as NetCDF ({type(err).__name__}: {err}); the file may be "
            "empty, truncated or corrupt: write or download it again"
        ) from err
    with ds:
        id_vars = [v for v in ds.variables if ds[v].attrs.get("cf_role") == "timeseries_id"]
        if not id_vars:
            raise SourceError(
                f"hydrology output {path}: no variable with attribute cf_role='timeseries_id' (the sub-basin ids "
                "of a CF timeSeries file); add it or convert the file to a wide CSV"
            )
        ids_da = ds[id_vars[0]]
        station_dim = ids_da.dims[0]
        ids = [x.decode() if isinstance(x, bytes) else str(x) for x in np.asarray(ids_da.values).ravel()]
        time_name = next((c for c in ds.coords if ds[c].attrs.get("standard_name") == "time"), "time")
        if time_name not in ds.variables:
            raise SourceError(f"hydrology output {path}: no time coordinate")
        out = {}
        for role in roles:
            name = source.variables.get(role, role)
            if name not in ds.data_vars:
                wanted = STANDARD_NAMES.get(role, ())
                name = next((v for v in ds.data_vars if ds[v].attrs.get("standard_name") in wanted), None)
            if name is None:
                raise SourceError(
                    f"hydrology output {path}: no variable for {role!r} (looked for "
                    f"{source.variables.get(role, role)!r}); variables are {list(ds.data_vars)}; "
                    f"map it in sources.yaml hydrology.variables.{role}"
                )
            da = ds[name].transpose(time_name, station_dim)
            frame = pd.DataFrame(da.values, index=pd.to_datetime(ds[time_name].values), columns=ids)
            out[role] = (frame, source.units.get(role, da.attrs.get("units")))
        return out


def _read_table(path: str | Path) -> pd.DataFrame:
    path = readable_path(path, what="hydrology output")
    if not path.exists():
        raise SourceError(f"hydrology output: file not found: {path}; check sources.yaml hydrology")
    try:
        if path.suffix.lower() in {".parquet", ".pq"}:
            return pd.read_parquet(path)
        return pd.read_csv(path, dtype={"subbasin": str, "subbasin_id": str})
    except Exception as err:
        raise SourceError(f"hydrology output: cannot read {path}: {err}") from err


def _read_wide(path: str | Path, role: str, source: HydrologySource) -> tuple[pd.DataFrame, str | None]:
    table = _read_table(path)
    if "date" not in table.columns:
        raise SourceError(f"hydrology output {path}: no 'date' column; columns are {list(table.columns)[:10]}")
    frame = table.set_index(pd.to_datetime(table.pop("date"))).apply(pd.to_numeric, errors="coerce")
    return frame, source.units.get(role)


def _read_long(
    path: str | Path, roles: list[str], source: HydrologySource
) -> dict[str, tuple[pd.DataFrame, str | None]]:
    table = _read_table(path)
    sub_col = "subbasin" if "subbasin" in table.columns else "subbasin_id"
    missing = {"date", sub_col, "variable", "value"} - set(table.columns)
    if missing:
        raise SourceError(
            f"hydrology output {path}: long table needs columns date, subbasin, variable, value; "
            f"missing {sorted(missing)}"
        )
    table["date"] = pd.to_datetime(table["date"])
    table[sub_col] = table[sub_col].astype(str)
    out = {}
    for role in roles:
        name = source.variables.get(role, role)
        part = table[table["variable"] == name]
        if part.empty:
            raise SourceError(
                f"hydrology output {path}: no rows with variable {name!r}; variables are "
                f"{sorted(table['variable'].unique())[:10]}; map it in sources.yaml hydrology.variables.{role}"
            )
        unit = source.units.get(role)
        if unit is None and "unit" in part.columns:
            units = part["unit"].dropna().unique()
            if len(units) > 1:
                raise SourceError(f"hydrology output {path}: variable {name!r} has several units {list(units)}")
            unit = units[0] if len(units) else None
        dup = part.duplicated(["date", sub_col])
        if dup.any():
            raise SourceError(
                f"hydrology output {path}: variable {name!r} has duplicate (date, subbasin) rows, e.g. "
                f"{part.loc[dup, ['date', sub_col]].head(3).to_dict('records')}"
            )
        frame = part.pivot(index="date", columns=sub_col, values="value").apply(pd.to_numeric, errors="coerce")
        out[role] = (frame, unit)
    return out


def _read_raw(source: HydrologySource, roles: list[str]) -> dict[str, tuple[pd.DataFrame, str | None]]:
    """Each role's frame as the file holds it (dates, sub-basin columns) and its unit."""
    if source.format == "dsg":
        path = readable_path(source.path or "", what="hydrology output")
        if not path.exists():
            raise SourceError(f"hydrology output: file not found: {path}; check sources.yaml hydrology.path")
        raw = _read_dsg(path, roles, source)
    elif source.format == "long":
        raw = _read_long(source.path or "", roles, source)
    else:
        raw = {}
        for role in roles:
            if role not in source.files:
                raise SourceError(
                    f"hydrology output: no wide CSV for {role!r}; add it under sources.yaml hydrology.files.{role}"
                )
            raw[role] = _read_wide(source.files[role], role, source)
    return raw


def read_hydrology(
    source: HydrologySource, *, roles: Iterable[str] | None = None, subbasin_ids: Iterable[str] | None = None
) -> dict[str, pd.DataFrame]:
    """Read daily per-sub-basin model outputs in canonical units.

    Parameters
    ----------
    source
        The hydrology section of the sources config.
    roles
        Variable roles to read; default ``discharge`` plus ``source.nutrients``.
    subbasin_ids
        Sub-basins that must be present (e.g. the catchment's direct inflows); only they are kept.

    Returns
    -------
    dict of role -> DataFrame (daily ``DatetimeIndex`` named ``date``, columns = sub-basin ids);
    discharge in m3 s-1, concentrations in mg L-1. Missing days are NaN.

    Raises
    ------
    SourceError
        Unreadable file, variable not found, unit missing or not convertible, negative values,
        duplicate dates, or a requested sub-basin id absent from the output.
    """
    roles = list(roles) if roles is not None else ["discharge", *source.nutrients]
    cache = _SHARED[-1] if _SHARED else None
    key = (source.model_dump_json(), tuple(roles))
    raw = cache.get(key) if cache is not None else None
    if raw is None:
        raw = _read_raw(source, roles)
        if cache is not None:
            cache[key] = raw
    out: dict[str, pd.DataFrame] = {}
    for role, (frame, unit) in raw.items():
        where = str(source.files.get(role, source.path))
        frame = _daily(frame, where)
        if subbasin_ids is not None:
            wanted = [str(s) for s in subbasin_ids]
            missing = [s for s in wanted if s not in frame.columns]
            if missing:
                raise SourceError(
                    f"hydrology output {where}: sub-basin id(s) {missing} missing from variable {role!r}; the output "
                    f"has {list(frame.columns)[:12]}; check the sub-basin ids of the layer against the model output"
                )
            frame = frame[wanted]
        out[role] = _to_canonical(frame, role, unit, where)
    return out
