"""The quality report: self-contained HTML rendered in headless Chromium with every figure decoded."""

from __future__ import annotations

import dataclasses
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from lakefeed.config import load_project
from lakefeed.report import CAUTION, SECTIONS, render_report, write_report
from lakefeed.report._page import table_html
from lakefeed.report.map import weight_norm
from lakefeed.store import Store

CHROMIUM = Path("/usr/bin/chromium")
#: Section anchors of the page, in order (issue: every product of the pipeline).
SECTION_IDS = ["map", "weather", "loads", "target", "harmonisation", "sampling", "forecast", "skill", "runs"]
needs_chromium = pytest.mark.skipif(
    not CHROMIUM.exists(), reason="/usr/bin/chromium missing (Debian package 'chromium'; .ci/run installs it)"
)


@pytest.fixture(scope="module")
def built(small_sample, tmp_path_factory):
    """The sample lake's store with every stage run directly (weather to forecast)."""
    from lakefeed.flows.runtime import available_stages

    project = load_project(small_sample / "config" / "lake-tallow.yaml")
    store = Store(tmp_path_factory.mktemp("report") / "store")
    stages, _ = available_stages()
    for name in ("weather", "hydrology", "target", "features", "forecast", "skill"):
        if name in stages:
            stages[name](project, store)
    return project, store


class _Dom(HTMLParser):
    """Sections, figures (their data attributes) and tables (row counts, caption) of a page."""

    def __init__(self) -> None:
        super().__init__()
        self.sections: list[str] = []
        self.figures: list[dict[str, str]] = []
        self.tables: list[dict[str, str]] = []
        self.body: dict[str, str] = {}
        self._caption = False

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        if tag == "section":
            self.sections.append(a.get("id", ""))
        elif tag == "img":
            self.figures.append(a)
        elif tag == "table":
            self.tables.append(a | {"caption": ""})
        elif tag == "caption":
            self._caption = True
        elif tag == "body":
            self.body = a

    def handle_endtag(self, tag: str) -> None:
        self._caption = self._caption and tag != "caption"

    def handle_data(self, data: str) -> None:
        if self._caption:
            self.tables[-1]["caption"] += data


def _dom(text: str) -> _Dom:
    dom = _Dom()
    dom.feed(text)
    return dom


def _check_page(dom: _Dom, aoi_ids: list[str]) -> None:
    """Every section present; figures with a title and unit-bearing axis labels; AOI ids on the map; no table
    silently shorter than its stored table."""
    assert dom.sections == SECTION_IDS
    assert dom.figures, "no figure"
    for fig in dom.figures:
        assert fig["data-title"].strip(), f"figure {fig['id']} has no title"
        labels = [s.strip() for s in (fig["data-xlabels"] + " | " + fig["data-ylabels"]).split(" | ") if s.strip()]
        assert labels, f"figure {fig['id']} has no axis labels"
        for label in labels:  # units (or a kind such as "id", "count", "1") in brackets on every axis
            assert re.search(r"\(.+\)", label), f"figure {fig['id']}: axis label {label!r} has no unit"
    (map_fig,) = [f for f in dom.figures if f["id"] == "fig-map"]
    assert set(aoi_ids) <= set(map_fig["data-labels"].split(" | "))
    for table in dom.tables:
        shown, total = int(table["data-rows-shown"]), int(table["data-rows-total"])
        assert shown == total or f"{shown} of {total} rows shown; all rows in table" in table["caption"]


def test_report_is_self_contained(built) -> None:
    project, store = built
    text = render_report(project, store)
    assert not re.search(r"""(src|href)=["']https?://""", text)  # nothing fetched from outside
    assert text.count("data:image/png;base64,") >= 8  # map, drivers, loads, estimators, target, tsi, ...
    assert text.count(CAUTION) == 2  # at the top and beside the trophic content
    assert "SB01" in text  # direct inflows named under the map
    assert len(text.encode()) < 5e6  # the limit for the sample lake
    assert "not configured" not in text
    assert "could not be drawn" not in text  # every section rendered (warnings are errors in the tests)


def test_report_sections_figures_and_tables(built) -> None:
    from lakefeed.sources.vectors import read_layer

    project, store = built
    aois = read_layer(project.lake.aois, what="areas of interest", id_field=project.lake.aois.id_field)
    _check_page(_dom(render_report(project, store)), [str(a) for a in aois[project.lake.aois.id_field]])


def test_report_catchment_area_is_the_stored_one(built) -> None:
    """The report prints the area the hydrology stage stored (the geometry's geodesic area, as `check` does)."""
    from lakefeed.stages.hydrology import catchment_of

    project, store = built
    area = catchment_of(project).area_km2
    assert f"{area:.1f} km2" in render_report(project, store)


