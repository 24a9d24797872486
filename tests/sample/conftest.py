"""Fixtures of the sample-scenario tests: a second run with the same seed and one with another seed."""

from __future__ import annotations

from pathlib import Path

import pytest


@pytest.fixture(scope="session")
def small_sample_again(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The reduced scenario generated a second time with the same seed as ``small_sample`` (7)."""
    from lakefeed.sample import generate

    return generate(tmp_path_factory.mktemp("sample_again"), seed=7, small=True)


@pytest.fixture(scope="session")
def small_sample_other_seed(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The reduced scenario generated with another seed (8)."""
    from lakefeed.sample import generate

    return generate(tmp_path_factory.mktemp("sample_other"), seed=8, small=True)
