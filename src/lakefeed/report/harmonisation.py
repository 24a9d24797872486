"""Section 5: sensor harmonisation: each sensor's fitted bias against the reference, the matchup count
and a scatter of the matchups.

Reads ``sensor_bias`` (the fits as stored) and ``target_obs``; the matchup pairs are drawn with the same
pairing function and window the target stage fits on (:func:`lakefeed.extract.harmonise.matchups`), so the
scatter shows the pairs behind the stored counts.
"""

from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from lakefeed.report._page import (
    ReportContext,
    Section,
    figure_html,
    missing,
    not_configured,
    plain_log_axes,
    table_html,
)

__all__ = ["harmonisation_section"]


def harmonisation_section(ctx: ReportContext) -> Section:
    """The sensor harmonisation section."""
    from lakefeed.extract.harmonise import matchups

    title = "5. Sensor harmonisation"
    lake = ctx.project.lake
    if ctx.project.sources.scenes is None:
        return Section("harmonisation", title, not_configured("satellite chlorophyll-a scenes", "scenes"))
    reference = lake.reference_sensor
    if reference is None:
        return Section("harmonisation", title, missing("no reference sensor configured: sensors are fused unadjusted"))
    fits, obs = ctx.table("sensor_bias"), ctx.table("target_obs")
    if fits is None or obs is None:
        return Section("harmonisation", title, missing("no sensor_bias table (target stage not run)"))
    use = obs[obs["accepted"].astype(bool) & ~obs["outlier"].fillna(False).astype(bool) & (obs["median"] > 0)]
    pairs = matchups(use, reference=reference, window_days=lake.target.matchup_window_days)
    unit = obs.attrs.get("units", {}).get("median", "mg m-3")
    body = figure_html(matchup_figure(pairs, fits, reference, unit), "matchups", "matchup scatter per sensor")
    cols = [
        c
        for c in (
            "sensor",
            "reference",
            "model",
            "n",
            "n_excluded",
            "ratio",
            "ln_ratio_se",
            "slope",
            "intercept",
            "r2",
            "adjusted",
            "note",
        )
        if c in fits
    ]
    body += table_html(fits[cols], name="sensor-bias", source="sensor_bias", units=fits.attrs.get("units", {}))
    return Section("harmonisation", title, body)


def matchup_figure(pairs: pd.DataFrame, fits: pd.DataFrame, reference: str, unit: str) -> Figure:
    """Sensor value against the reference value (log-log), 1:1 line and the fitted ratio where one was fitted."""
    sensors = [s for s in fits["sensor"] if s != reference] or ["(none)"]
    fig, axes = plt.subplots(1, len(sensors), figsize=(max(4.5, 4.2 * len(sensors)), 4), squeeze=False)
    for ax, sensor in zip(axes[0], sensors, strict=True):
        sel = pairs[pairs["sensor"] == sensor]
        fit = fits[fits["sensor"] == sensor]
        values = pd.concat([sel["value"], sel["ref_value"]]).astype(float)
        lo, hi = (values.min() * 0.7, values.max() * 1.4) if len(values) else (0.5, 100.0)
        line = np.geomspace(lo, hi, 20)
        ax.plot(line, line, color="0.5", lw=0.8, ls=":", label="1:1")
        if len(sel):
            for aoi, grp in sel.groupby("aoi"):
                ax.scatter(grp["ref_value"], grp["value"], s=16, label=f"AOI {aoi}")
        ratio = float(fit["ratio"].iloc[0]) if len(fit) and pd.notna(fit["ratio"].iloc[0]) else None
        if ratio is not None:
            ax.plot(line, ratio * line, color="crimson", lw=1, label=f"fitted ratio {ratio:.3g}")
        n = int(fit["n"].iloc[0]) if len(fit) else len(sel)
        ax.set_xscale("log")
        ax.set_yscale("log")
        plain_log_axes(ax, "xy")
        ax.set_xlabel(f"{reference} (reference) chl-a ({unit})")
        ax.set_ylabel(f"{sensor} chl-a ({unit})")
        ax.set_title(f"{sensor} vs {reference}: {n} matchup(s)", fontsize=9)
        ax.legend(fontsize=6, loc="upper left")
    fig.tight_layout()
    return fig
