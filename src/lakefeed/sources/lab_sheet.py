"""Read a lab sheet as labs write it: CSV or Excel, own column names, local dates and numbers.

Takes a path and a :class:`~lakefeed.config.SampleSheet` (how the sheet is written); returns the
sheet as text cells (:func:`read_sheet`), and parses its columns: dates (:func:`parse_dates`: a
``strftime`` format, or automatic when only one reading fits), clock times (:func:`parse_times`) and
values that may be censored and written with a decimal comma (:func:`parse_values`: ``<0.005``,
``< 0,005``). Every error names the file, the column, a few offending cells with their row in the
file, and what to do. Must not convert units or estimate anything.
"""

from __future__ import annotations

import datetime as dt
import io
import re
from pathlib import Path

import numpy as np
import pandas as pd

from lakefeed.config import SampleSheet
from lakefeed.exceptions import SourceError
from lakefeed.sources.locations import readable_path

__all__ = ["find_column", "parse_dates", "parse_times", "parse_values", "read_sheet", "row_numbers"]

_EXCEL = {".xlsx", ".xlsm"}
_SEPARATORS = (",", ";", "\t", "|")
# day/month/year or month/day/year with one separator repeated; the rest (a time of day) is ignored
_DMY = re.compile(r"^(\d{1,2})([./-])(\d{1,2})\2(\d{4}|\d{2})(?:$|[ T])")
_TIME = re.compile(r"^(\d{1,2})[:.h](\d{2})(?:[:.](\d{2}(?:\.\d+)?))?$")
_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$")


def _text(path: Path) -> tuple[str, str]:
    """The file's text and encoding: UTF-8 (with or without BOM), else Windows-1252 (common in lab exports)."""
    raw = path.read_bytes()
    for enc in ("utf-8-sig", "cp1252"):
        try:
            return raw.decode(enc), enc
        except UnicodeDecodeError:
            continue
    return raw.decode("latin-1"), "latin-1"


def _separator(header: str) -> str:
    counts = {s: header.count(s) for s in _SEPARATORS}
    best = max(counts, key=lambda s: counts[s])
    return best if counts[best] else ","


def read_sheet(path: str | Path, sheet: SampleSheet, *, what: str = "samples") -> pd.DataFrame:
    """The sheet's cells as objects (text from CSV; numbers, dates, text from Excel), NaN where empty.

    Column names are stripped; wholly empty rows and unnamed empty columns are dropped (the index
    keeps the row position, see :func:`row_numbers`). ``frame.attrs['separator']`` is the CSV field
    separator used (None for a workbook).

    Raises
    ------
    SourceError
        Missing file, unreadable file or sheet, ``.xls``, or a sheet with a header but no rows.
    """
    path = readable_path(path, what=what)
    if not path.exists():
        raise SourceError(f"{what}: file not found: {path}")
    suffix = path.suffix.lower()
    separator: str | None = None
    if suffix == ".xls":
        raise SourceError(f"{what} {path}: old Excel .xls workbooks are not read; save the sheet as .xlsx or CSV")
    if suffix in _EXCEL:
        frame = _read_excel(path, sheet, what)
    else:
        try:
            text, _ = _text(path)
            separator = sheet.separator or _separator(text.splitlines()[0] if text.strip() else "")
            frame = pd.read_csv(io.StringIO(text), sep=separator, dtype=str, keep_default_na=False, na_values=[""])
        except pd.errors.EmptyDataError as err:
            raise SourceError(
                f"{what} {path}: the file is empty; export the lab sheet with its header and rows"
            ) from err
        except Exception as err:
            raise SourceError(f"{what} {path}: cannot read it as CSV (separator {separator!r}): {err}") from err
    frame.columns = [str(c).strip() for c in frame.columns]
    unnamed = [c for c in frame.columns if c.startswith("Unnamed:") and frame[c].isna().all()]
    frame = frame.drop(columns=unnamed)
    frame = frame.map(lambda v: v.strip() if isinstance(v, str) else v).replace("", np.nan)
    frame = frame.dropna(how="all")
    if frame.empty:
        raise SourceError(
            f"{what} {path}: no rows under the header (columns {list(frame.columns)}); the sheet holds no samples: "
            "export it again with its rows, or remove this samples entry"
        )
    frame.attrs["separator"] = separator
    return frame


