"""Errors and warnings raised by lakefeed.

Every error is a :class:`LakefeedError`; each stage of the data flow has its own subclass.
Messages say what failed, show the offending value, and say what to do about it, e.g.::

    SourceError: weather grid 'era_2024-01.nc': no variable with standard_name
    'air_temperature' and no mapping in sources.yaml weather.variables.air_temperature.
    Add the file's variable name under that key.
"""

from __future__ import annotations

__all__ = [
    "ConfigError",
    "DamagedPartError",
    "ExtractError",
    "FeatureError",
    "GeometryError",
    "LakefeedError",
    "LakefeedWarning",
    "ShrinkError",
    "SourceError",
    "StoreError",
]


def _listed(message: str, problems: list[str]) -> str:
    """The message with one indented line per problem."""
    return message + "".join(f"\n  - {p}" for p in problems)


class LakefeedError(Exception):
    """Root of all lakefeed errors."""


class ConfigError(LakefeedError):
    """The configuration is invalid. ``problems`` lists every problem found, not only the first."""

    def __init__(self, message: str, problems: list[str] | None = None) -> None:
        self.problems = list(problems or [])
        super().__init__(_listed(message, self.problems))


class SourceError(LakefeedError):
    """A raw input (grid, table, scene, layer) is missing, unreadable or inconsistent."""


class GeometryError(LakefeedError):
    """Lake, AOI, sub-basin network or zone geometry is invalid or inconsistent."""


class ExtractError(LakefeedError):
    """A computation on extracted data found the data contradicting what was declared."""


class FeatureError(LakefeedError):
    """Feature tables cannot be built as configured."""


class SkillError(LakefeedError):
    """Predictions or a feature table cannot be scored (:mod:`lakefeed.verify`): missing columns, repeated keys,
    rows that are not in the lake's features table."""


class StoreError(LakefeedError):
    """The store cannot be read or written safely."""


class DamagedPartError(StoreError):
    """A store part file does not match its manifest (content hash) or is not valid Parquet.

    ``table``, ``lake`` and ``path`` name the partition and the file; ``problem`` says what is wrong.
    """

    def __init__(self, table: str, lake: str, path: str, problem: str) -> None:
        self.table, self.lake, self.path, self.problem = table, lake, path, problem
        super().__init__(
            f"store part {path} (table {table}, lake {lake}) is damaged: {problem}. Run `lakefeed verify --store "
            "<store> --repair <lake config>` to rebuild it from the sources"
        )


class ShrinkError(StoreError):
    """A write would replace stored data with less (dates or valid values lost); ``problems`` lists each loss."""

    def __init__(self, message: str, problems: list[str] | None = None) -> None:
        self.problems = list(problems or [])
        super().__init__(_listed(message, self.problems))


class LakefeedWarning(UserWarning):
    """A result was produced, but something about it deserves the user's attention."""
