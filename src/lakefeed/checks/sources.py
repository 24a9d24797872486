"""Cheap checks of the hydrology outputs, the tributary samples and the scene catalogue.

Takes the sources config sections, the lake config and the sub-basin network found by the
geometry checks; opens each source for its metadata only (NetCDF coordinates and attributes,
CSV headers and date columns, STAC JSON) and returns :class:`CheckResult` lines plus each
source's period for the coverage check. Must not read whole data sets or write anything.
"""

from __future__ import annotations

import warnings
from collections import Counter
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq

from lakefeed.checks._open import Period, open_lazy, time_period
from lakefeed.checks._result import CheckResult, failed, passed, skipped, warned
from lakefeed.config import HydrologySource, LakeConfig, SampleStation, SceneSource
from lakefeed.exceptions import LakefeedWarning, SourceError
from lakefeed.sources.hydrology import STANDARD_NAMES
from lakefeed.sources.samples import read_samples
from lakefeed.units import is_convertible

__all__ = ["check_hydrology", "check_samples", "check_scenes"]

_EXPECTED = {"discharge": ("m3 s-1",)}
_CONCENTRATION = ("mg L-1", "mmol m-3")


def _expected(role: str) -> tuple[str, ...]:
    return _EXPECTED.get(role, _CONCENTRATION)


def _units_line(name: str, role: str, unit: str | None, where: str, file: str) -> CheckResult | None:
    if unit is None:
        return failed(name, f"{file}: {role} has no units", f"declare them under hydrology.units.{role}")
    if not any(is_convertible(unit, e) or _molar(unit, e) for e in _expected(role)):
        return failed(
            name,
            f"{file}: {role} has units {unit!r} ({where}), not convertible to {' or '.join(_expected(role))}",
            f"fix the units or declare them under hydrology.units.{role}",
        )
    return None


def _molar(unit: str, target: str) -> bool:
    return target == "mmol m-3" and is_convertible(unit, "mmol m-3")


def _decode_ids(values: np.ndarray) -> list[str]:
    """Sub-basin ids from a CF id variable (strings, bytes, or a 2-D char array)."""
    arr = np.asarray(values)
    if arr.ndim == 2 and arr.dtype.kind in "SU":
        arr = np.array(["".join(x.decode() if isinstance(x, bytes) else x for x in row) for row in arr])
    return [(v.decode("utf-8", "replace") if isinstance(v, bytes) else str(v)).strip() for v in arr.ravel()]


def _ids_result(name: str, found: Sequence[str], required: Sequence[str], file: str) -> CheckResult:
    missing = sorted(set(required) - set(found))
    if missing:
        return failed(
            name,
            f"{file}: sub-basin(s) of the network missing from the hydrology outputs: {missing}",
            "use outputs covering every sub-basin of the catchment, or fix the sub-basin ids",
        )
    return passed(
        name, f"{file}: all {len(set(required))} sub-basins the stage reads are present ({len(set(found))} in file)"
    )


def _dsg(src: HydrologySource, roles: list[str], required: Sequence[str]) -> tuple[list[CheckResult], Period | None]:
    path = Path(str(src.path))
    if not path.exists():
        return [
            failed(
                "hydrology file",
                f"hydrology.path: file not found: {path}",
                "fix hydrology.path in the sources config (relative paths start at its folder)",
            )
        ], None
    out = [passed("hydrology file", f"{path.name} (CF timeSeries)")]
    with open_lazy(path) as ds:
        id_var = next((v for v in ds.variables.values() if v.attrs.get("cf_role") == "timeseries_id"), None)
        if id_var is None:
            out.append(
                failed(
                    "hydrology ids",
                    f"{path.name}: no variable with cf_role 'timeseries_id' (the sub-basin ids)",
                    "mark the station/sub-basin id variable with cf_role = 'timeseries_id'",
                )
            )
        else:
            out.append(_ids_result("hydrology ids", _decode_ids(id_var.values), required, path.name))
        for role in roles:
            name = src.variables.get(role, role)
            if name not in ds.data_vars:  # as the reader does: fall back on the role's CF standard_name
                wanted = STANDARD_NAMES.get(role, ())
                name = next((str(v) for v in ds.data_vars if ds[v].attrs.get("standard_name") in wanted), name)
            if name not in ds.data_vars:
                out.append(
                    failed(
                        "hydrology variables",
                        f"{path.name}: variable {name!r} for {role!r} (hydrology.variables.{role}) not in the file; "
                        f"it has {sorted(map(str, ds.data_vars))}",
                        f"fix hydrology.variables.{role}",
                    )
                )
                continue
            unit = src.units.get(role, ds[name].attrs.get("units"))
            where = f"hydrology.units.{role}" if role in src.units else "units attribute"
            bad = _units_line("hydrology variables", role, unit, where, path.name)
            out.append(bad or passed("hydrology variables", f"{role}: {name!r} in {unit}"))
        t = ds["time"] if "time" in ds.variables else None
        period = time_period(t.values) if t is not None else None
    return out, period


