"""Stages: run one step of the data flow for one lake, from config to store.

This is the I/O edge: a stage reads its sources (through :mod:`lakefeed.sources`), calls the
pure core (:mod:`lakefeed.geometry`, :mod:`lakefeed.extract`, :mod:`lakefeed.features`) and
writes store tables. Flows and the CLI call these functions and nothing deeper.
"""

from lakefeed.progress import Progress, no_progress
from lakefeed.stages._result import StageResult

__all__ = ["Progress", "StageResult", "no_progress"]
