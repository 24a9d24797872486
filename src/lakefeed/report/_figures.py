"""Figures of the quality report: matplotlib in, base64 PNG out.

Takes frames read from the store (and geometry for the map); returns PNG bytes encoded as base64
strings. Uses the non-interactive Agg backend. Must not read or write files.
"""

from __future__ import annotations

import base64
import io
from collections.abc import Mapping

import geopandas as gpd
import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.figure import Figure

__all__ = ["calendar_figure", "drivers_figure", "map_figure", "target_figure", "to_png64"]

DRIVER_PANELS = (
    ("air_temperature_mean", "air temperature"),
    ("precipitation_sum", "precipitation"),
    ("shortwave_radiation_mean", "shortwave radiation"),
    ("wind_speed_mean", "wind speed"),
)


def to_png64(fig: Figure) -> str:
    """Render a figure to a base64-encoded PNG (and close it)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90, bbox_inches="tight")
    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def map_figure(
    layers: Mapping[str, gpd.GeoDataFrame | None],
    *,
    cells: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
    inflows: list[str] = (),  # type: ignore[assignment]
    id_field: str = "subbasin_id",
) -> Figure:
    """Map in longitude/latitude: grid cells shaded by weight, sub-basins, catchment, inflows, lake, AOIs.

    ``cells``: (longitude edges, latitude edges, weight fraction per cell) of the lake-surface zone;
    weights are the covered fraction of the zone's area (0..1, sums to 1 over cells).
    """
    fig, ax = plt.subplots(figsize=(7.5, 6.5))
    if cells is not None:
        lon_e, lat_e, w = cells
        masked = np.ma.masked_less_equal(w, 0)
        mesh = ax.pcolormesh(lon_e, lat_e, masked, cmap="Blues", alpha=0.8, edgecolors="0.6", linewidth=0.3)
        fig.colorbar(mesh, ax=ax, shrink=0.7, label="lake-surface weight (fraction of area)")
    subs = layers.get("subbasins")
    if subs is not None:
        subs.boundary.plot(ax=ax, color="0.5", linewidth=0.6)
        direct = subs[subs[id_field].astype(str).isin(list(inflows))]
        if len(direct):
            direct.plot(ax=ax, color="tab:orange", alpha=0.35)
        for _, row in subs.iterrows():
            p = row.geometry.representative_point()
            ax.annotate(str(row[id_field]), (p.x, p.y), fontsize=6, color="0.3", ha="center")
    if layers.get("catchment") is not None:
        layers["catchment"].boundary.plot(ax=ax, color="tab:green", linewidth=1.6)
    if layers.get("lake") is not None:
        layers["lake"].plot(ax=ax, facecolor="none", edgecolor="navy", linewidth=1.4)
    if layers.get("aois") is not None:
        layers["aois"].plot(ax=ax, facecolor="tab:red", alpha=0.35, edgecolor="darkred")
    handles = [
        matplotlib.lines.Line2D([], [], color="navy", label="lake"),
        matplotlib.patches.Patch(color="tab:red", alpha=0.35, label="areas of interest"),
        matplotlib.lines.Line2D([], [], color="tab:green", label="catchment"),
        matplotlib.patches.Patch(color="tab:orange", alpha=0.35, label="direct inflows"),
    ]
    ax.legend(handles=handles, loc="upper left", fontsize=7)
    frame = next((layers[k] for k in ("subbasins", "catchment", "lake") if layers.get(k) is not None), None)
    if frame is not None:
        x0, y0, x1, y1 = frame.total_bounds
        pad = 0.15 * max(x1 - x0, y1 - y0, 0.05)
        ax.set_xlim(x0 - pad, x1 + pad)
        ax.set_ylim(y0 - pad, y1 + pad)
    ax.set_xlabel("longitude (degrees east)")
    ax.set_ylabel("latitude (degrees north)")
    ax.set_aspect(1 / np.cos(np.deg2rad(np.mean(ax.get_ylim()))))
    ax.set_title("Lake, areas of interest, catchment and grid-cell weights")
    return fig


def drivers_figure(drivers: pd.DataFrame, units: Mapping[str, str], *, zone: str = "lake") -> Figure:
    """Daily driver series of one zone, one panel per driver (units from the store)."""
    frame = drivers[drivers["zone"] == zone] if "zone" in drivers else drivers
    frame = frame.assign(date=pd.to_datetime(frame["date"])).sort_values("date")
    panels = [(c, label) for c, label in DRIVER_PANELS if c in frame]
    fig, axes = plt.subplots(len(panels) or 1, 1, figsize=(9, 1.8 * max(1, len(panels))), sharex=True, squeeze=False)
    for ax, (col, label) in zip(axes[:, 0], panels, strict=False):
        ax.plot(frame["date"], frame[col], lw=0.7)
        ax.set_ylabel(f"{label}\n({units.get(col, '?')})", fontsize=8)
    axes[0, 0].set_title(f"Daily weather drivers, zone {zone!r}")
    return fig


def target_figure(obs: pd.DataFrame, units: Mapping[str, str]) -> Figure:
    """Chlorophyll-a per AOI: accepted, rejected and outlier observations, by sensor."""
    aois = sorted(obs["aoi"].unique())
    fig, axes = plt.subplots(len(aois), 1, figsize=(9, 2.2 * len(aois)), sharex=True, squeeze=False)
    sensors = sorted(obs["sensor"].unique())
    colours = dict(zip(sensors, plt.rcParams["axes.prop_cycle"].by_key()["color"], strict=False))
    outlier = obs["outlier"].fillna(False).astype(bool) if "outlier" in obs else pd.Series(False, index=obs.index)
    accepted = obs["accepted"].fillna(False).astype(bool)
    kinds = {
        "accepted": accepted & ~outlier,
        "rejected": ~accepted & ~outlier,
        "outlier": outlier,
    }
    style = {"accepted": dict(marker="o", s=12), "rejected": dict(marker="x", s=14), "outlier": dict(marker="^", s=28)}
    for ax, aoi in zip(axes[:, 0], aois, strict=True):
        here = obs["aoi"] == aoi
        for sensor in sensors:
            for kind, mask in kinds.items():
                sel = obs[here & mask & (obs["sensor"] == sensor)]
                if len(sel):
                    ax.scatter(
                        pd.to_datetime(sel["time"]),
                        sel["median"],
                        color=colours[sensor],
                        label=f"{sensor} {kind}",
                        **style[kind],
                    )
        ax.set_yscale("log")
        ax.set_ylabel(f"{aoi}\n({units.get('median', 'mg m-3')})", fontsize=8)
        ax.legend(fontsize=6, ncol=3, loc="upper left")
    axes[0, 0].set_title("Chlorophyll-a AOI medians by sensor: accepted, rejected, outlier")
    return fig


def calendar_figure(dates: pd.DataFrame) -> Figure:
    """Sampling calendar (accepted observation dates per AOI) and histogram of gaps between them (days)."""
    fig, (cal, hist) = plt.subplots(1, 2, figsize=(10, 2.8), gridspec_kw={"width_ratios": [2.2, 1]})
    aois = sorted(dates["aoi"].unique())
    gaps = []
    for i, aoi in enumerate(aois):
        d = pd.to_datetime(dates.loc[dates["aoi"] == aoi, "date"]).sort_values()
        cal.scatter(d, np.full(len(d), i), marker="|", s=120)
        gaps.append(d.diff().dt.days.dropna().to_numpy())
    cal.set_yticks(range(len(aois)), aois, fontsize=8)
    cal.set_title("Sampling calendar (accepted observations)")
    allgaps = np.concatenate(gaps) if gaps else np.array([])
    if allgaps.size:
        hist.hist(allgaps, bins=np.arange(0, allgaps.max() + 6, 5))
    hist.set_xlabel("gap between observations (days)")
    hist.set_ylabel("count")
    hist.set_title("Gap histogram")
    return fig
