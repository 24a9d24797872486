"""Write the configuration files `lakefeed init` proposes, from the config models.

Takes a validated :class:`~lakefeed.config.LakeConfig` (paths relative to the folder the file goes to);
gives the lake YAML text (only the keys that were set, in the model's order, with a header and the
commented sensors and thresholds to fill in) and the commented ``sources.yaml`` template. Must not
guess anything (detection is :mod:`lakefeed.geometry.onboard`'s).
"""

from __future__ import annotations

import yaml

from lakefeed.config.lake import LakeConfig

__all__ = ["SOURCES_TEMPLATE", "lake_yaml"]

#: ``sources.yaml`` that `lakefeed init` writes when none is given: every section commented out.
SOURCES_TEMPLATE = """\
# Data sources for lakefeed (written by `lakefeed init`; every section is optional).
# Paths are relative to this file; globs and ${ENV_VARS} are allowed. See the README's configuration reference.
# weather:
#   paths: [../weather/reanalysis_*.nc]
#   accumulation: {precip: {kind: since_reset}, sw_down: {kind: since_reset}}
# hydrology:
#   format: dsg
#   path: ../hydrology/subbasin_daily.nc
# scenes:
#   catalog: ../scenes/catalog.json
store: ../store
"""

_TO_FILL_IN = """\
# sensors: add your satellite sensors, e.g.
#   sensor_a: {pixel_size_m: 20, reference: true, bad_quality_bits: [0, 1]}
# thresholds: named chlorophyll-a levels (mg m-3); flags inform only: bathing and drinking-water
#   decisions follow local regulations and the responsible authority.
"""


def lake_yaml(config: LakeConfig) -> str:
    """The lake YAML text of ``config``: the keys set when it was made, then what is left to fill in."""
    data = config.model_dump(mode="json", exclude_unset=True)
    header = f"# Lake configuration written by `lakefeed init` for {config.name}. Review the points it printed.\n"
    return header + yaml.safe_dump(data, sort_keys=False, allow_unicode=True, width=120) + _TO_FILL_IN
