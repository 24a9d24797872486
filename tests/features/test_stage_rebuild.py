"""A rebuild equals a clean build: a features table grown month by month equals one built at once into an
empty store, folds included, whatever the months and fold options (property test)."""

from __future__ import annotations

import tempfile
from pathlib import Path

import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_stage import _inputs, _project, _write

from lakefeed.stages.features import build_features
from lakefeed.store import Store, load_features


@settings(max_examples=5, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(st.sampled_from(["2022-03-31", "2022-06-30", "2022-07-31", "2022-09-30", "2022-11-30"]),
             min_size=1, max_size=3, unique=True),
    st.integers(2, 6),
    st.sampled_from([1, 3, 6, 12]),
    st.sampled_from([None, 30, 45]),
    st.integers(0, 3),
)  # fmt: skip
def test_grown_table_equals_a_clean_build(ends: list[str], k: int, months: int, embargo: int | None, seed: int) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        base = Path(tmp)
        project = _project(base, windows=[1, 5, 30], leads=[0, 2], folds=k, fold_block_months=months,
                           embargo_days=embargo)  # fmt: skip
        grown = Store(base / "grown")
        for end in sorted(ends):
            _write(grown, *_inputs(end=end, seed=seed))
            build_features(project, grown)
        _write(grown, *_inputs(end="2022-12-31", seed=seed))
        build_features(project, grown)
        clean = Store(base / "clean")
        _write(clean, *_inputs(end="2022-12-31", seed=seed))
        build_features(project, clean)
        pd.testing.assert_frame_equal(load_features(grown, "tallow"), load_features(clean, "tallow"))
        diag = [s.read_table("diagnostics", "tallow") for s in (grown, clean)]
        pd.testing.assert_frame_equal(*diag)
