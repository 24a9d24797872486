"""Section 7: forecast bias against lead time, raw and adjusted, per variable and evaluation method; the
full evaluation table behind a collapsible element.

Reads ``forecast_evaluation`` (units per row in its ``unit`` column).
"""

from __future__ import annotations

import math

import matplotlib.pyplot as plt
import pandas as pd
from matplotlib.figure import Figure

from lakefeed.report._page import ReportContext, Section, details, figure_html, missing, not_configured, table_html

__all__ = ["forecast_section"]


def forecast_section(ctx: ReportContext) -> Section:
    """The forecast bias section."""
    title = "7. Forecast bias by lead time"
    if ctx.project.sources.forecast is None:
        return Section("forecast", title, not_configured("archived weather forecasts", "forecast"))
    ev = ctx.table("forecast_evaluation")
    if ev is None or ev.empty:
        return Section("forecast", title, missing("no forecast_evaluation table (forecast stage not run)"))
    body = figure_html(bias_figure(ev), "forecast", "mean forecast bias against lead time, raw and adjusted")
    table = table_html(
        ev.drop(columns=["lake"]), name="forecast", source="forecast_evaluation", units=ev.attrs.get("units", {})
    )
    body += details(f"full forecast evaluation table ({len(ev)} rows; units in the unit column)", table)
    return Section("forecast", title, body)


def bias_figure(ev: pd.DataFrame) -> Figure:
    """One panel per variable: mean bias (forecast - reference) against lead, raw and adjusted, per method."""
    variables = list(dict.fromkeys(ev["variable"]))
    ncols = 3
    nrows = math.ceil(len(variables) / ncols)
    fig, axes = plt.subplots(nrows, ncols, figsize=(11, 2.4 * nrows + 0.5), squeeze=False, sharex=True)
    methods = list(dict.fromkeys(ev["method"]))
    for k, var in enumerate(variables):
        ax = axes[k // ncols, k % ncols]
        sel = ev[ev["variable"] == var]
        for j, method in enumerate(methods):
            m = sel[sel["method"] == method].sort_values("lead_days")
            style = ["-", "--", ":"][j % 3]
            ax.plot(
                m["lead_days"], m["mean_bias_raw"], style, color="tab:red", marker="o", ms=3, label=f"raw ({method})"
            )
            ax.plot(
                m["lead_days"],
                m["mean_bias_adjusted"],
                style,
                color="tab:blue",
                marker="o",
                ms=3,
                label=f"adjusted ({method})",
            )
        ax.axhline(0, color="0.5", lw=0.6)
        unit = str(sel["unit"].iloc[0]) if "unit" in sel and len(sel) else "?"
        ax.set_title(var, fontsize=8)
        ax.set_ylabel(f"mean bias ({unit})", fontsize=7)
        ax.set_xlabel("lead time (days)", fontsize=7)
        ax.tick_params(labelsize=7)
    for k in range(len(variables), nrows * ncols):
        axes[k // ncols, k % ncols].set_visible(False)
    axes[0, 0].legend(fontsize=6)
    fig.suptitle("Forecast bias against lead time (forecast minus reanalysis), raw and bias-adjusted", fontsize=10)
    fig.tight_layout()
    return fig
