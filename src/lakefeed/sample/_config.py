"""The sample scenario's configuration: one template rendered for the repository and for a generated folder.

:func:`render_config` returns the texts of ``lake-tallow.yaml`` and ``sources.yaml`` for given path
prefixes. The repository's ``config/`` uses ``${LAKEFEED_SAMPLE_DATA:-../demo/sample}`` for data and
``../sample_geo`` for geometry; a generated scenario gets copies with paths relative to its own
``config/`` folder, so the files do not depend on where the scenario lives. Must not read files.
"""

from __future__ import annotations

from pathlib import Path

from lakefeed.sample._hydrology import SAMPLED_SUBBASIN

__all__ = ["REPO_DATA", "REPO_GEO", "REPO_STORE", "render_config", "write_config"]

REPO_DATA = "${LAKEFEED_SAMPLE_DATA:-../demo/sample}"
REPO_GEO = "../sample_geo"
REPO_STORE = "${LAKEFEED_STORE:-../demo/store}"

_LAKE = """\
# Lake configuration of the invented sample scenario "Tallow Reservoir" (not a real place).
# Paths are relative to this file; environment variables expand (${{VAR:-default}}).
id: tallow
name: Tallow Reservoir
timezone: Europe/Berlin
elevation_m: 512
sources: sources.yaml

lake:
  path: {geo}/lake.gpkg
aois:
  path: {geo}/aois.gpkg
  id_field: aoi_id
subbasins:
  path: {geo}/subbasins.gpkg
  id_field: subbasin_id
  downstream_field: downstream_id
  lake_id: LAKE

zones:
  lake_surface: true
  aois: true
  catchment: true
  subbasins: false

sensors:
  kite:
    pixel_size_m: 20
    reference: true
    bad_quality_bits: [0, 1, 2, 3]
  dune:
    pixel_size_m: 300
    bad_quality_bits: [0, 1, 2, 3]

target:
  bias_model: ratio

# Guidance levels for chlorophyll-a (mg m-3). Exceedance flags inform only: bathing and
# drinking-water decisions follow local regulations and the responsible authority.
thresholds:
  - name: who_low_probability
    value: 10
    description: >-
      WHO recreational guidance level, relatively low probability of adverse health effects.
      Informs only; local regulations and the responsible authority decide.
  - name: who_moderate_probability
    value: 50
    description: >-
      WHO recreational guidance level, moderate probability of adverse health effects.
      Informs only; local regulations and the responsible authority decide.

features:
  windows: [1, 3, 5, 7, 10, 15, 30]
  forecast_leads: [1, 3, 5, 10]
"""

_SOURCES = """\
# Data sources of the invented sample scenario "Tallow Reservoir" (all data are synthetic).
# Paths are relative to this file; environment variables expand (${{VAR:-default}}); globs allowed.
weather:
  paths:
    - {data}/weather/reanalysis_*.nc
  accumulation:
    precip: {{kind: since_reset, reset_hour: 0}}
    sw_down: {{kind: since_reset, reset_hour: 0}}
  time_zone: UTC

hydrology:
  format: dsg
  path: {data}/hydrology/subbasin_daily.nc
  variables: {{discharge: discharge, tn: tn, tp: tp}}
  discharge_kind: routed
  nutrients: [tn, tp]

samples:
  - id: west_inflow
    path: {data}/samples/tributary_samples.csv
    subbasin: {sampled}
    units: mg L-1
    method: rating_curve

scenes:
  catalog: {data}/scenes/catalog.json
  asset: chla
  quality_asset: quality
  uncertainty_asset: uncertainty
  sensor_property: constellation
  units: mg m-3

forecast:
  paths:
    - {data}/forecast/forecast_*.nc
  accumulation:
    precip: {{kind: per_step}}
    sw_down: {{kind: per_step}}{overlap}
{store}"""


def render_config(*, data: str, geo: str, store: str | None, min_overlap_days: int | None = None) -> tuple[str, str]:
    """Texts of ``lake-tallow.yaml`` and ``sources.yaml`` with the given path prefixes.

    ``min_overlap_days`` sets the forecast section's minimum overlap (the reduced one-year
    scenario needs less than the default 365 days).
    """
    store_line = f"\nstore: {store}\n" if store else ""
    overlap = f"\n  min_overlap_days: {min_overlap_days}" if min_overlap_days else ""
    return (
        _LAKE.format(geo=geo),
        _SOURCES.format(data=data, sampled=SAMPLED_SUBBASIN, store=store_line, overlap=overlap),
    )


def write_config(
    folder: Path,
    *,
    data: str = "..",
    geo: str = "../geometry",
    store: str | None = "${LAKEFEED_STORE:-../store}",
    min_overlap_days: int | None = None,
) -> Path:
    """Write both YAML files into ``folder``; return the lake file's path."""
    folder.mkdir(parents=True, exist_ok=True)
    lake, sources = render_config(data=data, geo=geo, store=store, min_overlap_days=min_overlap_days)
    (folder / "sources.yaml").write_text(sources, encoding="utf-8")
    path = folder / "lake-tallow.yaml"
    path.write_text(lake, encoding="utf-8")
    return path
