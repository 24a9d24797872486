"""Stages: run one step of the data flow for one lake, from config to store.

This is the I/O edge: a stage reads its sources (through :mod:`lakefeed.sources`), calls the
pure core (:mod:`lakefeed.geometry`, :mod:`lakefeed.extract`, :mod:`lakefeed.features`) and
writes store tables. Flows and the CLI call these functions and nothing deeper.
"""

from lakefeed.stages._result import Progress, StageResult, no_progress

__all__ = ["Progress", "StageResult", "no_progress"]
