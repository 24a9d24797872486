"""Shared fixtures: a reduced sample scenario generated once per test session."""

from __future__ import annotations

from pathlib import Path

import pytest


@pytest.fixture(scope="session")
def small_sample(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The reduced sample scenario (1 year, fewer scenes), generated once per session.

    Returns the data folder; ``<dir>/config/lake-*.yaml`` and ``<dir>/config/sources.yaml`` point into it.
    """
    from lakefeed.sample import generate

    out = tmp_path_factory.mktemp("sample")
    generate(out, seed=7, small=True)
    return out
