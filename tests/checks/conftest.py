"""Fixtures for the check tests: the mini scenario built once, copied per test so tests may break it."""

from __future__ import annotations

import shutil
from pathlib import Path

import _mini
import pytest


@pytest.fixture(scope="session")
def mini_template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("mini")
    _mini.build(root)
    return root


@pytest.fixture
def mini(mini_template: Path, tmp_path: Path) -> Path:
    """A fresh copy of the mini scenario; returns its lake config path."""
    root = tmp_path / "mini"
    shutil.copytree(mini_template, root)
    return root / "config" / "lake-mini.yaml"
