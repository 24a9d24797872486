"""Shared fixtures: a reduced sample scenario generated once per test session."""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from hypothesis import settings

# Console output is laid out for a known width, whether the tests run in a terminal, under CI or in
# pytest-xdist workers (no terminal: rich would wrap at 80 columns and split the words tests look for).
os.environ.setdefault("COLUMNS", "200")

# the S3-compatible server on loopback (moto), shared by every test folder
from s3server import s3_bucket, s3_env, s3_server  # noqa: F401

# No per-example deadline: a busy 2-core CI machine makes timing-based failures meaningless.
# Under CI the examples are derandomised so that a red run can be reproduced exactly.
settings.register_profile("lakefeed", deadline=None)
settings.register_profile("lakefeed-ci", deadline=None, derandomize=True)
settings.load_profile("lakefeed-ci" if os.environ.get("CI") else "lakefeed")


@pytest.fixture(scope="session")
def small_sample(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The reduced sample scenario (1 year, fewer scenes), generated once per session.

    Returns the data folder; ``<dir>/config/lake-*.yaml`` and ``<dir>/config/sources.yaml`` point into it.
    """
    from lakefeed.sample import generate

    out = tmp_path_factory.mktemp("sample")
    generate(out, seed=7, small=True)
    return out
