"""Building blocks of the report page: the context the sections read, figures and tables as HTML.

Takes store frames and matplotlib figures; gives HTML fragments. Every figure carries its title and axis
labels as ``data-`` attributes and every table its shown and total row counts, so that a browser test can
check them; a table cut to fewer rows always says so in its caption. Must not compute science.
"""

from __future__ import annotations

import base64
import html
import io
import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import pandas as pd
from matplotlib.figure import Figure

from lakefeed.config import Project
from lakefeed.store import Store

__all__ = [
    "ReportContext",
    "Section",
    "caution_html",
    "date_axis",
    "details",
    "figure_html",
    "fmt_value",
    "missing",
    "not_configured",
    "plain_log_axes",
    "table_html",
]


#: Deprecated alias columns the report does not read (reading them warns; their content is in other columns).
DEPRECATED_COLUMNS = {"target_daily": ("trophic_class",)}


@dataclass
class ReportContext:
    """What every section builder reads: the project (config), the store and the lake's tables (read once)."""

    project: Project
    store: Store
    _frames: dict[str, pd.DataFrame | None] = field(default_factory=dict)

    @property
    def lake(self) -> str:
        """The lake id."""
        return self.project.id

    def table(self, name: str) -> pd.DataFrame | None:
        """The lake's stored table ``name`` (None when the store does not hold it)."""
        if name not in self._frames:
            frame = None
            if self.store.has_table(name, self.lake):
                skip = DEPRECATED_COLUMNS.get(name, ())
                stored = (self.store.entry(name, self.lake) or {}).get("columns") or []
                columns = [c for c in stored if c not in skip] if skip and stored else None
                frame = self.store.read_table(name, self.lake, columns=columns)
            self._frames[name] = frame
        return self._frames[name]

    def metadata(self, name: str) -> dict[str, str]:
        """The manifest metadata of the lake's table ``name`` (empty when absent)."""
        entry = self.store.entry(name, self.lake) if self.store.has_table(name, self.lake) else None
        return dict((entry or {}).get("metadata") or {})


@dataclass(frozen=True)
class Section:
    """One section of the page: anchor id, heading and HTML body."""

    id: str
    title: str
    body: str

    def html(self) -> str:
        """The section as HTML."""
        return f'<section id="{self.id}"><h2>{html.escape(self.title)}</h2>\n{self.body}\n</section>'


def missing(text: str) -> str:
    """A note that a table is missing (a stage not run)."""
    return f'<p class="missing">{html.escape(text)}</p>'


def not_configured(what: str, key: str) -> str:
    """A note that the lake has no such source configured."""
    return f'<p class="missing not-configured">not configured: {html.escape(what)} (no <code>{key}:</code> source)</p>'


def figure_html(fig: Figure, name: str, alt: str, *, labels: list[str] = ()) -> str:  # type: ignore[assignment]
    """The figure as an inline PNG with its titles and axis labels (and extra ``labels``) as data attributes."""
    titles = [t for t in [fig._suptitle.get_text() if fig._suptitle else ""] if t]
    xlabels, ylabels = [], []
    for ax in fig.axes:
        if ax.get_label() == "<colorbar>":
            ylabels.append(ax.get_ylabel() or ax.get_xlabel())
            continue
        if ax.get_title():
            titles.append(ax.get_title())
        if ax.get_xlabel():
            xlabels.append(ax.get_xlabel())
        if ax.get_ylabel():
            ylabels.append(ax.get_ylabel())
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, bbox_inches="tight")
    plt.close(fig)
    b64 = base64.b64encode(buf.getvalue()).decode("ascii")
    attrs = {
        "data-title": " | ".join(titles),
        "data-xlabels": " | ".join(xlabels),
        "data-ylabels": " | ".join(ylabels),
        "data-labels": " | ".join(labels),
    }
    extra = " ".join(f'{k}="{html.escape(v)}"' for k, v in attrs.items())
    return (
        f'<figure><img id="fig-{name}" class="figure" alt="{html.escape(alt)}" {extra} '
        f'src="data:image/png;base64,{b64}"/></figure>'
    )


def fmt_value(value: object, decimals: int) -> str:
    """A cell value as text: floats with ``decimals`` places, missing as empty."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    if isinstance(value, float):
        return f"{value:.{decimals}f}"
    if isinstance(value, pd.Timestamp):
        return value.strftime("%Y-%m-%d %H:%M") if (value.hour or value.minute) else value.strftime("%Y-%m-%d")
    return str(value)


def _decimals(values: pd.Series) -> int:
    """Decimal places that keep about three significant digits of a column's typical magnitude."""
    finite = pd.to_numeric(values, errors="coerce").abs()
    finite = finite[finite > 0]
    if finite.empty:
        return 2
    return max(0, min(4, 2 - math.floor(math.log10(float(finite.median())))))


def table_html(
    frame: pd.DataFrame,
    *,
    name: str,
    source: str,
    units: Mapping[str, str] | None = None,
    max_rows: int | None = None,
) -> str:
    """A compact HTML table of ``frame`` (headers with units, rounded floats).

    ``source`` names the store table behind it; when ``max_rows`` cuts the frame the caption says how many
    rows are shown and where all of them are.
    """
    units = dict(units or {})
    total = len(frame)
    shown = frame if max_rows is None else frame.head(max_rows)
    caption = f"{total} rows (table {source})"
    if len(shown) < total:
        caption = f"{len(shown)} of {total} rows shown; all rows in table {source}"
    head = "".join(
        f"<th>{html.escape(str(c))}{f' ({html.escape(units[c])})' if units.get(c) not in (None, '') else ''}</th>"
        for c in shown.columns
    )
    decimals = {c: _decimals(shown[c]) for c in shown.columns if shown[c].dtype.kind == "f"}
    for c in decimals:  # durations: whole days or seconds carry no more than one decimal
        if units.get(c) in ("d", "s", "h"):
            decimals[c] = min(decimals[c], 1)
    rows = []
    for row in shown.itertuples(index=False):
        cells = []
        for c, v in zip(shown.columns, row, strict=True):
            cells.append(f"<td>{html.escape(fmt_value(v, decimals.get(c, 2)))}</td>")
        rows.append(f"<tr>{''.join(cells)}</tr>")
    return (
        f'<table class="data" id="tab-{name}" data-rows-shown="{len(shown)}" data-rows-total="{total}">'
        f"<caption>{html.escape(caption)}</caption><thead><tr>{head}</tr></thead>"
        f"<tbody>{''.join(rows)}</tbody></table>"
    )


def details(summary: str, body: str) -> str:
    """A collapsible element (closed by default)."""
    return f"<details><summary>{html.escape(summary)}</summary>{body}</details>"


def date_axis(ax: matplotlib.axes.Axes) -> None:
    """Readable date ticks: a few per axis, concise labels (year shown once), never overlapping."""
    import matplotlib.dates as mdates

    locator = mdates.AutoDateLocator(minticks=3, maxticks=8)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))


def plain_log_axes(ax: matplotlib.axes.Axes, which: str = "y") -> None:
    """Logarithmic axes labelled with plain numbers (1, 10, 100) and no crowded minor-tick labels."""
    from matplotlib.ticker import NullFormatter, ScalarFormatter

    for axis in ([ax.xaxis] if "x" in which else []) + ([ax.yaxis] if "y" in which else []):
        axis.set_major_formatter(ScalarFormatter())
        axis.set_minor_formatter(NullFormatter())


def caution_html(text: str) -> str:
    """The caution box."""
    return f'<p class="caution">{html.escape(text)}</p>'
