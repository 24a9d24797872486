"""Quality report of one lake: a self-contained HTML page with embedded figures.

Takes a :class:`~lakefeed.config.Project` and a :class:`~lakefeed.store.Store`; reads the store tables
(``drivers_daily``, ``target_obs``, ``target_daily``, ``diagnostics``, ``forecast_evaluation``,
``run_summary``) and the lake's layers; writes one HTML file whose figures are base64 PNG (no external
resource, opens offline). Sections whose table is missing say so instead of failing. Must not compute
science: it shows what the stages stored.

Trophic classes and chlorophyll-a thresholds in the report inform only; bathing and drinking-water
decisions follow local regulations and the responsible authority.
"""

from __future__ import annotations

import html
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd

from lakefeed import __version__
from lakefeed.config import Project
from lakefeed.report._figures import calendar_figure, drivers_figure, map_figure, target_figure, to_png64
from lakefeed.report.skill import skill_section
from lakefeed.store import Store

__all__ = ["CAUTION", "render_report", "write_report"]

CAUTION = (
    "Trophic classes, chlorophyll-a thresholds and exceedance flags in this report inform only. Decisions on "
    "bathing and drinking water follow local regulations and the responsible authority. Values that no outlier "
    "rule could examine (screened = false, the unscreened mark in target_daily flags) keep their classes and flags: "
    "they may come from an undetected outlier scene."
)

_CSS = """
body{font-family:sans-serif;max-width:1100px;margin:2em auto;color:#222}
h1{font-size:1.6em}h2{border-bottom:1px solid #ccc;padding-bottom:.2em;margin-top:1.6em}
table{border-collapse:collapse;font-size:.8em}td,th{border:1px solid #ccc;padding:2px 6px}
.caution{background:#fff4e0;border-left:4px solid #e69500;padding:.6em 1em}
.missing{color:#888;font-style:italic}.warn{color:#a33}img{max-width:100%}
"""
# Marks on <body> how many figures decoded once the page has loaded (checked by the browser test).
_LOADED = (
    "<script>window.addEventListener('load',function(){var i=document.images,n=0;"
    "for(var k=0;k<i.length;k++){if(i[k].complete&&i[k].naturalWidth>0){n++;}}"
    "document.body.setAttribute('data-figures-loaded',n);document.body.setAttribute('data-figures-total',i.length);"
    "});</script>"
)


def _read(store: Store, table: str, lake: str) -> pd.DataFrame | None:
    return store.read_table(table, lake) if store.has_table(table, lake) else None


def _img(b64: str, name: str, alt: str) -> str:
    src = f"data:image/png;base64,{b64}"
    return f'<figure><img id="fig-{name}" class="figure" alt="{html.escape(alt)}" src="{src}"/></figure>'


def _table(frame: pd.DataFrame, *, max_rows: int = 60) -> str:
    return frame.head(max_rows).to_html(index=False, escape=True, float_format=lambda v: f"{v:.3g}", border=0)


def _map_section(project: Project, store: Store, notes: list[str]) -> str:
    from lakefeed.map_facts import read_catchment
    from lakefeed.sources.vectors import read_layer

    lake = project.lake
    layers: dict[str, object] = {}
    lake_g = read_layer(lake.lake, what="lake polygon")
    layers["lake"] = lake_g.to_crs(4326)
    layers["aois"] = read_layer(lake.aois, what="areas of interest", id_field=lake.aois.id_field).to_crs(4326)
    subs = read_layer(lake.subbasins, what="sub-basins", id_field=lake.subbasins.id_field)
    layers["subbasins"] = subs.to_crs(4326)
    inflows: list[str] = []
    facts = []
    try:
        import geopandas as gpd

        catchment = read_catchment(store.root, lake.id)
        if catchment is None:
            raise LookupError("not in the store; run the hydrology stage")
        inflows = list(catchment.direct_inflows)
        cat = gpd.GeoDataFrame(geometry=[catchment.polygon], crs=catchment.crs or subs.crs)
        layers["catchment"] = cat.to_crs(4326)
        area = cat.to_crs(cat.estimate_utm_crs()).area.iloc[0] / 1e6
        facts.append(
            f"catchment: {catchment.n_subbasins} sub-basins, {area:.1f} km2; direct inflows: "
            f"{', '.join(inflows) or 'none'}"
        )
    except Exception as err:  # the map is still useful without the catchment
        notes.append(f"catchment not traced for the map: {err}")
    cells = None
    try:
        cells = _lake_cells(project, store, lake_g)
    except Exception as err:
        notes.append(f"grid-cell weights not shown: {type(err).__name__}: {err}")
    fig = map_figure(layers, cells=cells, inflows=inflows, id_field=lake.subbasins.id_field)  # type: ignore[arg-type]
    return _img(to_png64(fig), "map", "map of lake, AOIs, catchment, inflows and grid-cell weights") + "".join(
        f"<p>{html.escape(f)}</p>" for f in facts
    )


