"""Report section: baseline skill by lead (figure) and the feature-screening summary (tables).

Takes a :class:`~lakefeed.store.Store` and a lake id; reads ``baseline_skill`` and ``feature_screening``
(written by :mod:`lakefeed.stages.skill`) and returns one HTML fragment: a heading, an inline base64 PNG of
the RMSE of persistence and climatology by lead per AOI (pooled test rows of all folds, ``cv``), a table of
the baselines' continuous scores, a table of kept and dropped features by reason, and the caution. A missing
table gives a note instead. Must not compute science: it shows what the stage stored.
"""

from __future__ import annotations

import html

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import pandas as pd
from matplotlib.figure import Figure

from lakefeed.report._figures import to_png64
from lakefeed.store import Store
from lakefeed.verify import CAUTION

__all__ = ["skill_figure", "skill_section"]

_STYLE = {"persistence": ("tab:blue", "o"), "climatology": ("tab:orange", "s")}


def skill_figure(scores: pd.DataFrame, *, fold: str = "cv") -> Figure:
    """RMSE (mg m-3, and of ln chla) of each baseline against lead time (days), one column of panels per AOI."""
    rows = scores[(scores["fold"] == fold) & scores["metric"].isin(["rmse", "rmse_log"])]
    aois = sorted(rows["aoi"].unique())
    fig, axes = plt.subplots(2, max(len(aois), 1), figsize=(3.6 * max(len(aois), 1), 5.2), squeeze=False, sharex=True)
    for j, aoi in enumerate(aois):
        for i, (metric, label) in enumerate((("rmse", "RMSE (mg m-3)"), ("rmse_log", "RMSE of ln chla"))):
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


def _table(frame: pd.DataFrame) -> str:
    return frame.to_html(index=False, escape=True, float_format=lambda v: f"{v:.3g}", border=0)


def _screening_summary(screening: pd.DataFrame) -> pd.DataFrame:
    rows = screening[screening["fold"] == "all"]
    reason = rows["reason"].str.split(":").str[0]
    counts = pd.crosstab([rows["aoi"], rows["lead_days"]], reason).reset_index()
    counts.columns.name = None
    return counts.rename(columns={"ok": "kept", "redundant_with": "redundant"})


def skill_section(store: Store, lake: str) -> str:
    """The HTML fragment of the baseline-skill and feature-screening section for one lake."""
    parts = ["<h2>Baseline skill by lead and feature screening</h2>"]
    if not store.has_table("baseline_skill", lake):
        parts.append('<p class="missing">no baseline_skill table (skill stage not run)</p>')
    else:
        scores = store.read_table("baseline_skill", lake)
        b64 = to_png64(skill_figure(scores))
        parts.append(
            '<figure><img id="fig-skill" class="figure" alt="RMSE of persistence and climatology by lead time" '
            f'src="data:image/png;base64,{b64}"/></figure>'
        )
        cont = scores[(scores["fold"] == "cv") & scores["metric"].isin(["rmse", "mae", "bias", "r", "rmse_log"])]
        wide = cont.pivot_table(index=["aoi", "lead_days", "baseline"], columns="metric", values="value")
        n = cont[cont["metric"] == "rmse"].set_index(["aoi", "lead_days", "baseline"])["n"].rename("n")
        parts.append(_table(wide.join(n).reset_index()))
    if not store.has_table("feature_screening", lake):
        parts.append('<p class="missing">no feature_screening table (skill stage not run)</p>')
    else:
        screening = store.read_table("feature_screening", lake)
        parts.append("<p>Feature screening over all rows (fold all): kept and dropped features by reason.</p>")
        parts.append(_table(_screening_summary(screening)))
        leaks = screening[screening["suspect_leak"] & (screening["fold"] == "all")].drop_duplicates("feature")
        parts += [f'<p class="warn">{html.escape(m)}</p>' for m in leaks["message"]]
    parts.append(f'<p class="caution">{html.escape(CAUTION)}</p>')
    return "\n".join(parts)
