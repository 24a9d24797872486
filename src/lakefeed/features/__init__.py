"""Features: antecedent windows on irregular target dates, lead-time-aware rows, persistence
baseline, sampling diagnostics and cross-validation folds.

Pure: takes pandas/numpy, returns pandas/numpy; no file I/O, no Prefect. The store stage
(:mod:`lakefeed.stages.features`) reads and writes the tables.
"""

from lakefeed.features.diagnostics import sampling_diagnostics
from lakefeed.features.folds import (
    EMBARGOED,
    assign_folds,
    block_numbers,
    blocked_folds,
    date_hash_folds,
    fold_counts,
    random_folds,
)
from lakefeed.features.incremental import new_feature_rows, refresh_feature_rows, refresh_start
from lakefeed.features.pit import build_feature_rows
from lakefeed.features.rows import FLAG_CODES, calendar_features, forecast_array
from lakefeed.features.window_plan import STATISTICS, WindowPlan, default_statistics, feature_name
from lakefeed.features.windows import complete_calendar, gather_windows, reduce_windows, window_features

__all__ = [
    "EMBARGOED",
    "FLAG_CODES",
    "STATISTICS",
    "WindowPlan",
    "assign_folds",
    "block_numbers",
    "blocked_folds",
    "build_feature_rows",
    "calendar_features",
    "complete_calendar",
    "date_hash_folds",
    "default_statistics",
    "feature_name",
    "fold_counts",
    "forecast_array",
    "gather_windows",
    "new_feature_rows",
    "random_folds",
    "reduce_windows",
    "refresh_feature_rows",
    "refresh_start",
    "sampling_diagnostics",
    "window_features",
]
