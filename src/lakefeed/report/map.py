"""Section 1: lake, catchment, sub-basins, direct inflows, AOIs (labelled by id) and grid-cell weights.

Reads the layers named in the lake config, the catchment the hydrology stage stored (sub-basin ids and area
in the ``hydrology_daily`` metadata) and the lake-surface cell weights the weather stage cached under
``<store>/_cache/weights`` for the grid in the ``drivers_daily`` metadata; the grid's coordinates come
from the first configured weather file. Nothing is recomputed: what is not stored is reported as missing.
"""

from __future__ import annotations

import html
from pathlib import Path

import geopandas as gpd
import matplotlib.patheffects as pe
import matplotlib.pyplot as plt
import numpy as np
from matplotlib.colors import LogNorm, Normalize
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from lakefeed.report._page import ReportContext, Section, figure_html

__all__ = ["map_figure", "map_section"]

_HALO = [pe.withStroke(linewidth=3, foreground="white")]

Cells = tuple[np.ndarray, np.ndarray, np.ndarray]


def map_section(ctx: ReportContext) -> Section:
    """The map section."""
    from lakefeed.sources.vectors import read_layer

    lake = ctx.project.lake
    notes: list[str] = []
    layers: dict[str, gpd.GeoDataFrame] = {
        "lake": read_layer(lake.lake, what="lake polygon").to_crs(4326),
        "aois": read_layer(lake.aois, what="areas of interest", id_field=lake.aois.id_field).to_crs(4326),
    }
    subs = read_layer(lake.subbasins, what="sub-basins", id_field=lake.subbasins.id_field)
    id_field = lake.subbasins.id_field
    layers["subbasins"] = subs.to_crs(4326)
    meta = ctx.metadata("hydrology_daily")
    inflows = [s for s in meta.get("direct_inflows", "").split(",") if s]
    facts = []
    if meta.get("catchment_subbasins"):
        ids = set(meta["catchment_subbasins"].split(","))
        inside = layers["subbasins"][layers["subbasins"][id_field].astype(str).isin(ids)]
        layers["catchment"] = gpd.GeoDataFrame(geometry=[inside.union_all()], crs=4326)
        facts.append(
            f"catchment: {meta.get('catchment_n_subbasins', len(ids))} sub-basins, "
            f"{float(meta['catchment_area_km2']):.1f} km2 (geodesic area stored by the hydrology stage); "
            f"direct inflows: {', '.join(inflows) or 'none'}"
        )
    else:
        notes.append("catchment not shown: no hydrology_daily table with its catchment (hydrology stage not run)")
    cells = None
    try:
        cells = stored_lake_cells(ctx)
        if cells is None:
            notes.append("grid-cell weights not shown: no cached weights for the stored weather grid")
    except Exception as err:  # the map is still useful without the weights
        notes.append(f"grid-cell weights not shown: {type(err).__name__}: {err}")
    aoi_ids = [str(a) for a in layers["aois"][lake.aois.id_field]]
    fig = map_figure(layers, cells=cells, inflows=inflows, id_field=id_field, aoi_field=lake.aois.id_field)
    body = figure_html(fig, "map", "map of lake, AOIs, catchment, inflows and grid-cell weights", labels=aoi_ids)
    body += "".join(f"<p>{html.escape(f)}</p>" for f in facts)
    body += "".join(f'<p class="warn">{html.escape(n)}</p>' for n in notes)
    return Section("map", "1. Lake, areas of interest and catchment", body)


