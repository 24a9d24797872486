"""Section 2: daily weather drivers of the lake surface and the catchment, valid fraction and flagged days.

Reads ``drivers_daily``; units come from the store. Catchment precipitation is shown beside the lake's
because it drives the loads. Must not compute science.
"""

from __future__ import annotations

import matplotlib.pyplot as plt
import pandas as pd
from matplotlib.figure import Figure

from lakefeed.report._page import ReportContext, Section, date_axis, figure_html, missing, table_html

__all__ = ["drivers_figure", "weather_section"]

PANELS = (
    ("air_temperature_mean", "air temperature"),
    ("precipitation_sum", "precipitation"),
    ("shortwave_radiation_mean", "shortwave radiation"),
    ("wind_speed_mean", "wind speed"),
    ("valid_fraction", "valid fraction of hours"),
)
#: A flag of the zone (smaller than one grid cell), not of a day: left out of the flagged-day count.
ZONE_FLAG = "sub_cell_zone"
ZONES = (("lake", "tab:blue"), ("catchment", "tab:brown"))


def weather_section(ctx: ReportContext) -> Section:
    """The weather drivers section."""
    title = "2. Weather drivers (lake surface and catchment)"
    drivers = ctx.table("drivers_daily")
    if drivers is None:
        return Section("weather", title, missing("no drivers_daily table (weather stage not run)"))
    units = drivers.attrs.get("units", {})
    body = figure_html(drivers_figure(drivers, units), "drivers", "daily weather drivers, lake and catchment zones")
    day_flags = drivers["flags"].fillna("").astype(str).str.replace(ZONE_FLAG, "", regex=False).str.strip(";")
    flagged = day_flags != ""
    summary = (
        drivers.assign(flagged=flagged, date=pd.to_datetime(drivers["date"]))
        .groupby("zone")
        .agg(
            days=("date", "size"),
            first=("date", "min"),
            last=("date", "max"),
            air_temperature_mean=("air_temperature_mean", "mean"),
            precipitation_total=("precipitation_sum", "sum"),
            valid_fraction_min=("valid_fraction", "min"),
            flagged_days=("flagged", "sum"),
        )
        .reset_index()
    )
    u = {
        "air_temperature_mean": units.get("air_temperature_mean", ""),
        "precipitation_total": "mm",
        "valid_fraction_min": "1",
        "flagged_days": "d",
        "days": "d",
    }
    body += table_html(summary, name="drivers", source="drivers_daily", units=u)
    kinds = drivers["flags"].fillna("").astype(str).str.split(";").explode()
    kinds = kinds[kinds != ""].value_counts()
    if len(kinds):
        body += "<p>flags over all zones (zone-days): " + ", ".join(f"{k}: {v}" for k, v in kinds.items())
        body += f"; flagged_days counts days with a flag other than {ZONE_FLAG} (a property of the zone).</p>"
    return Section("weather", title, body)


def drivers_figure(drivers: pd.DataFrame, units: dict[str, str]) -> Figure:
    """One panel per driver, lake and catchment zones overlaid; flagged days marked under each panel."""
    frame = drivers.assign(date=pd.to_datetime(drivers["date"])).sort_values("date")
    panels = [(c, label) for c, label in PANELS if c in frame]
    fig, axes = plt.subplots(len(panels), 1, figsize=(10, 1.7 * len(panels) + 0.6), sharex=True, squeeze=False)
    zones = [(z, c) for z, c in ZONES if z in set(frame["zone"])]
    for ax, (col, label) in zip(axes[:, 0], panels, strict=True):
        for zone, colour in zones:
            sel = frame[frame["zone"] == zone]
            ax.plot(sel["date"], sel[col], lw=0.7, color=colour, label=f"zone {zone}")
            bad = sel[sel["flags"].fillna("").astype(str).str.replace(ZONE_FLAG, "").str.strip(";") != ""]
            if len(bad) and col != "valid_fraction":
                ax.plot(bad["date"], bad[col].where(bad[col].notna(), 0), "x", color="red", ms=4)
        unit = units.get(col, "1")
        ax.set_ylabel(f"{label}\n({unit})", fontsize=8)
    handles, labels = axes[0, 0].get_legend_handles_labels()
    handles.append(plt.Line2D([], [], marker="x", color="red", ls="none"))
    labels.append("flagged day")
    axes[0, 0].legend(handles, labels, fontsize=7, loc="upper right", ncol=3)
    axes[-1, 0].set_xlabel("date (local calendar day)")
    date_axis(axes[-1, 0])
    axes[0, 0].set_title("Daily weather drivers: lake surface and catchment zones")
    fig.tight_layout()
    return fig
