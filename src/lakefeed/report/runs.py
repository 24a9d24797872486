"""Section 8: the run history: the ``run_summary`` rows of the lake (mode, changed months, skipped, failures)."""

from __future__ import annotations

import html

from lakefeed.report._page import ReportContext, Section, missing, table_html

__all__ = ["runs_section"]


def runs_section(ctx: ReportContext) -> Section:
    """The run history section (newest first)."""
    title = "9. Run history"
    runs = ctx.table("run_summary")
    if runs is None or runs.empty:
        return Section("runs", title, missing("no run_summary table (no build or refresh recorded yet)"))
    runs = runs.sort_values("started", ascending=False)
    cols = [
        c
        for c in (
            "started",
            "run_id",
            "status",
            "stages_run",
            "rows_written",
            "mode",
            "changed",
            "skipped",
            "error",
            "seconds",
        )
        if c in runs
    ]
    body = table_html(runs[cols], name="runs", source="run_summary", units=runs.attrs.get("units", {}))
    last = runs.iloc[0]
    for col in ("error", "skipped"):
        text = str(last.get(col) or "")
        if text:
            body += f'<p class="warn">last run, {col}: {html.escape(text)}</p>'
    warnings = str(last.get("warnings") or "")
    if warnings:
        items = "".join(f"<li>{html.escape(w.strip())}</li>" for w in warnings.split(";") if w.strip())
        body += f"<details><summary>warnings of the last run</summary><ul>{items}</ul></details>"
    return Section("runs", title, body)