def stored_lake_cells(ctx: ReportContext) -> Cells | None:
    """Cell edges (longitude, latitude) and the lake zone's weight fraction per cell: those the weather stage
    stored for the map (:mod:`lakefeed.map_facts`), else from the weights cache and the first weather file's
    coordinates (a store written before the map facts)."""
    from lakefeed.geometry.weights import ZoneWeights
    from lakefeed.map_facts import read_cells
    from lakefeed.sources.grids import open_grid

    facts = read_cells(ctx.store.root, ctx.lake)
    if facts is not None:
        return facts.lon_edges, facts.lat_edges, facts.fractions
    src = ctx.project.sources.weather
    signature = ctx.metadata("drivers_daily").get("grid_signature")
    if src is None or not signature:
        return None
    cached = sorted(
        (Path(ctx.store.root) / "_cache" / "weights").glob(f"{signature}-*.npz"), key=lambda p: p.stat().st_mtime
    )
    for path in reversed(cached):  # the newest cache of this grid that weighs the lake zone
        with np.load(path, allow_pickle=False) as npz:
            weights = ZoneWeights.from_arrays(dict(npz))
        if "lake" in weights.zones:
            break
    else:
        return None
    grid = open_grid(src.paths[:1], time_zone=src.time_zone, on_error="skip")
    row = np.asarray(weights.matrix[list(weights.zones).index("lake")].todense()).ravel()
    frac = (row / row.sum() if row.sum() > 0 else row).reshape(weights.shape)
    return _edges(np.asarray(grid.lon)), _edges(np.asarray(grid.lat)), frac


def _edges(centres: np.ndarray) -> np.ndarray:
    if len(centres) == 1:
        return np.array([centres[0] - 0.125, centres[0] + 0.125])
    mid = (centres[1:] + centres[:-1]) / 2
    return np.concatenate([[2 * centres[0] - mid[0]], mid, [2 * centres[-1] - mid[-1]]])


def weight_norm(weights: np.ndarray) -> tuple[Normalize, str]:
    """Colour scale for cell weights (percent): linear for a few similar cells, logarithmic over decades.

    With 2 cells the weights are large and similar (a linear 0..max scale shows them); with thousands they
    span several decades (a logarithmic scale keeps the small cells visible).
    """
    pos = weights[weights > 0]
    if pos.size == 0:
        return Normalize(0, 1), "linear"
    lo, hi = float(pos.min()), float(pos.max())
    if pos.size > 2 and hi / lo > 30:
        return LogNorm(vmin=max(lo, hi * 1e-4), vmax=hi), "log"
    return Normalize(vmin=0, vmax=hi), "linear"


def map_figure(
    layers: dict[str, gpd.GeoDataFrame],
    *,
    cells: Cells | None = None,
    inflows: list[str] = (),  # type: ignore[assignment]
    id_field: str = "subbasin_id",
    aoi_field: str = "aoi_id",
) -> Figure:
    """Map in longitude/latitude, two panels: the catchment with its sub-basins (left) and the lake with its AOIs
    labelled by id (right); both show the lake zone's cell weights (percent of the zone) on one colour scale.

    Labels carry a white halo and the lake outline a white casing, so both stay readable on any cell colour.
    """
    fig, (whole, zoom) = plt.subplots(
        1, 2, figsize=(13, 6.2), gridspec_kw={"width_ratios": [1.15, 1]}, layout="constrained"
    )
    mesh = None
    for ax in (whole, zoom):
        mesh = _cells(ax, cells) if cells is not None else None
        _outlines(ax, layers, inflows, id_field, label_subbasins=ax is whole)
        aois = layers.get("aois")
        if aois is not None:
            aois.plot(ax=ax, facecolor="tab:red", alpha=0.35, edgecolor="darkred", linewidth=1.0)
            for _, row in aois.iterrows() if ax is zoom else ():
                p = row.geometry.representative_point()
                ax.annotate(
                    str(row[aoi_field]),
                    (p.x, p.y),
                    xytext=(0, 6),
                    textcoords="offset points",
                    fontsize=9,
                    ha="center",
                    color="darkred",
                    weight="bold",
                    path_effects=_HALO,
                )
        ax.set_xlabel("longitude (degrees east)")
        ax.set_ylabel("latitude (degrees north)")
    outer = next((layers[k] for k in ("subbasins", "catchment", "lake") if layers.get(k) is not None), None)
    _frame(whole, outer, 0.06)
    _frame(zoom, layers.get("lake"), 0.25)
    if mesh is not None and cells is not None:
        kind = "log" if isinstance(mesh.norm, LogNorm) else "linear"
        fig.colorbar(
            mesh,
            ax=[whole, zoom],
            shrink=0.75,
            label=f"lake-surface weight of the cell (% of the lake zone, {kind} scale)",
        )
        zoom.text(
            0.99,
            0.01,
            f"{int((cells[2] > 0).sum())} weighted cell(s)",
            transform=zoom.transAxes,
            ha="right",
            va="bottom",
            fontsize=8,
            path_effects=_HALO,
        )
    handles = [
        Line2D([], [], color="black", lw=1.4, label="lake"),
        Patch(facecolor="tab:red", alpha=0.35, edgecolor="darkred", label="areas of interest (by id)"),
        Line2D([], [], color="tab:green", lw=1.6, label="catchment"),
        Patch(facecolor="none", edgecolor="tab:orange", hatch="//", label="direct inflows"),
        Line2D([], [], color="0.35", lw=0.6, label="sub-basins (by id)"),
    ]
    whole.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=3, fontsize=8, frameon=False)
    whole.set_title("Catchment, sub-basins and direct inflows", fontsize=10)
    zoom.set_title("Lake and areas of interest (by id)", fontsize=10)
    fig.suptitle("Lake, areas of interest, catchment and grid-cell weights")
    return fig


