"""Section 4: the chlorophyll-a target per AOI: observations by sensor and status, the fused daily series
with its uncertainty band and the configured thresholds, and the Carlson TSI and trophic class over time.

Reads ``target_obs`` and ``target_daily``; threshold levels come from the lake config. The caution stands
next to the trophic and threshold content. Must not compute science.
"""

from __future__ import annotations

import html

import matplotlib.pyplot as plt
import pandas as pd
from matplotlib.axes import Axes
from matplotlib.figure import Figure

from lakefeed.extract.trophic import CARLSON_CLASSES, carlson_tsi
from lakefeed.report._page import (
    ReportContext,
    Section,
    caution_html,
    date_axis,
    figure_html,
    missing,
    not_configured,
    plain_log_axes,
    table_html,
)

__all__ = ["target_section"]

_STYLE = {"accepted": dict(marker="o", s=14), "rejected": dict(marker="x", s=14), "outlier": dict(marker="^", s=30)}


def target_section(ctx: ReportContext, caution: str) -> Section:
    """The chlorophyll-a target section."""
    title = "4. Chlorophyll-a target"
    if ctx.project.sources.scenes is None:
        return Section("target", title, not_configured("satellite chlorophyll-a scenes", "scenes"))
    obs = ctx.table("target_obs")
    if obs is None or obs.empty:
        return Section("target", title, missing("no target_obs table (target stage not run)"))
    daily = ctx.table("target_daily")
    thresholds = [(t.name, t.value) for t in ctx.project.lake.thresholds]
    unit = obs.attrs.get("units", {}).get("median", "mg m-3")
    body = figure_html(
        target_figure(obs, daily, thresholds, unit),
        "target",
        "chlorophyll-a per AOI: observations by sensor and status, fused daily series with uncertainty band",
    )
    body += table_html(status_counts(obs), name="target-status", source="target_obs")
    reasons = obs.loc[~obs["accepted"].astype(bool), "reason"].fillna("").astype(str)
    reasons = reasons.str.replace(r"\d+(\.\d+)?", "N", regex=True).value_counts().rename_axis("reason")
    if len(reasons):
        body += "<p>rejection reasons (numbers replaced by N):</p>"
        body += table_html(reasons.reset_index(name="scenes"), name="target-reasons", source="target_obs")
    if daily is None or daily.empty:
        body += missing("no target_daily table (target stage not run or nothing accepted)")
        return Section("target", title, body)
    body += "<h3>Trophic state (Carlson TSI) and classes over time</h3>" + caution_html(caution)
    body += figure_html(tsi_figure(daily, thresholds), "tsi", "Carlson TSI and trophic class per AOI over time")
    levels = "".join(
        f"<li>{html.escape(t.name)}: {t.value:g} {unit}"
        f"{' (' + html.escape(t.description) + ')' if t.description else ''}</li>"
        for t in ctx.project.lake.thresholds
    )
    if levels:
        body += f"<p>configured chlorophyll-a threshold levels (drawn as dashed lines):</p><ul>{levels}</ul>"
    body += table_html(class_counts(daily), name="target-classes", source="target_daily", units={"days": "d"})
    return Section("target", title, body)


def status_counts(obs: pd.DataFrame) -> pd.DataFrame:
    """Scenes per AOI and sensor: accepted, rejected, outliers, unscreened."""
    screened = obs["screened"] if "screened" in obs else obs["accepted"]
    outlier = obs["outlier"].fillna(False).astype(bool)
    accepted = obs["accepted"].astype(bool)
    return (
        obs.assign(
            outlier=outlier,
            rejected=~accepted,
            accepted_=accepted & ~outlier,
            unscreened=accepted & ~screened.fillna(False).astype(bool),
        )
        .groupby(["aoi", "sensor"])
        .agg(
            scenes=("scene_id", "size"),
            accepted=("accepted_", "sum"),
            rejected=("rejected", "sum"),
            outliers=("outlier", "sum"),
            unscreened=("unscreened", "sum"),
        )
        .reset_index()
    )


def class_counts(daily: pd.DataFrame) -> pd.DataFrame:
    """Days per AOI and class (Carlson and OECD schemes) and threshold exceedances."""
    cols = [c for c in ("carlson_class", "oecd_class") if c in daily]
    rows = []
    for col in cols:
        counts = daily.groupby(["aoi", col]).size().rename("days").reset_index().rename(columns={col: "class"})
        rows.append(counts.assign(scheme=col.removesuffix("_class")))
    for col in [c for c in daily.columns if c.startswith("exceeds_")]:
        counts = daily[daily[col].fillna(False).astype(bool)].groupby("aoi").size().rename("days").reset_index()
        rows.append(counts.assign(scheme="threshold", **{"class": col.removeprefix("exceeds_")}))
    if not rows:
        return pd.DataFrame(columns=["aoi", "scheme", "class", "days"])
    return pd.concat(rows, ignore_index=True)[["aoi", "scheme", "class", "days"]]


