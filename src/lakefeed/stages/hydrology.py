"""Stage ``hydrology``: lake inflow and nutrient loads -> ``hydrology_daily`` (+ ``load_estimates``).

Takes a :class:`~lakefeed.config.Project` and a :class:`~lakefeed.store.Store`. Reads the lake and
sub-basin layers and traces the catchment (:func:`lakefeed.geometry.network.trace_catchment`),
reads the per-sub-basin model outputs (:func:`lakefeed.sources.hydrology.read_hydrology`), sums
the inflow and loads (:func:`lakefeed.extract.loads.inflow_loads`) and, for each sampled tributary
station, estimates daily loads from the sparse samples by every method
(:mod:`lakefeed.extract.load_estimation`).

Writes

- ``hydrology_daily`` (one row per local date; the model output is daily already): ``date``,
  ``inflow_discharge`` (m3 s-1), ``<nutrient>_load`` (kg d-1), ``<nutrient>_fwmc`` (mg L-1),
  ``load_method``, ``flags``, then per-inflow ``inflow_<id>_discharge`` and ``<nutrient>_load_<id>``,
  and per station ``<nutrient>_load_station_<station>`` (kg d-1, the configured method). The lake
  totals are the model's (``load_method`` starts with ``model_output``); station estimates are
  kept beside them, not mixed in.
- ``load_estimates`` (one row per station, nutrient, method and date): ``station``, ``nutrient``,
  ``method``, ``selected``, ``flow_subbasins``, ``date``, ``load``, ``lower``, ``upper`` (kg d-1),
  ``warnings``.

A station on sub-basin S takes the flow at S: S's discharge when the model's is ``routed``, and with
``local`` runoff the sum of S's and every upstream sub-basin's runoff. ``flow_subbasins`` (``S+U1+U2``,
empty for a station with its own ``flow_path``) and the ``hydrology_daily`` metadata key
``station_flow_subbasins`` (``station=S+U1+U2; ...``) say which sub-basins make each station's flow.

Must not: hold science (that lives in ``geometry`` and ``extract``).
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from lakefeed.config import Project
from lakefeed.config.sources import HydrologySource, SampleStation
from lakefeed.exceptions import ConfigError, ExtractError, LakefeedWarning
from lakefeed.extract.load_estimation import LoadEstimate, align, compare_methods
from lakefeed.extract.loads import inflow_loads, model_subbasins, summed_flow
from lakefeed.geometry.network import Catchment, trace_configured_catchment
from lakefeed.progress import Progress, no_progress
from lakefeed.sources.hydrology import read_hydrology
from lakefeed.sources.samples import read_flow, read_samples
from lakefeed.sources.vectors import read_layer
from lakefeed.stages._guard import refuse_shrink
from lakefeed.stages._map import record_catchment
from lakefeed.stages._provenance import config_hash, input_hashes, layer_paths
from lakefeed.stages._result import StageResult
from lakefeed.store import Store
from lakefeed.units import CANONICAL

__all__ = ["build_hydrology", "catchment_of", "station_method"]

_EST_KEYS = ["station", "nutrient", "method", "date"]  # one row of load_estimates


def catchment_of(project: Project) -> Catchment:
    """Trace the lake's catchment from the configured sub-basin layer (reads the layers)."""
    cfg = project.lake.subbasins
    subbasins = read_layer(cfg, what="sub-basin layer", id_field=cfg.id_field)
    lake = read_layer(project.lake.lake, what="lake polygon")
    return trace_configured_catchment(
        subbasins, lake, cfg, where=f"sub-basin layer {cfg.path} (config key 'subbasins' of {project.lake_file.name})"
    )


def station_method(station: SampleStation) -> str:
    """Estimator name for a station's config (``rating_curve`` + ``ferguson`` -> ``rating_curve_ferguson``)."""
    if station.method == "rating_curve" and station.rating_correction == "ferguson":
        return "rating_curve_ferguson"
    return station.method


def _station_estimates(
    station: SampleStation, flow: pd.Series, where: str
) -> tuple[dict[str, dict[str, LoadEstimate | ExtractError]], str]:
    samples = read_samples(station.path, station, station_hint=station.id)
    options = {"seasonal": station.rating_seasonal, "trend": station.rating_trend}
    out = {}
    for nutrient, part in samples.groupby("nutrient", sort=True):
        align(part, flow, where=f"samples {where} ({nutrient})")  # input errors stop the stage here
        out[str(nutrient)] = compare_methods(part, flow, min_samples=station.min_samples, **options)
    return out, station_method(station)


