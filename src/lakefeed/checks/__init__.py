"""Cheap checks of a configuration and its sources, for ``lakefeed check``.

Takes lake YAML files (or loaded :class:`~lakefeed.config.Project` objects); returns lists
of :class:`CheckResult` (name, ok, message, hint, status). Sources are opened for metadata
only (coordinates, attributes, headers, STAC JSON); nothing is written.
"""

from lakefeed.checks._result import CheckResult, failed, passed, skipped, warned
from lakefeed.checks._run import LakeReport, check_paths, check_project
from lakefeed.checks.network import NetworkReport, check_network

__all__ = [
    "CheckResult",
    "LakeReport",
    "NetworkReport",
    "check_network",
    "check_paths",
    "check_project",
    "failed",
    "passed",
    "skipped",
    "warned",
]
