"""Where each table lives in the store: a pure function of (table, lake)."""

from __future__ import annotations

import re

__all__ = ["TABLES", "partition_path", "table_path"]

#: Tables of the public store contract (docs/architecture.md, "Store tables") plus auxiliary ones.
TABLES = (
    "drivers_daily",
    "hydrology_daily",
    "target_obs",
    "target_daily",
    "features",
    "diagnostics",
    "bias_adjustment",
    "forecast_drivers_daily",
    "forecast_evaluation",
    "load_estimates",
    "feature_screening",
    "baseline_skill",
    "weights",
    "run_summary",
)
_NAME = re.compile(r"^[a-z][a-z0-9_]*$")
_LAKE = re.compile(r"^[a-z0-9][a-z0-9_-]{0,62}$")


def table_path(root: str, table: str) -> str:
    """``<root>/<table>`` (string path or fsspec URL, '/'-joined)."""
    if not _NAME.fullmatch(table):
        raise ValueError(f"table name {table!r} must be lower-case letters, digits and '_'")
    return f"{root.rstrip('/')}/{table}"


def partition_path(root: str, table: str, lake: str) -> str:
    """``<root>/<table>/lake=<lake>`` — the Hive partition of one lake."""
    if not _LAKE.fullmatch(lake):
        raise ValueError(f"lake id {lake!r} is not a plain slug")
    return f"{table_path(root, table)}/lake={lake}"