def build_hydrology(
    project: Project, store: Store, *, progress: Progress | None = None, allow_shrink: bool = False
) -> StageResult:
    """Build ``hydrology_daily`` (and ``load_estimates`` when stations are sampled) for one lake.

    Parameters
    ----------
    project
        The lake and its sources (``sources.hydrology``, ``sources.samples``).
    store
        Where the tables are written.
    progress
        Callback (description, done, total).
    allow_shrink
        Write even when the new tables would shorten the stored record or turn stored values into missing
        ones (an input removed or cut short on purpose); otherwise that is a
        :class:`~lakefeed.exceptions.ShrinkError` and neither table is written (:mod:`lakefeed.stages._guard`).

    Returns
    -------
    StageResult with rows written per table and the warnings raised on the way.

    Examples
    --------
    >>> from lakefeed.config import load_project
    >>> from lakefeed.store import Store
    >>> result = build_hydrology(load_project("config/lake-tallow.yaml"), Store("store"))  # doctest: +SKIP
    """
    progress = progress or no_progress
    lake, sources = project.lake, project.sources
    result = StageResult(stage="hydrology", lake=lake.id)
    hyd = sources.hydrology
    if hyd is None:
        result.skipped, result.reason = True, "no hydrology source in sources.yaml"
        return result
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", LakefeedWarning)
        progress("hydrology: catchment", 0, 4)
        catchment = catchment_of(project)
        record_catchment(store, project.id, catchment)
        station_ids = [s.subbasin for s in sources.samples if s.subbasin]
        unknown = [s for s in station_ids if s not in catchment.graph]
        if unknown:
            raise ConfigError(f"sources.yaml samples[].subbasin names unknown sub-basin(s) {unknown}")
        # the sub-basins whose discharge makes the lake inflow and each station's flow (routed here for local runoff)
        members, flow_of = model_subbasins(
            catchment, {s.id: s.subbasin for s in sources.samples if s.subbasin}, discharge_kind=hyd.discharge_kind
        )
        progress("hydrology: model outputs", 1, 4)
        table, data, nutrients = _lake_inflow(hyd, members, flow_of)
        progress("hydrology: station loads", 2, 4)
        estimates, method_text = _station_loads(sources.samples, data, flow_of, table)
        table["load_method"] = ";".join(["model_output", *method_text])
        head = ["inflow_discharge", *[f"{n}_load" for n in nutrients], *[f"{n}_fwmc" for n in nutrients]]
        head += ["load_method", "flags"]
        table = table[head + [c for c in table.columns if c not in head]]
        progress("hydrology: writing", 3, 4)
        out = table.reset_index()
        out["date"] = out["date"].dt.date
        est_frame = pd.concat(estimates, ignore_index=True) if estimates else None
        if est_frame is not None:
            est_frame["date"] = est_frame["date"].dt.date
        files = [hyd.path, *(hyd.files or {}).values()]
        files += [f for st in sources.samples for f in (st.path, st.flow_path)]
        provenance = {
            "inputs": input_hashes([*files, *layer_paths(project.lake.lake, project.lake.subbasins)]),
            "config_hash": config_hash(project),
        }
        meta = _metadata(catchment, hyd, flow_of)
        _write(
            store, lake.id, out, est_frame, meta=meta, provenance=provenance, allow_shrink=allow_shrink, result=result
        )
        progress("hydrology: done", 4, 4)
    result.warnings.extend(str(w.message) for w in caught if issubclass(w.category, LakefeedWarning))
    for w in caught:  # re-raise anything that is not ours
        if not issubclass(w.category, LakefeedWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    return result


def _lake_inflow(
    hyd: HydrologySource, members: list[str], flow_of: dict[str, list[str]]
) -> tuple[pd.DataFrame, dict[str, pd.DataFrame], list[str]]:
    """The lake's daily inflow and loads from the model outputs (frame by date), the outputs read and the
    nutrients they hold; days with missing values are flagged and warned about."""
    needed = [*members, *(m for ids in flow_of.values() for m in ids)]
    data = read_hydrology(hyd, subbasin_ids=list(dict.fromkeys(needed)))
    nutrients = [n for n in hyd.nutrients if n in data]
    table = inflow_loads(data["discharge"][members], {n: data[n][members] for n in nutrients}, members=members)
    gap_days = table.index[table["flags"] != ""]
    if len(gap_days):
        shown = ", ".join(f"{d:%Y-%m-%d} ({f})" for d, f in table.loc[gap_days[:5], "flags"].items())
        warnings.warn(
            f"hydrology output {hyd.path or ', '.join(hyd.files.values())}: {len(gap_days)} day(s) with missing "
            f"values, e.g. {shown}; their lake values are missing (not zero) and named in 'flags'",
            LakefeedWarning,
            stacklevel=2,
        )
    return table, data, nutrients


def _station_loads(
    stations: Sequence[SampleStation],
    data: dict[str, pd.DataFrame],
    flow_of: dict[str, list[str]],
    table: pd.DataFrame,
) -> tuple[list[pd.DataFrame], list[str]]:
    """Every estimator's daily loads (kg d-1) per sampled station and nutrient (``load_estimates`` rows), and
    ``station_<id>=<method>`` per station; the chosen method's loads become columns of ``table``."""
    estimates: list[pd.DataFrame] = []
    method_text: list[str] = []
    for station in stations:
        if station.subbasin:
            flow = summed_flow(data["discharge"], flow_of[station.id], name=f"station {station.id}")
        elif station.flow_path:
            flow = read_flow(station.flow_path)
        else:
            raise ConfigError(f"sources.yaml samples: station {station.id!r} needs 'subbasin' or 'flow_path'")
        per_nutrient, chosen = _station_estimates(station, flow, station.path)
        method_text.append(f"station_{station.id}={chosen}")
        for nutrient, results in per_nutrient.items():
            for name, est in results.items():
                if isinstance(est, ExtractError):
                    warnings.warn(f"station {station.id} {nutrient} {name}: {est}", LakefeedWarning, stacklevel=2)
                    continue
                frame = est.daily.rename_axis("date").reset_index()
                frame.insert(0, "station", station.id)
                frame.insert(1, "nutrient", nutrient)
                frame.insert(2, "method", name)
                frame.insert(3, "selected", name == chosen)
                frame.insert(4, "flow_subbasins", "+".join(flow_of.get(station.id, [])))
                frame["warnings"] = "; ".join(est.warnings)
                estimates.append(frame)
                if name == chosen:
                    table[f"{nutrient}_load_station_{station.id}"] = est.daily["load"].reindex(table.index)
                    for w in est.warnings:
                        warnings.warn(f"station {station.id} {nutrient} ({name}): {w}", LakefeedWarning, stacklevel=2)
    return estimates, method_text


def _metadata(catchment: Catchment, hyd: HydrologySource, flow_of: dict[str, list[str]]) -> dict[str, str]:
    """Schema metadata of ``hydrology_daily``: the catchment traced and where the flows come from."""
    return {
        "catchment_rule": catchment.rule,
        "direct_inflows": ",".join(catchment.direct_inflows),
        "catchment_subbasins": ",".join(catchment.subbasin_ids),
        "catchment_area_km2": f"{catchment.area_km2:.6g}",
        "catchment_n_subbasins": str(catchment.n_subbasins),
        "subbasins_overlapping_lake": ",".join(catchment.overlapping),
        "discharge_kind": hyd.discharge_kind,
        "station_flow_subbasins": "; ".join(f"{k}={'+'.join(v)}" for k, v in flow_of.items()),
        "source": str(hyd.path or Path(next(iter(hyd.files.values())))),
    }


def _write(
    store: Store,
    lake: str,
    out: pd.DataFrame,
    estimates: pd.DataFrame | None,
    *,
    meta: dict[str, str],
    provenance: dict[str, Any],
    allow_shrink: bool,
    result: StageResult,
) -> None:
    """Pass both tables through the shrink guard, then write them; rows written go into ``result``."""
    guard = {"allow_shrink": allow_shrink, "time_column": "date"}
    result.warnings += refuse_shrink(store, "hydrology_daily", lake, out, keys=["date"], complete=True, **guard)
    if estimates is not None:
        result.warnings += refuse_shrink(
            store, "load_estimates", lake, estimates, keys=_EST_KEYS, groups=_EST_KEYS[:-1], **guard
        )
    units = {c: _unit_of(c) for c in out.columns if _unit_of(c)}
    store.write_table("hydrology_daily", lake, out, units=units, metadata=meta, **provenance)
    result.tables["hydrology_daily"] = len(out)
    if estimates is not None:
        load = CANONICAL["load"]
        store.write_table(
            "load_estimates", lake, estimates, units={"load": load, "lower": load, "upper": load}, **provenance
        )
        result.tables["load_estimates"] = len(estimates)


def _unit_of(column: str) -> str | None:
    if column.endswith("discharge"):
        return CANONICAL["discharge"]
    if "_load" in column:
        return CANONICAL["load"]
    if column.endswith("_fwmc"):
        return CANONICAL["concentration"]
    return None
