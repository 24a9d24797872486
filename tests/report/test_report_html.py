"""The quality report: self-contained HTML rendered in headless Chromium with every figure decoded."""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

from lakefeed.config import load_project
from lakefeed.report import CAUTION, render_report, write_report
from lakefeed.store import Store

CHROMIUM = Path("/usr/bin/chromium")


@pytest.fixture(scope="module")
def built(small_sample, tmp_path_factory):
    """The sample lake's store with the weather, hydrology, target and features stages run directly."""
    from lakefeed.flows.runtime import available_stages

    project = load_project(small_sample / "config" / "lake-tallow.yaml")
    store = Store(tmp_path_factory.mktemp("report") / "store")
    stages, _ = available_stages()
    for name in ("weather", "hydrology", "target", "features"):
        if name in stages:
            stages[name](project, store)
    return project, store


def test_report_is_self_contained(built) -> None:
    project, store = built
    text = render_report(project, store)
    assert not re.search(r"""(src|href)=["']https?://""", text)  # nothing fetched from outside
    assert text.count("data:image/png;base64,") >= 4  # map, drivers, target, calendar
    assert CAUTION in text
    assert "SB01" in text  # direct inflows named under the map


def test_report_missing_tables_say_so(small_sample, tmp_path) -> None:
    project = load_project(small_sample / "config" / "lake-tallow.yaml")
    text = render_report(project, Store(tmp_path / "empty"))
    assert "no drivers_daily table" in text and "no target_obs table" in text


@pytest.mark.browser
@pytest.mark.skipif(
    not CHROMIUM.exists(), reason="/usr/bin/chromium missing (Debian package 'chromium'; .ci/run installs it)"
)
def test_report_loads_in_headless_chromium(built, tmp_path) -> None:
    project, store = built
    page = write_report(project, store, tmp_path / "report.html")
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
    dom = done.stdout
    assert "<body" in dom, done.stderr[-2000:]
    loaded = re.search(r'data-figures-loaded="(\d+)"', dom)
    total = re.search(r'data-figures-total="(\d+)"', dom)
    assert loaded and total, "the page's load handler did not run"
    assert int(total.group(1)) >= 4
    assert loaded.group(1) == total.group(1), f"{loaded.group(1)} of {total.group(1)} figures decoded"