def _cells(ax: plt.Axes, cells: Cells) -> object:
    lon_e, lat_e, w = cells
    pct = 100 * w
    norm, _ = weight_norm(pct)
    return ax.pcolormesh(
        lon_e,
        lat_e,
        np.ma.masked_less_equal(pct, 0),
        cmap="viridis",
        norm=norm,
        alpha=0.75,
        edgecolors="none" if pct.size > 400 else "0.7",
        linewidth=0.5,  # cell edges only while few enough to see
    )


def _outlines(
    ax: plt.Axes, layers: dict[str, gpd.GeoDataFrame], inflows: list[str], id_field: str, *, label_subbasins: bool
) -> None:
    subs = layers.get("subbasins")
    if subs is not None:
        direct = subs[subs[id_field].astype(str).isin(list(inflows))]
        if len(direct):
            direct.plot(ax=ax, facecolor="none", edgecolor="tab:orange", hatch="//", linewidth=1.0)
        subs.boundary.plot(ax=ax, color="0.35", linewidth=0.6)
        for _, row in subs.iterrows() if label_subbasins else ():
            p = row.geometry.representative_point()
            ax.annotate(str(row[id_field]), (p.x, p.y), fontsize=7, color="0.15", ha="center", path_effects=_HALO)
    if layers.get("catchment") is not None:
        layers["catchment"].boundary.plot(ax=ax, color="white", linewidth=3.2)
        layers["catchment"].boundary.plot(ax=ax, color="tab:green", linewidth=1.6)
    if layers.get("lake") is not None:
        layers["lake"].boundary.plot(ax=ax, color="white", linewidth=3.4)
        layers["lake"].boundary.plot(ax=ax, color="black", linewidth=1.4)


def _frame(ax: plt.Axes, layer: gpd.GeoDataFrame | None, pad: float) -> None:
    """Limits around ``layer`` (padded by a fraction of its extent), map aspect at its latitude."""
    if layer is not None:
        x0, y0, x1, y1 = layer.total_bounds
        d = pad * max(x1 - x0, y1 - y0, 0.01)
        ax.set_xlim(x0 - d, x1 + d)
        ax.set_ylim(y0 - d, y1 + d)
    ax.set_aspect(1 / np.cos(np.deg2rad(np.mean(ax.get_ylim()))))
