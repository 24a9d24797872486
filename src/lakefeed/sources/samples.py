"""Read sparse tributary samples (lab sheets) and a daily flow record.

Takes a CSV or ``.xlsx`` path and how the sheet is written (:class:`~lakefeed.config.SampleSheet`:
column names, date format, sheet, separator, decimal mark, units, station code; reading the cells is
:mod:`lakefeed.sources.lab_sheet`); returns pandas frames in canonical units. Sample sheets come in
three shapes:

- long: ``date, nutrient, concentration[, censored][, unit]`` (the sample scenario's form);
- single: ``date, concentration[, censored]`` (the ``lakefeed loads`` form; nutrient = ``name``);
- wide: ``date`` plus one column per nutrient (``tn``, ``tp``, ...; or those mapped in ``columns``),
  optional ``censored`` (for every nutrient of the row).

A value written ``<0.005`` or ``< 0,005`` is censored, each cell on its own: below the detection
limit, the value given being the limit (the load estimators then take half of it). A ``censored``
column (true/false, 1/0, yes/no, ``<``; missing = false) marks whole rows the same way. Units: a
per-row ``unit`` column, else the entry's ``units`` for that nutrient, else mg L-1; molar units use
the nutrient's molar mass. A ``station`` column holding several stations keeps the rows of this one.
An optional ``time`` column is checked (loads are daily; the sample's day is its date). Duplicate
dates (per nutrient) are averaged, with a :class:`~lakefeed.exceptions.LakefeedWarning` naming them;
the averaged value is censored only when every value of that day was. The flow record has
``date, discharge`` (m3 s-1 unless ``units`` says otherwise); missing days are added as NaN,
duplicate dates are an error. Must not estimate loads.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from lakefeed.config.sources import SHEET_ROLES, SampleSheet
from lakefeed.exceptions import LakefeedWarning, SourceError
from lakefeed.sources.hydrology import to_canonical_unit
from lakefeed.sources.lab_sheet import find_column, parse_dates, parse_times, parse_values, read_sheet, row_numbers
from lakefeed.units import CANONICAL, convert

__all__ = ["read_flow", "read_samples"]

_TRUE = {"true", "1", "yes", "y", "t", "<"}
_FALSE = {"false", "0", "no", "n", "f", "", "nan", "none"}


def _censored(values: pd.Series, where: str) -> pd.Series:
    text = values.astype(str).str.strip().str.lower().str.replace(r"\.0$", "", regex=True)
    bad = sorted(set(text) - _TRUE - _FALSE)
    if bad:
        raise SourceError(f"{where}: column 'censored' has values {bad[:5]}; use true/false")
    return text.isin(_TRUE)


#: headers (lower case, spaces as _) that name a sampling station when not mapped as ``station``
_STATION_LIKE = frozenset(
    {
        "site",
        "site_id",
        "site_code",
        "station_id",
        "station_code",
        "stn",
        "location",
        "location_id",
        "sampling_point",
        "sampling_site",
        "sample_point",
        "monitoring_site",
        "point_id",
    }
)


def _one_station(
    frame: pd.DataFrame, column: str | None, *, code: str | None, hint: str | None, where: str
) -> pd.DataFrame:
    """The rows of this station when the sheet has a station column (see :func:`read_samples`)."""
    if column is None:
        if code is not None:
            raise SourceError(
                f"{where}: station {code!r} asked for, but the sheet has no station column; "
                "map it with columns: {station: ...} (sources.yaml) / --column station=NAME"
            )
        for name in frame.columns:  # a column that looks like a station column, not mapped: never mix stations
            key = str(name).strip().lower().replace(" ", "_").replace("-", "_")
            if key in _STATION_LIKE and frame[name].nunique(dropna=True) > 1:
                raise SourceError(
                    f"{where}: column {name!r} looks like a station column and holds "
                    f"{sorted(map(str, frame[name].dropna().unique()))[:10]}; the rows of several stations would be "
                    "mixed into one series. Map it with columns: {station: "
                    f"{name!r}}} and set station_code (sources.yaml) / --column station={name} --station CODE"
                )
        return frame
    values = frame[column].map(lambda v: str(int(v)) if isinstance(v, float) and v.is_integer() else str(v).strip())
    found = sorted(set(values))
    if code is not None or len(found) > 1:
        wanted = code if code is not None else hint
        if wanted is None or str(wanted) not in found:
            raise SourceError(
                f"{where}: column {column!r} holds stations {found[:10]}"
                + (f", not {wanted!r}" if wanted is not None else "")
                + "; say which rows are this station's with station_code (sources.yaml) / --station CODE"
            )
        return frame[(values == str(wanted)).to_numpy()]
    return frame


def _unit_of(nutrient: str, sheet: SampleSheet) -> str:
    return sheet.units if isinstance(sheet.units, str) else sheet.units.get(nutrient, CANONICAL["concentration"])


def _to_mg_l(long: pd.DataFrame, sheet: SampleSheet, where: str) -> np.ndarray:
    """Concentrations in mg L-1 from each row's unit (unit column, else the entry's ``units``)."""
    if isinstance(sheet.units, dict):
        unknown = sorted(set(sheet.units) - set(long["nutrient"]))
        if unknown:
            raise SourceError(
                f"{where}: 'units' names nutrient(s) {unknown} that the sheet does not hold; its nutrients are "
                f"{sorted(set(long['nutrient']))}"
            )
    given = long["unit"].map(lambda u: None if u is None or (isinstance(u, float) and np.isnan(u)) else str(u))
    unit = given.where(given.notna(), long["nutrient"].map(lambda n: _unit_of(n, sheet)))
    out = np.empty(len(long))
    for (nutrient, u), rows in long.groupby([long["nutrient"], unit], sort=False).indices.items():
        source = "the 'unit' column" if given.iloc[rows[0]] is not None else "'units' of the samples entry"
        try:
            out[rows] = to_canonical_unit(long["concentration"].to_numpy(dtype=float)[rows], u, nutrient)
        except SourceError as err:
            raise SourceError(
                f"{where}: nutrient {nutrient!r} in unit {u!r} (from {source}): {err}; write a concentration unit "
                "such as 'mg L-1', 'ug L-1' or 'mmol m-3'"
            ) from err
    return out


def read_samples(
    path: str | Path,
    sheet: SampleSheet | None = None,
    *,
    name: str = "concentration",
    units: str | None = None,
    require_concentration: bool = False,
    station: str | None = None,
    station_hint: str | None = None,
) -> pd.DataFrame:
    """Read tributary samples from a lab sheet.

    Parameters
    ----------
    path
        CSV or ``.xlsx`` in the long, single or wide form (module docstring).
    sheet
        How the sheet is written (column names, date format, sheet, separator, decimal mark, units).
    name
        Nutrient label for the single form.
    units
        Unit of every concentration, overriding ``sheet.units`` (default mg L-1); converted to mg L-1.
    require_concentration
        Accept only the long and single forms (a ``concentration`` column) unless nutrient columns are
        mapped: a file whose value column is misspelt is an error instead of being read as the wide form.
    station, station_hint
        The station column's value for this station: ``station`` must be present; ``station_hint`` (e.g.
        the configured station id) is used only when the sheet holds several stations.

    Returns
    -------
    DataFrame with columns ``date`` (datetime64, day), ``nutrient``, ``concentration`` (mg L-1),
    ``censored`` (bool), sorted by nutrient and date, one row per nutrient and date.

    Raises
    ------
    SourceError
        Unreadable or header-only sheet, missing or unmapped columns, dates that are not dates or
        ambiguous, non-numeric, missing or negative concentrations, bad censoring flags or units;
        each message names the file, the column and what to do.
    """
    sheet = sheet or SampleSheet()
    if units is not None:
        sheet = sheet.model_copy(update={"units": units})
    path = Path(path)
    where = f"samples {path}"
    frame = read_sheet(path, sheet)

    def col(key: str, required: bool = False) -> str | None:
        return find_column(frame, key, sheet, where=where, required=required)

    roles = {key: col(key, required=key == "date") for key in SHEET_ROLES}
    frame = _one_station(frame, roles["station"], code=station or sheet.station_code, hint=station_hint, where=where)
    dates = parse_dates(frame[roles["date"]], date_format=sheet.date_format, where=f"{where} column {roles['date']!r}")
    if roles["time"] is not None:
        parse_times(frame[roles["time"]], where=f"{where} column {roles['time']!r}")
    flag = _censored(frame[roles["censored"]], where) if roles["censored"] else pd.Series(False, index=frame.index)
    unit = frame[roles["unit"]] if roles["unit"] else pd.Series(np.nan, index=frame.index, dtype=object)
    mapped = [k for k in sheet.columns if k not in SHEET_ROLES]
    if require_concentration and roles["concentration"] is None and not mapped:
        raise SourceError(
            f"{where}: no 'concentration' column (mg L-1 unless told otherwise); columns are "
            f"{list(frame.columns)}; rename the column of concentrations to 'concentration'"
        )
    comma = sheet.decimal == "," or (sheet.decimal is None and frame.attrs.get("separator") != ",")
    single = roles["concentration"] is not None and roles["nutrient"] is None  # one unnamed nutrient
    if roles["concentration"] is not None:
        nutrient = frame[roles["nutrient"]] if roles["nutrient"] else pd.Series(name, index=frame.index)
        value_cols = {None: roles["concentration"]}
    else:
        taken = {c for c in roles.values() if c}
        value_cols = {k: col(k, True) for k in mapped} or {c.lower(): c for c in frame.columns if c not in taken}
        if not value_cols:
            raise SourceError(
                f"{where}: need a 'concentration' column (with optional 'nutrient') or one column per "
                f"nutrient; columns are {list(frame.columns)}"
            )
    parts = []
    for key, column in value_cols.items():
        cells = frame[column]
        if key is not None:  # wide form: an empty cell is a nutrient not measured that day
            cells = cells[cells.notna()]
        value, censored = parse_values(cells, comma_decimal=comma, where=f"{where} column {column!r}")
        parts.append(
            pd.DataFrame(
                {
                    "date": dates[cells.index],
                    "nutrient": nutrient[cells.index] if key is None else key,
                    "concentration": value,
                    "censored": censored | flag[cells.index].to_numpy(),
                    "unit": unit[cells.index],
                },
                index=cells.index,
            )
        )
    long = pd.concat(parts)
    missing = long["concentration"].isna() | long["nutrient"].isna()
    if missing.any():
        raise SourceError(
            f"{where}: {int(missing.sum())} concentration(s) or nutrient name(s) missing, on "
            f"{[f'{d:%Y-%m-%d}' for d in long.loc[missing, 'date'].head(5)]} (rows "
            f"{row_numbers(long.index[missing][:5])}); remove those rows or fill them in"
        )
    long["nutrient"] = long["nutrient"].astype(str).str.strip().str.lower()
    neg = long.loc[long["concentration"] < 0, "date"]
    if len(neg):
        raise SourceError(
            f"{where}: negative concentration(s) on {[f'{d:%Y-%m-%d}' for d in neg.head(5)]}; "
            "concentrations must be >= 0 (a value below detection is the detection limit with censored=true)"
        )
    long["concentration"] = _to_mg_l(long.reset_index(drop=True), sheet, where)
    long = long.drop(columns="unit").reset_index(drop=True)
    dup = long.duplicated(["nutrient", "date"], keep=False)
    if dup.any():
        shown = sorted(
            {
                f"{d:%Y-%m-%d}" if single else f"{n} {d:%Y-%m-%d}"
                for n, d in zip(long.loc[dup, "nutrient"], long.loc[dup, "date"], strict=True)
            }
        )
        warnings.warn(
            f"samples {path}: {len(shown)} duplicate sample date(s) ({shown[:5]}); their concentrations are "
            "averaged (censored only if all values of the day are)",
            LakefeedWarning,
            stacklevel=2,
        )
        long = long.groupby(["nutrient", "date"], as_index=False).agg(
            concentration=("concentration", "mean"), censored=("censored", "all")
        )
    return long.sort_values(["nutrient", "date"]).reset_index(drop=True)[
        ["date", "nutrient", "concentration", "censored"]
    ]


def read_flow(path: str | Path, *, units: str = "m3 s-1") -> pd.Series:
    """Read a daily flow record (``date, discharge``) as a Series in m3 s-1 on a continuous daily index.

    Read like a lab sheet (separator, decimal comma, dates as in :func:`read_samples`). Missing days
    are NaN. Raises :class:`SourceError` for duplicate dates, missing columns or negative discharge.
    """
    path = Path(path)
    sheet = SampleSheet()
    where = f"flow record {path}"
    frame = read_sheet(path, sheet, what="flow record")
    date_col = find_column(frame, "date", sheet, where=where, required=True)
    if find_column(frame, "discharge", sheet, where=where) is None:
        raise SourceError(f"{where}: no 'discharge' column (m3 s-1); columns are {list(frame.columns)}")
    dates = parse_dates(frame[date_col], date_format=None, where=f"{where} column {date_col!r}")
    dup = dates[dates.duplicated()]
    if len(dup):
        raise SourceError(f"{where}: duplicate dates {[f'{d:%Y-%m-%d}' for d in dup.head(5)]}")
    column = find_column(frame, "discharge", sheet, where=where)
    q, below = parse_values(
        frame[column], comma_decimal=frame.attrs.get("separator") != ",", where=f"{where} column {column!r}"
    )
    if below.any():
        raise SourceError(
            f"{where}: discharge written with '<' on {row_numbers(frame.index[below][:5])}; write numbers"
        )
    neg = dates[q < 0]
    if len(neg):
        raise SourceError(
            f"{where}: negative discharge on {[f'{d:%Y-%m-%d}' for d in neg.head(5)]}; leave missing days empty instead"
        )
    series = pd.Series(convert(q, units, CANONICAL["discharge"]), index=dates.to_numpy()).sort_index()
    full = pd.date_range(series.index.min(), series.index.max(), freq="D", name="date")
    return series.reindex(full).rename("discharge").astype(np.float64)
