"""Quality report of one lake: a self-contained HTML page with a section per product of the pipeline.

Takes a :class:`~lakefeed.config.Project` and a :class:`~lakefeed.store.Store`; reads the lake's store tables,
their manifest metadata, the layers named in the config and the weights cache; writes one HTML file whose
figures are inline PNG (no external resource, opens offline). Each section is built by one function of
:data:`SECTIONS` (one module each), a plot first and a compact table second; a section whose source is not
configured says "not configured", one whose table is missing says so, and one that fails shows its error
while the others still render. Must not compute science: it shows what the stages stored.

Trophic classes and chlorophyll-a thresholds in the report inform only; bathing and drinking-water
decisions follow local regulations and the responsible authority.
"""

from __future__ import annotations

import html
from collections.abc import Callable
from datetime import UTC, datetime
from functools import partial
from pathlib import Path

from lakefeed import __version__
from lakefeed.config import Project
from lakefeed.report._page import ReportContext, Section, caution_html
from lakefeed.report.forecast import forecast_section
from lakefeed.report.harmonisation import harmonisation_section
from lakefeed.report.loads import loads_section
from lakefeed.report.map import map_section
from lakefeed.report.runs import runs_section
from lakefeed.report.sampling import sampling_section
from lakefeed.report.skill import skill_section
from lakefeed.report.target import target_section
from lakefeed.report.weather import weather_section
from lakefeed.store import Store

__all__ = ["CAUTION", "SECTIONS", "ReportContext", "Section", "render_report", "write_report"]

CAUTION = (
    "Trophic classes (Carlson TSI and OECD), chlorophyll-a threshold lines and exceedance counts in this report "
    "inform only. Decisions on bathing and drinking water follow local regulations and the responsible "
    "authority. Days that no outlier rule could examine (open circles in the TSI figure, screened = false in "
    "target_daily) keep their classes and flags: they may come from an undetected outlier scene."
)

#: The section builders in page order; each takes the report context and returns a :class:`Section`.
#: A new section plugs in by adding its builder here (e.g. a model-skill section before the run history).
SECTIONS: list[Callable[[ReportContext], Section]] = [
    map_section,
    weather_section,
    loads_section,
    partial(target_section, caution=CAUTION),
    harmonisation_section,
    sampling_section,
    forecast_section,
    skill_section,
    runs_section,
]

_CSS = """
body{font-family:sans-serif;max-width:1150px;margin:2em auto;color:#222;line-height:1.35}
h1{font-size:1.6em}h2{border-bottom:1px solid #ccc;padding-bottom:.2em;margin-top:1.8em}h3{font-size:1.05em}
table{border-collapse:collapse;font-size:.8em;margin:.6em 0}td,th{border:1px solid #ccc;padding:2px 6px}
th{background:#f3f3f3}caption{caption-side:bottom;text-align:left;color:#666;font-size:.9em;padding-top:2px}
.caution{background:#fff4e0;border-left:4px solid #e69500;padding:.6em 1em}
.missing{color:#777;font-style:italic}.warn{color:#a33}img{max-width:100%}nav a{margin-right:.8em}
details{margin:.6em 0}summary{cursor:pointer;color:#225}
"""
# Marks on <body> how many figures decoded once the page has loaded (checked by the browser test).
_LOADED = (
    "<script>window.addEventListener('load',function(){var i=document.images,n=0;"
    "for(var k=0;k<i.length;k++){if(i[k].complete&&i[k].naturalWidth>0){n++;}}"
    "document.body.setAttribute('data-figures-loaded',n);document.body.setAttribute('data-figures-total',i.length);"
    "});</script>"
)


def _build(builder: Callable[[ReportContext], Section], ctx: ReportContext) -> Section:
    """One section; an error in it becomes a note in its place (the other sections still render)."""
    try:
        return builder(ctx)
    except Exception as err:
        name = getattr(builder, "__name__", None) or getattr(getattr(builder, "func", None), "__name__", "section")
        sid = name.removesuffix("_section")
        text = f"this section could not be drawn: {type(err).__name__}: {err}"
        return Section(sid, sid.replace("_", " "), f'<p class="warn">{html.escape(text)}</p>')


def render_report(project: Project, store: Store) -> str:
    """The HTML text of the lake's quality report (self-contained)."""
    lake = project.lake
    ctx = ReportContext(project, store)
    sections = [_build(b, ctx) for b in SECTIONS]
    trophic = ctx.table("target_daily") is not None and project.sources.scenes is not None
    nav = "".join(f'<a href="#{s.id}">{html.escape(s.title)}</a>' for s in sections)
    parts = [
        f"<h1>Quality report: {html.escape(lake.name)} ({html.escape(lake.id)})</h1>",
        f"<p>Generated {datetime.now(UTC):%Y-%m-%d %H:%M} UTC by lakefeed {__version__}; store "
        f"<code>{html.escape(str(store.root))}</code>; local time zone {html.escape(lake.timezone)}.</p>",
        caution_html(CAUTION) if trophic else "",
        f"<nav>{nav}</nav>",
        *(s.html() for s in sections),
    ]
    body = "\n".join(p for p in parts if p)
    return (
        f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8"/><title>lakefeed report '
        f"{html.escape(lake.id)}</title><style>{_CSS}</style>{_LOADED}</head><body>\n{body}\n</body></html>\n"
    )


def write_report(project: Project, store: Store, out: str | Path) -> Path:
    """Render the report and write it to ``out`` (written aside, then moved into place). Returns the path."""
    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    text = render_report(project, store)
    tmp = out.with_name(f".{out.name}.tmp")
    tmp.write_text(text, encoding="utf-8")
    tmp.replace(out)
    return out
