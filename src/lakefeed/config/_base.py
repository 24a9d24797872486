"""Shared pieces of the configuration models: strict frozen base model and path handling."""

from __future__ import annotations

import difflib
from functools import cache
from pathlib import Path
from zoneinfo import available_timezones

from pydantic import BaseModel, ConfigDict


class StrictModel(BaseModel):
    """Frozen model that rejects unknown keys (the loader adds a did-you-mean)."""

    model_config = ConfigDict(extra="forbid", frozen=True)


class LayerRef(StrictModel):
    """A vector layer on disk: any format geopandas reads (GeoPackage, GeoParquet, shapefile...).

    ``path`` is resolved relative to the YAML file that names it; environment variables
    (``$VAR``, ``${VAR}``, ``${VAR:-default}``) are expanded by the loader.
    """

    path: Path
    layer: str | None = None


@cache
def _zones() -> tuple[str, ...]:
    return tuple(sorted(available_timezones()))


def tz_hint(name: str) -> str:
    """What to say about an unknown time zone: the closest IANA names, or an example."""
    guess = difflib.get_close_matches(name, _zones(), n=2, cutoff=0.7)
    if guess:
        return "did you mean " + " or ".join(repr(g) for g in guess) + "?"
    return "use an IANA name such as 'Europe/Berlin' or 'UTC'"
