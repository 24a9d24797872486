"""A store location that cannot hold a store is refused with one sentence, the same from every entry point."""

from __future__ import annotations

from pathlib import Path

import pytest

from lakefeed.exceptions import StoreError
from lakefeed.store import Store, run_lock, store_location_problem


def test_usable_locations(tmp_path: Path) -> None:
    assert store_location_problem(tmp_path) is None  # an existing folder
    assert store_location_problem(tmp_path / "a" / "b" / "store") is None  # created on the first write
    assert store_location_problem("s3://bucket/prefix") is None  # remote: not probed here


def test_store_that_is_a_file(tmp_path: Path) -> None:
    f = tmp_path / "store"
    f.write_text("x")
    problem = store_location_problem(f)
    assert problem is not None and f"store {str(f)!r} is a file, not a folder" in problem
    assert "--store DIR or 'store:' in sources.yaml" in problem
    with pytest.raises(StoreError, match="is a file, not a folder"):
        Store(f)  # query, report, verify: every reader
    with pytest.raises(StoreError, match="is a file, not a folder"), run_lock(f):  # build, refresh, writers
        pass
    assert f.read_text() == "x"  # untouched


def test_store_below_a_file(tmp_path: Path) -> None:
    f = tmp_path / "file"
    f.write_text("x")
    problem = store_location_problem(f / "sub" / "store")
    assert problem is not None and f"{str(f)!r} in its path is a file, not a folder" in problem
    with pytest.raises(StoreError, match="in its path is a file"), run_lock(f / "sub" / "store"):
        pass
