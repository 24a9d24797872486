"""The demo flow behind ``lakefeed demo``: every existing stage for the sample lake, in Prefect's local mode.

Takes the sample scenario folder and a store folder; runs the stages in this process (one lake: no Dask
cluster to start, so progress bars of the CLI see every step) through the same ``process-lakes`` flow
the refresh uses, then writes the quality report. Returns the per-lake summary. Must not hold science.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from prefect import flow

from lakefeed.exceptions import ConfigError
from lakefeed.flows.refresh import process_lakes, write_summary
from lakefeed.flows.runtime import prefect_api

__all__ = ["demo", "demo_lake_file"]


def demo_lake_file(sample_dir: str | Path) -> Path:
    """The sample scenario's lake config (``<sample>/config/lake-tallow.yaml``, or the only lake file)."""
    config = Path(sample_dir) / "config"
    files = sorted(config.glob("lake-*.yaml"))
    if not files:
        raise ConfigError(f"no lake config in {config}; generate the scenario with `lakefeed sample DIR`")
    preferred = config / "lake-tallow.yaml"
    return preferred if preferred in files else files[0]


@flow(name="demo", log_prints=True)
def demo(sample_dir: str, store: str, report: bool = True) -> dict[str, Any]:
    """Build the sample lake into ``store`` from scratch (all existing stages) and write its report.

    Returns
    -------
    dict
        ``summary`` (per-lake dict of :func:`lakefeed.flows.refresh.process_lakes`) and ``report``
        (path of the HTML report, or None).
    """
    from datetime import UTC, datetime

    from lakefeed.config import load_project
    from lakefeed.store import Store, run_lock

    started = datetime.now(UTC)
    lake_file = demo_lake_file(sample_dir)
    project = load_project(lake_file)
    with run_lock(store, what="demo"), Store(store).publishing(), prefect_api():
        from prefect.task_runners import ThreadPoolTaskRunner

        runner = ThreadPoolTaskRunner(max_workers=1)
        summary = process_lakes.with_options(task_runner=runner)({project.id: str(lake_file)}, store, full=True)[0]
        write_summary(store, [summary], "demo", started)
    path = None
    if report:  # also after a failed stage: the report shows what exists and the run's errors
        from lakefeed.flows.runtime import get_progress
        from lakefeed.report import write_report

        progress = get_progress() or (lambda *_: None)
        progress("report: writing the quality report", 0, 1)
        path = str(write_report(project, Store(store), Path(store).parent / f"report-{project.id}.html"))
        progress("report: done", 1, 1)
    return {"summary": summary, "report": path}
