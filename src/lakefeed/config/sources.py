"""Configuration model of the data sources (shared by the lakes that name this file).

Paths may be globs; relative paths are relative to the YAML file; environment variables are
expanded by the loader. Variables are found by CF ``standard_name`` first; ``variables``
maps a canonical role to the file's variable name where the file has no standard_name.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Literal
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pydantic import Field, field_validator, model_validator

from lakefeed.config._base import StrictModel, tz_hint

#: Roles of the weather grid and the CF standard names that identify them, in order of preference.
WEATHER_ROLES: dict[str, tuple[str, ...]] = {
    "air_temperature": ("air_temperature",),
    "dewpoint_temperature": ("dew_point_temperature",),
    "eastward_wind": ("eastward_wind",),
    "northward_wind": ("northward_wind",),
    "shortwave_radiation": (
        "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air",
        "surface_downwelling_shortwave_flux_in_air",
    ),
    "precipitation": (
        "lwe_thickness_of_precipitation_amount",
        "precipitation_amount",
        "precipitation_flux",
    ),
}


class Accumulation(StrictModel):
    """How a field is accumulated in the file.

    - ``none``: instantaneous or mean over the step ending at the stamp;
    - ``since_reset``: running total since ``reset_hour`` (UTC); the value stamped at the reset
      hour is the total of the previous period;
    - ``per_step``: total over the step ending at the stamp.
    """

    kind: Literal["none", "since_reset", "per_step"] = "none"
    reset_hour: int = Field(default=0, ge=0, le=23)


#: How a weather or forecast source's files are written: ``auto`` tells NetCDF, Zarr and GRIB by content.
GridFormat = Literal["auto", "netcdf", "zarr", "grib"]


class WeatherSource(StrictModel):
    """Hourly gridded reanalysis (CF NetCDF or GRIB files, a glob of them, or a Zarr store; local or URLs).

    ``format``: ``auto`` (default: from each file's content), ``netcdf``, ``zarr`` or ``grib``.
    """

    paths: list[str]
    format: GridFormat = "auto"
    variables: dict[str, str] = Field(default_factory=dict)
    units: dict[str, str] = Field(default_factory=dict)
    accumulation: dict[str, Accumulation] = Field(default_factory=dict)
    time_zone: str = "UTC"

    @field_validator("time_zone")
    @classmethod
    def _known_tz(cls, v: str) -> str:
        try:
            ZoneInfo(v)
        except (ZoneInfoNotFoundError, ValueError) as err:
            raise ValueError(f"unknown time zone {v!r}; {tz_hint(v)}") from err
        return v


class HydrologySource(StrictModel):
    """Per-sub-basin daily model outputs.

    ``format``: ``dsg`` (CF discrete-sampling-geometry timeSeries NetCDF), ``wide_csv``
    (``date`` column plus one column per sub-basin; one file per variable, given in
    ``files``) or ``long`` (columns date, subbasin, variable, value; CSV or Parquet).
    ``variables`` maps roles (``discharge``, ``tn``, ``tp``, ...) to names in the file.
    ``units`` declares units where the file carries none (required for CSV).
    ``discharge_kind``: ``routed`` (outflow of the sub-basin including upstream) or
    ``local`` (runoff generated in the sub-basin alone).
    """

    format: Literal["dsg", "wide_csv", "long"] = "dsg"
    path: str | None = None
    files: dict[str, str] = Field(default_factory=dict)
    variables: dict[str, str] = Field(default_factory=lambda: {"discharge": "discharge", "tn": "tn", "tp": "tp"})
    units: dict[str, str] = Field(default_factory=dict)
    discharge_kind: Literal["routed", "local"] = "routed"
    nutrients: list[str] = Field(default_factory=lambda: ["tn", "tp"])

    @model_validator(mode="after")
    def _where(self) -> HydrologySource:
        if self.format == "wide_csv" and not self.files:
            raise ValueError("format 'wide_csv' needs 'files' (one CSV per variable role)")
        if self.format != "wide_csv" and not self.path:
            raise ValueError(f"format {self.format!r} needs 'path'")
        return self


#: Column roles of a lab sheet; any other key of ``columns`` names a nutrient's column (wide form).
SHEET_ROLES: tuple[str, ...] = ("date", "time", "station", "nutrient", "concentration", "censored", "unit")


class SampleSheet(StrictModel):
    """How a lab sheet of tributary samples is written (CSV or an Excel workbook).

    ``columns`` maps a role (``date``, ``time``, ``station``, ``nutrient``, ``concentration``,
    ``censored``, ``unit``) or a nutrient name (``tp``, ``tn``...) to the file's column header; roles
    not mapped are found under their own name (any case). Mapping nutrients reads only those columns
    (the wide form); other columns (sample ids, remarks) are then ignored. ``date_format`` is a
    ``strftime`` format (``%d.%m.%Y``); without it dates are read when unambiguous (ISO dates, or
    day/month orders that only one reading fits). ``sheet``: the workbook's sheet name (or 0-based
    number; default the first). ``separator``: CSV field separator (default: detected from the
    header among ``,`` ``;`` and tab). ``decimal``: ``.`` or ``,`` (default: a comma is a decimal
    mark unless the separator is a comma). ``units``: one unit for all nutrients, or one per nutrient
    (missing nutrients: mg L-1); a per-row ``unit`` column wins over both. ``station_code``: the
    value of the station column meaning this station, when the sheet holds several.
    """

    columns: dict[str, str] = Field(default_factory=dict)
    date_format: str | None = None
    sheet: str | int | None = None
    separator: str | None = None
    decimal: Literal[".", ","] | None = None
    units: str | dict[str, str] = "mg L-1"
    station_code: str | None = None

    @field_validator("columns")
    @classmethod
    def _keys_lower(cls, value: dict[str, str]) -> dict[str, str]:
        out = {str(k).strip().lower(): str(v).strip() for k, v in value.items()}
        if "concentration" in out and set(out) - set(SHEET_ROLES):
            raise ValueError(
                "map either 'concentration' (the long form: one value column, with 'nutrient') or one column per "
                f"nutrient (the wide form), not both: {sorted(set(out) - set(SHEET_ROLES))}"
            )
        return out

    @field_validator("units")
    @classmethod
    def _units_lower(cls, value: str | dict[str, str]) -> str | dict[str, str]:
        return value if isinstance(value, str) else {str(k).strip().lower(): str(v) for k, v in value.items()}

    @field_validator("separator")
    @classmethod
    def _one_char(cls, value: str | None) -> str | None:
        if value is not None and len(value) != 1:
            raise ValueError(f"separator must be one character such as ',' ';' or a tab, got {value!r}")
        return value

    @field_validator("date_format")
    @classmethod
    def _has_directive(cls, value: str | None) -> str | None:
        if value is not None and not {"%d", "%m", "%Y", "%y", "%b", "%B", "%j"} & {
            value[i : i + 2] for i in range(len(value))
        }:
            raise ValueError(f"date_format {value!r} has no strftime directive; write e.g. '%d.%m.%Y' or '%m/%d/%Y'")
        return value


class SampleStation(SampleSheet):
    """Sparse measured concentrations at a tributary station.

    ``path``: lab sheet (CSV or ``.xlsx``) with a date, one column per nutrient (or ``concentration``
    with ``nutrient``), optional ``censored``, ``time``, ``station`` and ``unit`` (how it is written:
    :class:`SampleSheet`); ``subbasin``: the sub-basin whose model discharge is the station's daily
    flow (or ``flow_path``: CSV with date, discharge in m3 s-1).
    """

    id: str
    path: str
    subbasin: str | None = None
    flow_path: str | None = None
    method: Literal["interpolation", "rating_curve", "beale", "beale_season", "beale_flow", "fwmc", "composite"] = (
        "rating_curve"
    )
    rating_correction: Literal["duan", "ferguson"] = "duan"
    rating_seasonal: bool = False
    rating_trend: bool = False
    min_samples: dict[str, int] = Field(
        default_factory=lambda: {"interpolation": 12, "rating_curve": 30, "beale": 20, "fwmc": 12}
    )


class SceneSource(StrictModel):
    """Chlorophyll-a scenes: a STAC catalog/collection file, a folder of STAC Item JSON, or a
    folder of GeoTIFFs named by ``filename_pattern`` (regex with named groups ``date`` and
    ``sensor``, optionally ``time``).
    """

    catalog: str | None = None
    folder: str | None = None
    filename_pattern: str | None = None
    asset: str | None = None
    quality_asset: str | None = "quality"
    uncertainty_asset: str | None = "uncertainty"
    sensor_property: Literal["platform", "constellation", "instruments"] = "constellation"
    sensor_map: dict[str, str] = Field(default_factory=dict)
    units: str = "mg m-3"

    @model_validator(mode="after")
    def _one_kind(self) -> SceneSource:
        if (self.catalog is None) == (self.folder is None):
            raise ValueError("give exactly one of 'catalog' (STAC) or 'folder' (GeoTIFFs)")
        if self.folder is not None and not self.filename_pattern:
            raise ValueError("a GeoTIFF 'folder' needs 'filename_pattern' with groups date, sensor")
        return self

    @field_validator("filename_pattern")
    @classmethod
    def _pattern(cls, v: str | None) -> str | None:
        if v is None:
            return v
        example = r"e.g. '(?P<sensor>[a-z]+)_(?P<date>\d{8})\.tif'"
        try:
            pattern = re.compile(v)
        except re.error as err:
            raise ValueError(f"{v!r} is not a regular expression ({err}); {example}") from None
        missing = sorted({"date", "sensor"} - set(pattern.groupindex))
        if missing:
            raise ValueError(
                f"{v!r} lacks the named group(s) {missing}: write them as (?P<name>...), {example}; "
                "optional groups: time, asset"
            )
        return v


class ForecastSource(StrictModel):
    """Archived weather forecasts: CF NetCDF with forecast_reference_time and forecast_period, or GRIB
    (issue ``time`` and ``step``); ``format`` as for :class:`WeatherSource`.
    """

    paths: list[str]
    format: GridFormat = "auto"
    variables: dict[str, str] = Field(default_factory=dict)
    units: dict[str, str] = Field(default_factory=dict)
    accumulation: dict[str, Accumulation] = Field(default_factory=dict)
    min_overlap_days: int = Field(default=365, ge=30)
    month_window: int = Field(default=1, ge=0, le=2)
    wet_day_threshold_mm: float = Field(default=0.1, ge=0)
    max_factor: float = Field(default=5.0, gt=1)
    quantiles: int = Field(default=50, ge=5)
    lead_groups: list[list[int]] | None = None

    @field_validator("lead_groups")
    @classmethod
    def _groups(cls, v: list[list[int]] | None) -> list[list[int]] | None:
        problems = []
        seen: dict[int, int] = {}
        for i, group in enumerate(v or []):
            if not group or any(h <= 0 for h in group):
                problems.append(f"group {i} {group}: needs lead days >= 1")
            for h in group:
                if h in seen and seen[h] != i:
                    problems.append(f"lead {h} is in groups {seen[h]} and {i}")
                seen.setdefault(h, i)
        if problems:
            raise ValueError("; ".join(problems))
        return v


class SourcesConfig(StrictModel):
    """All data sources. Every section is optional: stages without a source are skipped."""

    weather: WeatherSource | None = None
    hydrology: HydrologySource | None = None
    samples: list[SampleStation] = Field(default_factory=list)
    scenes: SceneSource | None = None
    forecast: ForecastSource | None = None
    store: str | None = None
    dask_address: str | None = None


__all__ = [
    "SHEET_ROLES",
    "WEATHER_ROLES",
    "Accumulation",
    "ForecastSource",
    "GridFormat",
    "HydrologySource",
    "SampleSheet",
    "SampleStation",
    "SceneSource",
    "SourcesConfig",
    "WeatherSource",
]
_ = Path