def _tables(src: HydrologySource, roles: list[str], required: Sequence[str]) -> tuple[list[CheckResult], Period | None]:
    out: list[CheckResult] = []
    periods: list[Period] = []
    if src.format == "wide_csv":
        missing_roles = [r for r in roles if r not in src.files]
        out += [
            failed("hydrology files", f"hydrology.files.{r}: not set", f"add the CSV of {r} under hydrology.files")
            for r in missing_roles
        ]
        for role, f in src.files.items():
            p = Path(f)
            if not p.exists():
                out.append(failed("hydrology files", f"hydrology.files.{role}: file not found: {p}", "fix the path"))
                continue
            cols = [str(c) for c in pd.read_csv(p, nrows=0).columns]
            if "date" not in cols:
                out.append(failed("hydrology files", f"{p.name}: no 'date' column; columns are {cols[:10]}", ""))
                continue
            out.append(passed("hydrology files", f"{role}: {p.name}, {len(cols) - 1} sub-basin columns"))
            out.append(_ids_result("hydrology ids", [c for c in cols if c != "date"], required, p.name))
            bad = _units_line("hydrology variables", role, src.units.get(role), f"hydrology.units.{role}", p.name)
            out.append(bad or passed("hydrology variables", f"{role}: {src.units[role]}"))
            per = time_period(pd.read_csv(p, usecols=["date"])["date"].to_numpy())
            if per is not None:
                periods.append(per)
    else:  # long
        p = Path(str(src.path))
        if not p.exists():
            return [
                failed(
                    "hydrology file",
                    f"hydrology.path: file not found: {p}",
                    "fix hydrology.path in the sources config (relative paths start at its folder)",
                )
            ], None
        parquet = p.suffix.lower() in {".parquet", ".pq"}
        header = [str(c) for c in (pq.read_schema(p).names if parquet else pd.read_csv(p, nrows=0).columns)]
        sub = "subbasin" if "subbasin" in header else "subbasin_id"  # the names the reader accepts
        missing = sorted({"date", sub, "variable", "value"} - set(header))
        if missing:
            return [
                failed(
                    "hydrology file",
                    f"{p.name}: long table without column(s) {missing}; columns are {header[:10]}",
                    "a long table needs columns date, subbasin, variable, value (optional unit)",
                )
            ], None
        cols = ["date", sub, "variable", *(["unit"] if "unit" in header else [])]
        frame = pd.read_parquet(p, columns=cols) if parquet else pd.read_csv(p, usecols=cols, dtype={sub: str})
        out.append(passed("hydrology file", f"{p.name}: {len(frame)} rows"))
        out.append(_ids_result("hydrology ids", frame[sub].astype(str).unique().tolist(), required, p.name))
        have = set(frame["variable"].astype(str))
        for role in roles:
            name = src.variables.get(role, role)
            if name not in have:
                out.append(
                    failed(
                        "hydrology variables",
                        f"{p.name}: no rows for variable {name!r} ({role}); variables are {sorted(have)[:10]}",
                        f"fix hydrology.variables.{role}",
                    )
                )
                continue
            unit, where = src.units.get(role), f"hydrology.units.{role}"
            if unit is None and "unit" in frame.columns:  # as the reader does: the table's unit column
                units = frame.loc[frame["variable"].astype(str) == name, "unit"].dropna().unique()
                if len(units) > 1:
                    out.append(
                        failed(
                            "hydrology variables",
                            f"{p.name}: variable {name!r} has several units {list(units)}",
                            "use one unit per variable",
                        )
                    )
                    continue
                unit, where = (str(units[0]) if len(units) else None), "unit column"
            bad = _units_line("hydrology variables", role, unit, where, p.name)
            out.append(bad or passed("hydrology variables", f"{role}: {name!r} in {unit}"))
        per = time_period(frame["date"].to_numpy())
        if per is not None:
            periods.append(per)
    if not periods:
        return out, None
    return out, Period(max(p.start for p in periods), min(p.end for p in periods))


