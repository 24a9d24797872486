"""Section 6: the sampling: calendar of accepted observation days per AOI, gaps between them per AOI, and
the observation-count warnings from ``diagnostics`` with the origin of the rule stated.

Reads ``target_daily`` (else the accepted rows of ``target_obs``) and ``diagnostics``.
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
    figure_html,
    missing,
    not_configured,
    table_html,
)

__all__ = ["sampling_section"]

RULE_NOTE = (
    "The observation-count warnings apply a rule of thumb for data-driven models (common practice, not a law or "
    "a standard): fewer accepted observations, or a season with few of them, make a fitted model less reliable."
)


def sampling_section(ctx: ReportContext) -> Section:
    """The sampling calendar and gaps section."""
    title = "6. Sampling calendar and gaps"
    if ctx.project.sources.scenes is None:
        return Section("sampling", title, not_configured("satellite chlorophyll-a scenes", "scenes"))
    daily, obs = ctx.table("target_daily"), ctx.table("target_obs")
    if daily is not None:
        dates, source = daily[["aoi", "date"]], "target_daily"
    elif obs is not None:
        dates, source = obs.loc[obs["accepted"].astype(bool), ["aoi", "date"]].drop_duplicates(), "target_obs"
    else:
        return Section("sampling", title, missing("no target_obs table (target stage not run)"))
    body = figure_html(calendar_figure(dates), "calendar", f"sampling calendar and gaps per AOI ({source})")
    diag = ctx.table("diagnostics")
    if diag is None:
        return Section("sampling", title, body + missing("no diagnostics table (features stage not run)"))
    wanted = (
        "aoi",
        "n_obs",
        "obs_per_year",
        "gap_median_days",
        "gap_p90_days",
        "gap_max_days",
        "longest_gap_start",
        "longest_gap_end",
        "coverage_fraction",
        "warnings",
    )
    keep = [c for c in wanted if c in diag]
    body += table_html(diag[keep], name="diagnostics", source="diagnostics", units=diag.attrs.get("units", {}))
    body += f'<p class="note">{html.escape(RULE_NOTE)}</p>'
    return Section("sampling", title, body)


def calendar_figure(dates: pd.DataFrame) -> Figure:
    """Left: a tick per observation day per AOI on a readable date axis. Right: gap histogram per AOI."""
    fig, (cal, hist) = plt.subplots(
        1, 2, figsize=(11, 0.5 * dates["aoi"].nunique() + 2.4), gridspec_kw={"width_ratios": [2.3, 1]}
    )
    aois = sorted(dates["aoi"].unique())
    gaps: dict[str, np.ndarray] = {}
    for i, aoi in enumerate(aois):
        d = pd.to_datetime(dates.loc[dates["aoi"] == aoi, "date"]).drop_duplicates().sort_values()
        cal.scatter(d, np.full(len(d), i), marker="|", s=140, color=f"C{i}")
        gaps[aoi] = d.diff().dt.days.dropna().to_numpy()
    cal.set_yticks(range(len(aois)), aois, fontsize=8)
    cal.set_ylim(-0.7, len(aois) - 0.3)
    cal.set_ylabel("AOI (id)")
    cal.set_xlabel("date of accepted observation (local day)")
    date_axis(cal)
    cal.set_title("Sampling calendar per AOI")
    top = max((g.max() for g in gaps.values() if g.size), default=10)
    bins = np.arange(0, top + 6, 5)
    for i, aoi in enumerate(aois):
        if gaps[aoi].size:
            hist.hist(gaps[aoi], bins=bins, histtype="step", lw=1.4, color=f"C{i}", label=aoi)
    hist.set_xlabel("gap between observations (days)")
    hist.set_ylabel("gaps (count)")
    hist.set_title("Gaps per AOI (not pooled)")
    hist.legend(fontsize=7)
    fig.tight_layout()
    return fig