def test_report_without_scenes_or_forecasts_says_not_configured(built) -> None:
    project, store = built
    sources = project.sources.model_copy(update={"scenes": None, "forecast": None})
    bare = dataclasses.replace(project, sources=sources)
    text = render_report(bare, store)
    dom = _dom(text)
    assert dom.sections == SECTION_IDS
    for sid in ("target", "harmonisation", "sampling", "forecast"):
        body = text.split(f'<section id="{sid}">', 1)[1].split("</section>", 1)[0]
        assert "not configured" in body, sid
    assert "could not be drawn" not in text
    assert CAUTION not in text  # the page shows no trophic content, so no caution about it


def test_report_missing_tables_say_so(small_sample, tmp_path) -> None:
    project = load_project(small_sample / "config" / "lake-tallow.yaml")
    text = render_report(project, Store(tmp_path / "empty"))
    assert "no drivers_daily table" in text and "no target_obs table" in text
    assert _dom(text).sections == SECTION_IDS


def test_sections_are_a_plain_list() -> None:
    """Another section plugs in by appending a builder to SECTIONS."""
    assert len(SECTIONS) == len(SECTION_IDS)


def test_cut_table_says_so() -> None:
    frame = pd.DataFrame({"lead_days": range(162), "bias": np.linspace(0, 1, 162)})
    cut = table_html(frame, name="t", source="forecast_evaluation", max_rows=60)
    assert "60 of 162 rows shown; all rows in table forecast_evaluation" in cut
    assert cut.count("<tr>") == 61  # header + 60 rows
    whole = table_html(frame, name="t", source="forecast_evaluation")
    assert "162 rows (table forecast_evaluation)" in whole and 'data-rows-shown="162"' in whole


def test_weight_colour_scale_for_two_and_two_thousand_cells() -> None:
    from matplotlib.colors import LogNorm

    two, kind = weight_norm(np.array([40.0, 60.0]))
    assert kind == "linear" and two.vmin == 0 and two.vmax == 60
    rng = np.random.default_rng(1)
    many = rng.uniform(0.001, 1, 2000)
    many = 100 * many / many.sum()
    norm, kind = weight_norm(many)
    assert kind == "log" and isinstance(norm, LogNorm)
    assert norm.vmax == many.max() and norm.vmin == pytest.approx(max(many.min(), many.max() * 1e-4))
    _, kind = weight_norm(np.full(2000, 100 / 2000))  # equal weights: no false contrast
    assert kind == "linear"


def _chromium_dom(page: Path, tmp_path: Path) -> str:
    profile = tmp_path / "profile"
    cmd = [
        str(CHROMIUM),
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--no-first-run",
        f"--user-data-dir={profile}",
        "--virtual-time-budget=10000",
        "--dump-dom",
        page.as_uri(),
    ]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    shutil.rmtree(profile, ignore_errors=True)
    assert "<body" in done.stdout, done.stderr[-2000:]
    return done.stdout


@pytest.mark.browser
@needs_chromium
def test_report_loads_in_headless_chromium(built, tmp_path) -> None:
    from lakefeed.sources.vectors import read_layer

    project, store = built
    page = write_report(project, store, tmp_path / "report.html")
    assert page.stat().st_size < 5e6
    dom = _dom(_chromium_dom(page, tmp_path))
    loaded, total = dom.body.get("data-figures-loaded"), dom.body.get("data-figures-total")
    assert loaded and total, "the page's load handler did not run"
    assert int(total) >= 8
    assert loaded == total, f"{loaded} of {total} figures decoded"
    aois = read_layer(project.lake.aois, what="areas of interest", id_field=project.lake.aois.id_field)
    _check_page(dom, [str(a) for a in aois[project.lake.aois.id_field]])


@pytest.mark.browser
@needs_chromium
def test_report_without_scenes_or_forecasts_in_headless_chromium(built, tmp_path) -> None:
    project, store = built
    sources = project.sources.model_copy(update={"scenes": None, "forecast": None})
    page = write_report(dataclasses.replace(project, sources=sources), store, tmp_path / "bare.html")
    text = _chromium_dom(page, tmp_path)
    dom = _dom(text)
    assert dom.sections == SECTION_IDS
    assert dom.body.get("data-figures-loaded") == dom.body.get("data-figures-total")
    assert text.count("not configured") >= 4


def test_table_precision_fits_the_variable() -> None:
    """About three significant digits of a column's typical value; durations to at most a tenth."""
    frame = pd.DataFrame({"gap_days": [5.0, 12.25], "tp_fwmc": [0.04321, 0.05], "load": [356434.2, 5521.7]})
    text = table_html(frame, name="p", source="x", units={"gap_days": "d", "tp_fwmc": "mg L-1", "load": "kg"})
    assert "<td>5.0</td>" in text and "<td>12.2</td>" in text  # days: one decimal (12.25 rounds half to even)
    assert "<td>0.0432</td>" in text  # small concentrations keep their digits
    assert "<td>356434</td>" in text  # large loads: no false decimals
    assert "gap_days (d)" in text and "tp_fwmc (mg L-1)" in text  # units on every column