def check_hydrology(
    src: HydrologySource | None, *, required_ids: Sequence[str]
) -> tuple[list[CheckResult], Period | None]:
    """Hydrology outputs: file(s), declared variables and units, sub-basin ids covering ``required_ids``."""
    if src is None:
        return [skipped("hydrology", "no 'hydrology' section in the sources config")], None
    roles = ["discharge", *[n for n in src.nutrients if n != "discharge"]]
    if src.format == "dsg":
        return _dsg(src, roles, required_ids)
    return _tables(src, roles, required_ids)


def check_samples(
    stations: Sequence[SampleStation], *, subbasin_ids: Sequence[str]
) -> tuple[list[CheckResult], Period | None]:
    """Tributary samples: each lab sheet read as the build reads it (the same function, the same errors),
    sub-basin known, flow record present. Lab sheets are small, so they are read whole."""
    if not stations:
        return [skipped("samples", "no 'samples' in the sources config")], None
    out: list[CheckResult] = []
    periods = []
    for i, st in enumerate(stations):
        p = Path(st.path)
        name = f"samples {st.id}"
        if not p.exists():
            out.append(failed(name, f"samples[{i}].path: file not found: {p}", "fix the path in the sources config"))
            continue
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", LakefeedWarning)
            try:
                table = read_samples(p, st, station_hint=st.id)
            except SourceError as err:
                out.append(failed(name, f"samples[{i}]: {err}", "the build refuses this sheet too"))
                continue
        per = time_period(table["date"].to_numpy())
        if per is not None:
            periods.append(per)
        if st.subbasin is not None and subbasin_ids and st.subbasin not in set(subbasin_ids):
            out.append(
                failed(
                    name,
                    f"samples[{i}].subbasin: {st.subbasin!r} is not a sub-basin id of the network",
                    "name the sub-basin whose discharge is the station's flow",
                )
            )
            continue
        if st.flow_path is not None and not Path(st.flow_path).exists():
            out.append(failed(name, f"samples[{i}].flow_path: file not found: {st.flow_path}", "fix the path"))
            continue
        counts = ", ".join(f"{k} {n}" for n, k in table["nutrient"].value_counts().sort_index().items())
        censored = int(table["censored"].sum())
        text = f"{p.name}: {len(table)} samples ({counts}; {censored} censored), {per}"
        notes = [str(w.message) for w in caught if issubclass(w.category, LakefeedWarning)]
        out.append(warned(name, f"{text}; {'; '.join(notes)}") if notes else passed(name, text))
    if not periods:
        return out, None
    return out, Period(min(p.start for p in periods), max(p.end for p in periods))


def _sensor_of(props: dict, src: SceneSource) -> str | None:
    v = props.get(src.sensor_property)
    if isinstance(v, list):
        v = ",".join(map(str, v))
    if v is None:
        return None
    return src.sensor_map.get(str(v), str(v))


def _compare_sensors(found: Counter, lake: LakeConfig, where: str) -> list[CheckResult]:
    configured = set(lake.sensors)
    counts = ", ".join(f"{k}: {n}" for k, n in sorted(found.items()))
    out = []
    missing = sorted(configured - set(found))
    extra = sorted(set(found) - configured)
    if missing:
        out.append(
            failed(
                "scene sensors",
                f"{where}: configured sensor(s) {missing} have no scenes; found {counts or 'none'}",
                "fix the sensor labels under 'sensors' in the lake config, or scenes.sensor_map",
            )
        )
    if extra:
        out.append(
            warned(
                "scene sensors",
                f"{where}: scenes of sensor(s) {extra} are not configured and will be ignored",
                "add them under 'sensors' in the lake config to use them",
            )
        )
    if not missing and not extra:
        out.append(passed("scene sensors", f"{counts} (as configured)"))
    return out


