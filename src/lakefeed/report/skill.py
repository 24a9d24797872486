"""Report section: baseline skill by lead (figure) and the feature-screening summary (tables).

Takes the report context; reads ``baseline_skill`` and ``feature_screening`` (written by
:mod:`lakefeed.stages.skill`) and returns a :class:`~lakefeed.report._page.Section`: an inline PNG of the RMSE
of persistence and climatology by lead per AOI (pooled test rows of all folds, ``cv``), a table of the
baselines' continuous scores, a table of kept and dropped features by reason, and the caution. A missing
table gives a note instead. Must not compute science: it shows what the stage stored.
"""

from __future__ import annotations

import html

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import pandas as pd
from matplotlib.figure import Figure

from lakefeed.report._page import ReportContext, Section, figure_html, missing, table_html
from lakefeed.verify import CAUTION

__all__ = ["skill_figure", "skill_section"]

_STYLE = {"persistence": ("tab:blue", "o"), "climatology": ("tab:orange", "s")}


def skill_figure(scores: pd.DataFrame, *, fold: str = "cv") -> Figure:
    """RMSE (mg m-3, and of ln chla) of each baseline against lead time (days), one column of panels per AOI."""
    rows = scores[(scores["fold"] == fold) & scores["metric"].isin(["rmse", "rmse_log"])]
    aois = sorted(rows["aoi"].unique())
    fig, axes = plt.subplots(2, max(len(aois), 1), figsize=(3.6 * max(len(aois), 1), 5.2), squeeze=False, sharex=True)
    for j, aoi in enumerate(aois):
        for i, (metric, label) in enumerate((("rmse", "RMSE (mg m-3)"), ("rmse_log", "RMSE of ln chla (1)"))):
            ax = axes[i][j]
            for baseline, (colour, marker) in _STYLE.items():
                s = rows[(rows["aoi"] == aoi) & (rows["baseline"] == baseline) & (rows["metric"] == metric)]
                s = s.sort_values("lead_days")
                ax.plot(s["lead_days"], s["value"], marker=marker, color=colour, label=baseline)
            ax.set_ylim(0, ax.get_ylim()[1] * 1.08)
            ax.grid(alpha=0.3)
            if j == 0:
                ax.set_ylabel(label)
            if i == 0:
                ax.set_title(aoi)
            else:
                ax.set_xlabel("lead (days)")
    axes[0][0].legend(fontsize=8)
    fig.suptitle(f"Baseline skill by lead (fold {fold}: test rows of all folds, climatology out of sample)")
    fig.tight_layout()
    return fig


def _screening_summary(screening: pd.DataFrame) -> pd.DataFrame:
    rows = screening[screening["fold"] == "all"]
    reason = rows["reason"].str.split(":").str[0]
    counts = pd.crosstab([rows["aoi"], rows["lead_days"]], reason).reset_index()
    counts.columns.name = None
    return counts.rename(columns={"ok": "kept", "redundant_with": "redundant"})


def skill_section(ctx: ReportContext) -> Section:
    """Baseline skill by lead (figure and table of the out-of-sample scores) and the feature-screening summary."""
    parts = []
    scores = ctx.table("baseline_skill")
    if scores is None:
        parts.append(missing("no baseline_skill table: run the skill stage (lakefeed features, build or refresh)"))
    else:
        parts.append(figure_html(skill_figure(scores), "skill", "RMSE of persistence and climatology by lead time"))
        cont = scores[(scores["fold"] == "cv") & scores["metric"].isin(["rmse", "mae", "bias", "r", "rmse_log"])]
        wide = cont.pivot_table(index=["aoi", "lead_days", "baseline"], columns="metric", values="value")
        n = cont[cont["metric"] == "rmse"].set_index(["aoi", "lead_days", "baseline"])["n"].rename("n")
        parts.append(
            "<p>Out-of-sample scores (fold cv) in mg m-3 (rmse, mae, bias), of ln chlorophyll-a (rmse_log) and "
            "Pearson r (all folds and metrics: table baseline_skill).</p>"
        )
        units = {"rmse": "mg m-3", "mae": "mg m-3", "bias": "mg m-3", "rmse_log": "1", "r": "1", "lead_days": "d"}
        parts.append(table_html(wide.join(n).reset_index(), name="skill", source="baseline_skill", units=units))
    screening = ctx.table("feature_screening")
    if screening is None:
        parts.append(missing("no feature_screening table: run the skill stage (lakefeed features, build or refresh)"))
    else:
        parts.append("<p>Feature screening over all rows (fold all): kept and dropped features by reason.</p>")
        summary = _screening_summary(screening)
        parts.append(table_html(summary, name="screening", source="feature_screening", units={"lead_days": "d"}))
        leaks = screening[screening["suspect_leak"] & (screening["fold"] == "all")].drop_duplicates("feature")
        parts += [f'<p class="warn">{html.escape(m)}</p>' for m in leaks["message"]]
    parts.append(f'<p class="caution">{html.escape(CAUTION)}</p>')
    return Section("skill", "8. Baseline skill by lead and feature screening", "\n".join(parts))