def _lake_cells(project: Project, store: Store, lake_g: object) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Cell edges and lake-surface weight fractions the weather stage stored."""
    from lakefeed.map_facts import read_cells

    if project.sources.weather is None:
        return None
    cells = read_cells(store.root, project.lake.id)
    if cells is None:
        raise LookupError("not in the store; run the weather stage")
    return cells.lon_edges, cells.lat_edges, cells.fractions


def render_report(project: Project, store: Store) -> str:
    """The HTML text of the lake's quality report (self-contained), from one store generation (one run)."""
    store = store.pinned()
    lake = project.lake
    notes: list[str] = []
    parts = [
        f"<h1>Quality report: {html.escape(lake.name)} ({html.escape(lake.id)})</h1>",
        f"<p>Generated {datetime.now(UTC):%Y-%m-%d %H:%M} UTC by lakefeed {__version__}; store "
        f"<code>{html.escape(str(store.root))}</code>; local time zone {html.escape(lake.timezone)}.</p>",
        f'<p class="caution">{html.escape(CAUTION)}</p>',
        "<h2>Lake, areas of interest and catchment</h2>",
    ]
    try:
        parts.append(_map_section(project, store, notes))
    except Exception as err:
        parts.append(f'<p class="missing">map not available: {html.escape(str(err))}</p>')
    drivers = _read(store, "drivers_daily", lake.id)
    parts.append("<h2>Weather drivers</h2>")
    if drivers is not None:
        parts.append(
            _img(
                to_png64(drivers_figure(drivers, drivers.attrs.get("units", {}))),
                "drivers",
                "daily weather drivers over the lake surface",
            )
        )
    else:
        parts.append('<p class="missing">no drivers_daily table (weather stage not run)</p>')
    obs = _read(store, "target_obs", lake.id)
    parts.append("<h2>Chlorophyll-a observations</h2>")
    if obs is not None and len(obs):
        parts.append(
            _img(
                to_png64(target_figure(obs, obs.attrs.get("units", {}))),
                "target",
                "chlorophyll-a per AOI by sensor: accepted, rejected, outliers",
            )
        )
        screened = obs["screened"] if "screened" in obs else obs["accepted"]  # stores built before the column
        counts = (
            obs.assign(
                outlier=obs["outlier"].fillna(False).astype(bool),
                unscreened=obs["accepted"].astype(bool) & ~screened.fillna(False).astype(bool),
            )
            .groupby(["aoi", "sensor"])
            .agg(
                scenes=("scene_id", "size"),
                accepted=("accepted", "sum"),
                outliers=("outlier", "sum"),
                unscreened=("unscreened", "sum"),
            )
            .reset_index()
        )
        parts.append(_table(counts))
        has_daily = store.has_table("target_daily", lake.id)
        daily = store.read_table("target_daily", lake.id, columns=["aoi", "date"]) if has_daily else None
        dates = daily[["aoi", "date"]] if daily is not None else obs.loc[obs["accepted"].astype(bool), ["aoi", "date"]]
        parts.append("<h2>Sampling calendar and gaps</h2>")
        parts.append(_img(to_png64(calendar_figure(dates)), "calendar", "sampling calendar and gap histogram"))
    else:
        parts.append('<p class="missing">no target_obs table (target stage not run)</p>')
    parts.append("<h2>Diagnostics and warnings</h2>")
    diag = _read(store, "diagnostics", lake.id)
    if diag is not None:
        keep = [
            c
            for c in (
                "aoi",
                "n_obs",
                "obs_per_year",
                "gap_median_days",
                "gap_max_days",
                "coverage_fraction",
                "warnings",
            )
            if c in diag
        ]
        parts.append(_table(diag[keep]))
    else:
        parts.append('<p class="missing">no diagnostics table (features stage not run)</p>')
    runs = _read(store, "run_summary", lake.id)
    if runs is not None:
        last = runs.tail(1)
        for col in ("error", "skipped"):
            for text in last.get(col, pd.Series(dtype=str)).dropna().astype(str):
                if text:
                    parts.append(f'<p class="warn">last run, {col}: {html.escape(text)}</p>')
    parts += [f'<p class="warn">{html.escape(n)}</p>' for n in notes]
    evaluation = _read(store, "forecast_evaluation", lake.id)
    if evaluation is not None:
        parts.append("<h2>Forecast bias by lead time</h2>")
        parts.append(_table(evaluation.drop(columns=["lake"])))
    parts.append(skill_section(store, lake.id))
    parts.append(f'<p class="caution">{html.escape(CAUTION)}</p>')
    body = "\n".join(parts)
    return (
        f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8"/><title>lakefeed report '
        f"{html.escape(lake.id)}</title><style>{_CSS}</style>{_LOADED}</head><body>\n{body}\n</body></html>\n"
    )


def write_report(project: Project, store: Store, out: str | Path) -> Path:
    """Render the report and write it to ``out`` (written aside, then moved into place). Returns the path."""
    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    text = render_report(project, store)
    tmp = out.with_name(f".{out.name}.tmp")
    tmp.write_text(text, encoding="utf-8")
    tmp.replace(out)
    return out