def target_figure(
    obs: pd.DataFrame, daily: pd.DataFrame | None, thresholds: list[tuple[str, float]], unit: str
) -> Figure:
    """Per AOI: observations by sensor (accepted, rejected, outlier), fused daily series with its band."""
    aois = sorted(obs["aoi"].unique())
    fig, axes = plt.subplots(len(aois), 1, figsize=(10, 2.5 * len(aois) + 0.6), sharex=True, squeeze=False)
    sensors = sorted(obs["sensor"].unique())
    colours = dict(zip(sensors, ["tab:blue", "tab:orange", "tab:purple", "tab:cyan", "tab:olive"], strict=False))
    outlier = obs["outlier"].fillna(False).astype(bool)
    accepted = obs["accepted"].fillna(False).astype(bool)
    kinds = {"accepted": accepted & ~outlier, "rejected": ~accepted & ~outlier, "outlier": outlier}
    for ax, aoi in zip(axes[:, 0], aois, strict=True):
        here = obs["aoi"] == aoi
        for sensor in sensors:
            for kind, mask in kinds.items():
                sel = obs[here & mask & (obs["sensor"] == sensor) & (obs["median"] > 0)]
                if len(sel):
                    ax.scatter(
                        pd.to_datetime(sel["date"]),
                        sel["median"],
                        color=colours.get(sensor, "0.4"),
                        label=f"{sensor} {kind}",
                        alpha=0.8 if kind == "accepted" else 0.6,
                        **_STYLE[kind],
                    )
        if daily is not None:
            d = daily[daily["aoi"] == aoi].assign(date=lambda f: pd.to_datetime(f["date"])).sort_values("date")
            lo = (d["chla"] - d["chla_uncertainty"]).clip(lower=d["chla"] * 0.05)
            ax.fill_between(
                d["date"],
                lo,
                d["chla"] + d["chla_uncertainty"],
                color="0.2",
                alpha=0.18,
                lw=0,
                label="fused ±1 uncertainty",
            )
            ax.plot(d["date"], d["chla"], color="black", lw=0.9, label="fused daily")
        for name, value in thresholds:
            _threshold_line(ax, value, f"{name} {value:g}", lw=0.9)
        ax.set_yscale("log")
        plain_log_axes(ax)
        ax.set_ylabel(f"{aoi}\nchl-a ({unit})", fontsize=8)
    axes[0, 0].legend(fontsize=6, ncol=4, loc="upper left")
    axes[-1, 0].set_xlabel("date (local calendar day)")
    date_axis(axes[-1, 0])
    axes[0, 0].set_title("Chlorophyll-a per AOI: observations by sensor and status, fused series (threshold lines)")
    fig.tight_layout()
    return fig


def tsi_figure(daily: pd.DataFrame, thresholds: list[tuple[str, float]]) -> Figure:
    """Carlson TSI per AOI over time, points coloured by Carlson class, and the OECD class as a step line."""
    aois = sorted(daily["aoi"].unique())
    fig, axes = plt.subplots(len(aois), 1, figsize=(10, 2.1 * len(aois) + 0.6), sharex=True, squeeze=False)
    cmap = plt.get_cmap("RdYlGn_r", len(CARLSON_CLASSES))
    for ax, aoi in zip(axes[:, 0], aois, strict=True):
        d = daily[daily["aoi"] == aoi].assign(date=lambda f: pd.to_datetime(f["date"])).sort_values("date")
        ax.plot(d["date"], d["tsi"], color="0.5", lw=0.6)
        classes = d.get("carlson_class", pd.Series("", index=d.index)).astype(str)
        for k, name in enumerate(CARLSON_CLASSES):
            sel = d[classes == name]
            if len(sel):
                ax.scatter(sel["date"], sel["tsi"], s=14, color=cmap(k), label=f"Carlson: {name}", zorder=3)
        unscreened = d[~d.get("screened", pd.Series(True, index=d.index)).fillna(False).astype(bool)]
        if len(unscreened):
            ax.scatter(
                unscreened["date"],
                unscreened["tsi"],
                s=40,
                facecolors="none",
                edgecolors="black",
                label="unscreened day",
                zorder=4,
            )
        for name, value in thresholds:  # the thresholds on the TSI scale
            _threshold_line(ax, float(carlson_tsi(value)), f"{name} ({value:g} mg m-3)", lw=0.8)
        lines = [float(carlson_tsi(v)) for _, v in thresholds]
        lo, hi = ax.get_ylim()
        ax.set_ylim(min([lo, *lines]) - 2, max([hi, *lines]) + 6)  # every threshold line and its label inside
        ax.set_ylabel(f"{aoi}\nTSI (1)", fontsize=8)
        ax.legend(fontsize=6, loc="upper left", ncol=3)
    axes[-1, 0].set_xlabel("date (local calendar day)")
    date_axis(axes[-1, 0])
    axes[0, 0].set_title("Carlson trophic state index per AOI, coloured by class (threshold lines dashed)")
    fig.tight_layout()
    return fig


def _threshold_line(ax: Axes, y: float, label: str, *, lw: float) -> None:
    """A configured threshold drawn as a dashed line at ``y`` with its label at the right end."""
    ax.axhline(y, color="crimson", ls="--", lw=lw, alpha=0.8)
    ax.annotate(
        label, (1.0, y), xycoords=("axes fraction", "data"), ha="right", va="bottom", fontsize=6, color="crimson"
    )
