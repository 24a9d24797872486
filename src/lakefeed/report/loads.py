"""Section 3: inflows and loads: daily inflow, TN/TP loads and flow-weighted mean concentrations, and per
sampled station the load estimators side by side (annual totals with intervals) and the selected one.

Reads ``hydrology_daily`` and ``load_estimates``. Annual totals add up the stored daily loads and their
stored daily lower/upper bounds (the interval is the sum of the bounds, as stored, not recomputed).
Extrapolation warnings (flow outside the sampled range) are listed beside the estimator they apply to.
"""

from __future__ import annotations

import html

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from lakefeed.report._page import (
    ReportContext,
    Section,
    date_axis,
    details,
    figure_html,
    missing,
    not_configured,
    table_html,
)

__all__ = ["annual_totals", "loads_section"]


def loads_section(ctx: ReportContext) -> Section:
    """The inflows and loads section."""
    title = "3. Inflows and nutrient loads"
    if ctx.project.sources.hydrology is None:
        return Section("loads", title, not_configured("hydrological model outputs", "hydrology"))
    daily = ctx.table("hydrology_daily")
    if daily is None:
        return Section("loads", title, missing("no hydrology_daily table (hydrology stage not run)"))
    units = daily.attrs.get("units", {})
    body = figure_html(daily_figure(daily, units), "loads", "daily inflow, loads and flow-weighted concentrations")
    method = str(daily["load_method"].iloc[0]) if "load_method" in daily and len(daily) else ""
    if method:
        body += f"<p>selected estimator per station: <code>{html.escape(method)}</code></p>"
    est = ctx.table("load_estimates")
    if est is None or est.empty:
        body += missing("no load_estimates table (no sampled station configured, or hydrology stage not run)")
        return Section("loads", title, body)
    totals = annual_totals(est)
    body += figure_html(estimators_figure(totals), "estimators", "annual load per estimator and station")
    body += table_html(
        totals.drop(columns=["warnings"]),
        name="load-totals",
        source="load_estimates",
        units={"load": "kg", "lower": "kg", "upper": "kg", "days": "d"},
    )
    warn = totals[totals["warnings"].astype(str) != ""].drop_duplicates(["station", "nutrient", "method"])
    for selected in (True, False):
        part = warn[warn["selected"] == selected]
        items = "".join(
            f"<li><b>{html.escape(f'{r.station} {r.nutrient} {r.method}')}</b>: {html.escape(str(r.warnings))}</li>"
            for r in part.itertuples()
        )
        if items and selected:
            body += (
                '<p class="warn">warnings of the selected estimators (extrapolation: flow outside the sampled '
                f'range):</p><ul class="warn">{items}</ul>'
            )
        elif items:
            body += details(f"warnings of the {len(part)} other estimator(s)", f'<ul class="warn">{items}</ul>')
    return Section("loads", title, body)


def annual_totals(est: pd.DataFrame) -> pd.DataFrame:
    """Per station, nutrient, estimator and calendar year: the sum of the stored daily load and bounds (kg)."""
    frame = est.assign(year=pd.to_datetime(est["date"]).dt.year)
    return (
        frame.groupby(["station", "nutrient", "method", "year"], as_index=False)
        .agg(
            selected=("selected", "any"),
            days=("load", "count"),
            load=("load", "sum"),
            lower=("lower", "sum"),
            upper=("upper", "sum"),
            warnings=("warnings", "first"),
        )
        .assign(warnings=lambda d: d["warnings"].fillna(""))
    )


def daily_figure(daily: pd.DataFrame, units: dict[str, str]) -> Figure:
    """Inflow discharge, TN and TP loads, and TN and TP flow-weighted mean concentrations per day."""
    frame = daily.assign(date=pd.to_datetime(daily["date"])).sort_values("date")
    panels = [
        (["inflow_discharge"], "inflow discharge"),
        ([c for c in ("tn_load", "tp_load") if c in frame], "load"),
        ([c for c in ("tn_fwmc", "tp_fwmc") if c in frame], "flow-weighted mean conc."),
    ]
    panels = [(cols, label) for cols, label in panels if cols and all(c in frame for c in cols)]
    fig, axes = plt.subplots(len(panels), 1, figsize=(10, 1.9 * len(panels) + 0.5), sharex=True, squeeze=False)
    for ax, (cols, label) in zip(axes[:, 0], panels, strict=True):
        for col in cols:
            ax.plot(frame["date"], frame[col], lw=0.8, label=col)
        ax.set_ylabel(f"{label}\n({units.get(cols[0], '?')})", fontsize=8)
        if len(cols) > 1:
            ax.legend(fontsize=7, loc="upper right")
    axes[-1, 0].set_xlabel("date (local calendar day)")
    date_axis(axes[-1, 0])
    axes[0, 0].set_title("Daily inflow to the lake, TN/TP loads and flow-weighted mean concentrations")
    fig.tight_layout()
    return fig


def estimators_figure(totals: pd.DataFrame) -> Figure:
    """Annual load per estimator with its interval (error bar), one panel per station and nutrient."""
    groups = list(totals.groupby(["station", "nutrient"]))
    rows = max(len(g) for _, g in groups)
    fig, axes = plt.subplots(1, len(groups), figsize=(max(5, 4.2 * len(groups)), 0.3 * rows + 1.4), squeeze=False)
    for ax, ((station, nutrient), sel) in zip(axes[0], groups, strict=True):
        sel = sel.reset_index(drop=True)
        labels = [f"{m} {y}" for m, y in zip(sel["method"], sel["year"], strict=True)]
        y = np.arange(len(sel))
        colours = ["tab:green" if s else "0.6" for s in sel["selected"]]
        ax.barh(y, sel["load"] / 1000, color=colours)
        err = np.vstack([(sel["load"] - sel["lower"]).clip(lower=0), (sel["upper"] - sel["load"]).clip(lower=0)])
        ax.errorbar(sel["load"] / 1000, y, xerr=err / 1000, fmt="none", color="black", capsize=3, lw=0.8)
        ax.set_yticks(y, labels, fontsize=7)
        ax.invert_yaxis()
        ax.set_title(f"{station}: {nutrient.upper()}", fontsize=9)
        ax.set_xlabel("annual load (t)", fontsize=8)
        ax.set_ylabel("estimator (method, year)", fontsize=8)
    fig.suptitle("Annual loads per estimator (green: selected; bars: interval)", fontsize=10)
    fig.tight_layout()
    return fig