def _read_excel(path: Path, sheet: SampleSheet, what: str) -> pd.DataFrame:
    try:
        import openpyxl
    except ImportError as err:
        raise SourceError(
            f"{what} {path}: reading Excel workbooks needs the openpyxl package (pip install openpyxl)"
        ) from err
    try:
        names = openpyxl.load_workbook(path, read_only=True).sheetnames
    except Exception as err:
        raise SourceError(f"{what} {path}: cannot open the workbook: {err}") from err
    chosen = 0 if sheet.sheet is None else sheet.sheet
    if (isinstance(chosen, str) and chosen not in names) or (isinstance(chosen, int) and chosen >= len(names)):
        raise SourceError(f"{what} {path}: no sheet {chosen!r}; its sheets are {names}; set 'sheet' to one of them")
    try:
        return pd.read_excel(path, sheet_name=chosen, dtype=object, engine="openpyxl")
    except Exception as err:
        raise SourceError(f"{what} {path}: cannot read sheet {chosen!r}: {err}") from err


def row_numbers(index: pd.Index) -> list[int]:
    """Row numbers in the file (the header is row 1) of frame rows."""
    return [int(i) + 2 for i in index]


def find_column(frame: pd.DataFrame, key: str, sheet: SampleSheet, *, where: str, required: bool = False) -> str | None:
    """The header of role or nutrient ``key``: the mapped name (``columns``), else ``key`` itself (any case).

    Raises :class:`SourceError` when a mapped column is absent, or a ``required`` one is not found.
    """
    wanted = sheet.columns.get(key)
    names = [wanted] if wanted else [key, *(["units"] if key == "unit" else [])]
    for name in names:
        for col in frame.columns:
            if col == name or col.casefold() == name.casefold():
                return col
    if wanted or required:
        raise SourceError(
            f"{where}: no column {names[0]!r} for {key!r}; its columns are {list(frame.columns)}; name the column "
            f"in the samples entry's 'columns: {{{key}: ...}}' (sources.yaml) or with --column {key}=NAME"
        )
    return None


def _shown(values: pd.Series, n: int = 5) -> str:
    return ", ".join(f"row {r}: {v!r}" for r, v in zip(row_numbers(values.index[:n]), values.iloc[:n], strict=True))


def parse_dates(values: pd.Series, *, date_format: str | None, where: str) -> pd.Series:
    """Calendar days (datetime64, midnight) of a date column; a time of day in the cell is dropped.

    With ``date_format`` every cell must fit it. Without it: ISO 8601, or day/month/year and
    month/day/year orders (separators ``.`` ``/`` ``-``) when only one order fits every cell; an
    ambiguous column is refused with both readings of a cell shown. Workbook date cells are taken as
    they are.
    """
    is_date = values.map(lambda v: isinstance(v, (dt.date, pd.Timestamp)))
    out = pd.Series(pd.NaT, index=values.index, dtype="datetime64[ns]")
    if is_date.any():
        out[is_date] = pd.to_datetime(values[is_date].map(pd.Timestamp)).dt.tz_localize(None)
    text = values[~is_date].astype(str)
    if len(text):
        if date_format is not None:
            parsed = pd.to_datetime(text, format=date_format, errors="coerce")
            how = f"date_format {date_format!r}"
        else:
            parsed, how = _auto_dates(text, where)
        out[~is_date] = parsed
        bad = text[parsed.isna().to_numpy()]
        if len(bad):
            raise SourceError(
                f"{where}: {len(bad)} value(s) that are not dates ({how}): {_shown(bad)}; fix them, or set "
                "'date_format' (sources.yaml) / --date-format, e.g. '%d.%m.%Y'"
            )
    return out.dt.normalize()