def check_scenes(src: SceneSource | None, lake: LakeConfig) -> tuple[list[CheckResult], Period | None]:
    """Scene catalogue: STAC parseable, item count, sensors found vs configured, data asset present."""
    if src is None:
        return [skipped("scenes", "no 'scenes' section in the sources config")], None
    if src.folder is not None:
        return _scene_folder(src, lake)
    import pystac

    path = Path(str(src.catalog))
    if not path.exists():
        return [failed("scene catalogue", f"scenes.catalog: file not found: {path}", "fix scenes.catalog")], None
    try:
        cat = pystac.read_file(str(path))
        items = list(cat.get_items(recursive=True)) if hasattr(cat, "get_items") else [cat]
    except Exception as err:
        return [
            failed("scene catalogue", f"{path.name}: not a readable STAC file: {err}", "validate it with pystac")
        ], None
    if not items:
        return [failed("scene catalogue", f"{path.name}: no STAC items found", "link the scene items")], None
    out = [passed("scene catalogue", f"{path.name}: {len(items)} items")]
    sensors = Counter(_sensor_of(it.properties, src) for it in items)
    if None in sensors:
        out.append(
            failed(
                "scene sensors",
                f"{sensors.pop(None)} item(s) have no property {src.sensor_property!r}",
                "set scenes.sensor_property to the item property naming the sensor",
            )
        )
    out += _compare_sensors(sensors, lake, path.name)
    first = items[0]
    data = (
        first.assets.get(src.asset)
        if src.asset
        else next((a for a in first.assets.values() if "data" in (a.roles or [])), None)
    )
    if data is None:
        out.append(
            failed(
                "scene assets",
                f"item {first.id!r}: no asset {src.asset!r}" if src.asset else f"item {first.id!r}: no 'data' asset",
                "set scenes.asset to the chlorophyll-a asset key",
            )
        )
    else:
        href = Path(data.get_absolute_href() or "")
        if "://" not in str(data.href) and not href.exists():
            out.append(failed("scene assets", f"item {first.id!r}: asset file not found: {href}", ""))
        else:
            opt = [k for k in (src.quality_asset, src.uncertainty_asset) if k and k not in first.assets]
            line = f"data asset of {first.id!r} found"
            out.append(
                warned("scene assets", f"{line}; missing optional asset(s) {opt}", "")
                if opt
                else passed("scene assets", line)
            )
    times = [it.datetime for it in items if it.datetime is not None]
    return out, time_period(np.array([pd.Timestamp(t) for t in times])) if times else None


def _scene_folder(src: SceneSource, lake: LakeConfig) -> tuple[list[CheckResult], Period | None]:
    """The folder's scenes as the target stage lists them (same matching of the file names)."""
    from lakefeed.sources.scenes import list_scenes

    folder = Path(str(src.folder))
    if not folder.is_dir():
        return [failed("scene folder", f"scenes.folder: folder not found: {folder}", "fix scenes.folder")], None
    try:
        table = list_scenes(src)
    except SourceError as err:
        return [failed("scene folder", str(err), "")], None
    usable = table[table["reason"] == ""]
    if usable.empty:
        why = f", e.g. {table['reason'].iloc[0]}" if len(table) else ""
        return [failed("scene folder", f"{folder}: no usable scene matches scenes.filename_pattern{why}", "")], None
    n_files = sum(1 for f in folder.rglob("*") if f.is_file())
    out = [passed("scene folder", f"{folder.name}: {len(usable)} scenes from {n_files} file(s)")]
    bad = table[table["reason"] != ""]
    if len(bad):
        out.append(warned("scene folder", f"{len(bad)} scene(s) unusable, e.g. {bad['reason'].iloc[0]}", ""))
    out += _compare_sensors(Counter(usable["sensor"]), lake, folder.name)
    return out, time_period(pd.to_datetime(usable["time"], utc=True).dt.tz_localize(None).to_numpy())