def _auto_dates(text: pd.Series, where: str) -> tuple[pd.Series, str]:
    iso = pd.to_datetime(text, format="ISO8601", errors="coerce")
    if iso.notna().all():
        return iso.dt.tz_localize(None) if iso.dt.tz is not None else iso, "ISO 8601"
    parts = text.str.extract(_DMY)
    if parts[0].isna().any():
        odd = text[parts[0].isna().to_numpy() & iso.isna().to_numpy()]
        raise SourceError(
            f"{where}: cannot tell the date format of {_shown(odd if len(odd) else text)}; set 'date_format' "
            "(sources.yaml) / --date-format, e.g. '%d.%m.%Y' or '%Y-%m-%d'"
        )
    a, b = parts[0].astype(int), parts[2].astype(int)
    year = parts[3].astype(int)
    year = year.where(parts[3].str.len() == 4, np.where(year < 69, 2000 + year, 1900 + year))  # strptime's %y rule
    day_first, month_first = bool((b <= 12).all()), bool((a <= 12).all())
    sep, y = parts[1].iloc[0], "%Y" if (parts[3].str.len() == 4).all() else "%y"
    if day_first and month_first and (a != b).any():
        i = (a != b).idxmax()
        one = f"{year[i]:04d}-{b[i]:02d}-{a[i]:02d}"
        other = f"{year[i]:04d}-{a[i]:02d}-{b[i]:02d}"
        raise SourceError(
            f"{where}: the dates are ambiguous: row {row_numbers(pd.Index([i]))[0]}: {text[i]!r} reads as {one} "
            f"(day first, date_format '%d{sep}%m{sep}{y}') or as {other} (month first, '%m{sep}%d{sep}{y}'), and "
            "no value settles it; set 'date_format' (sources.yaml) / --date-format to the lab's order"
        )
    if not (day_first or month_first):
        raise SourceError(
            f"{where}: neither day-first nor month-first fits every date (e.g. {_shown(text)}); fix the dates or "
            "set 'date_format' (sources.yaml) / --date-format"
        )
    day, month = (a, b) if day_first else (b, a)
    parsed = pd.to_datetime(pd.DataFrame({"year": year, "month": month, "day": day}), errors="coerce")
    order = f"%d{sep}%m{sep}{y}" if day_first else f"%m{sep}%d{sep}{y}"
    return parsed, f"read as {order}"


def parse_times(values: pd.Series, *, where: str) -> pd.Series:
    """Clock times of a time column (``HH:MM[:SS]``, ``HH.MM``, ``HHhMM`` or workbook times) as timedeltas."""
    out = pd.Series(pd.NaT, index=values.index, dtype="timedelta64[ns]")
    bad = []
    for i, v in values.items():
        if isinstance(v, float) and np.isnan(v):
            continue
        if isinstance(v, (dt.time, dt.datetime)):
            out[i] = pd.Timedelta(hours=v.hour, minutes=v.minute, seconds=v.second)
            continue
        m = _TIME.match(str(v))
        if m is None or int(m[1]) > 23 or int(m[2]) > 59 or float(m[3] or 0) >= 60:
            bad.append(i)
            continue
        out[i] = pd.Timedelta(hours=int(m[1]), minutes=int(m[2]), seconds=float(m[3] or 0))
    if bad:
        raise SourceError(
            f"{where}: {len(bad)} value(s) that are not clock times: {_shown(values[bad])}; write them as HH:MM"
        )
    return out


def parse_values(values: pd.Series, *, comma_decimal: bool, where: str) -> tuple[np.ndarray, np.ndarray]:
    """Numbers of a value column and which are censored: ``<0.005`` and ``< 0,005`` are 0.005, censored.

    Empty cells are NaN (not censored). A comma is a decimal mark when ``comma_decimal``; a cell with
    both ``.`` and ``,`` (thousands separators), ``>`` values and text are errors naming the cells.
    """
    out = np.full(len(values), np.nan)
    censored = np.zeros(len(values), dtype=bool)
    bad: dict[str, list] = {"text": [], "comma": [], "above": []}
    for k, (i, v) in enumerate(values.items()):
        if v is None or (isinstance(v, float) and np.isnan(v)):
            continue
        if isinstance(v, (int, float, np.number)) and not isinstance(v, bool):
            out[k] = float(v)
            continue
        s = str(v).replace("\u00a0", " ").strip()
        if s.startswith(">"):
            bad["above"].append(i)
            continue
        if s.startswith("<"):
            censored[k], s = True, s[1:].strip()
        if "," in s:
            if not comma_decimal or "." in s or s.count(",") > 1:
                bad["comma"].append(i)
                continue
            s = s.replace(",", ".")
        if not _NUMBER.match(s):
            bad["text"].append(i)
            continue
        out[k] = float(s)
    if bad["above"]:
        raise SourceError(
            f"{where}: values above the measuring range are not read: {_shown(values[bad['above']])}; write the "
            "value measured after dilution, or remove the row"
        )
    if bad["comma"]:
        raise SourceError(
            f"{where}: values with a comma that is not a decimal mark here: {_shown(values[bad['comma']])}; remove "
            "thousands separators, or set decimal: ',' (sources.yaml) / --decimal , when the comma is the decimal mark"
        )
    if bad["text"]:
        raise SourceError(
            f"{where}: {len(bad['text'])} value(s) that are not numbers: {_shown(values[bad['text']])}; write a "
            "number, a value below detection as '<' and the detection limit (e.g. '<0.005'), or leave the cell "
            "empty; if this is not a nutrient column, map the nutrient columns in 'columns:' so that others are ignored"
        )
    return out, censored
