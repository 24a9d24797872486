"""Read sparse tributary samples and a daily flow record from CSV.

Takes CSV paths; returns pandas frames in canonical units. Sample files come in three shapes:

- long: ``date, nutrient, concentration[, censored]`` (the sample scenario's form);
- single: ``date, concentration[, censored]`` (the ``lakefeed loads`` form; nutrient = ``name``);
- wide: ``date`` plus one column per nutrient (``tn``, ``tp``, ...), optional ``censored``.

``censored`` (true/false, 1/0, yes/no; missing = false) marks a value below the detection
limit; the value given is then the detection limit. Duplicate dates (per nutrient) are
averaged, with a :class:`~lakefeed.exceptions.LakefeedWarning` naming them; the averaged value
is censored only when every value of that day was. The flow record has ``date, discharge``
(m3 s-1 unless ``units`` says otherwise); missing days are added as NaN, duplicate dates are
an error. Must not estimate loads.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from lakefeed.exceptions import LakefeedWarning, SourceError
from lakefeed.units import CANONICAL, convert

__all__ = ["read_flow", "read_samples"]

_TRUE = {"true", "1", "yes", "y", "t", "<"}
_FALSE = {"false", "0", "no", "n", "f", "", "nan", "none"}


def _read_csv(path: str | Path, what: str) -> pd.DataFrame:
    path = Path(path)
    if not path.exists():
        raise SourceError(f"{what}: file not found: {path}")
    try:
        frame = pd.read_csv(path)
    except Exception as err:
        raise SourceError(f"{what}: cannot read {path}: {err}") from err
    frame.columns = [str(c).strip().lower() for c in frame.columns]
    if "date" not in frame.columns:
        raise SourceError(f"{what} {path}: no 'date' column; columns are {list(frame.columns)}")
    try:
        frame["date"] = pd.to_datetime(frame["date"]).dt.tz_localize(None).dt.normalize()
    except Exception as err:
        raise SourceError(f"{what} {path}: column 'date' has values that are not dates: {err}") from err
    return frame


def _censored(values: pd.Series, path: Path) -> pd.Series:
    text = values.astype(str).str.strip().str.lower()
    bad = sorted(set(text) - _TRUE - _FALSE)
    if bad:
        raise SourceError(f"samples {path}: column 'censored' has values {bad[:5]}; use true/false")
    return text.isin(_TRUE)


def read_samples(
    path: str | Path, *, name: str = "concentration", units: str = "mg L-1", require_concentration: bool = False
) -> pd.DataFrame:
    """Read tributary samples.

    Parameters
    ----------
    path
        CSV in the long, single or wide form (module docstring).
    name
        Nutrient label for the single form.
    units
        Unit of the concentrations (default mg L-1); converted to mg L-1.
    require_concentration
        Accept only the long and single forms (a ``concentration`` column): a file whose value column
        is misspelt is an error instead of being read as the wide form with a nutrient of that name.

    Returns
    -------
    DataFrame with columns ``date`` (datetime64, day), ``nutrient``, ``concentration`` (mg L-1),
    ``censored`` (bool), sorted by nutrient and date, one row per nutrient and date.

    Raises
    ------
    SourceError
        Missing columns, non-numeric, missing or negative concentrations, bad censoring flags.
    """
    path = Path(path)
    frame = _read_csv(path, "samples")
    if "censored" not in frame.columns:
        frame["censored"] = False
    frame["censored"] = _censored(frame["censored"], path)
    if require_concentration and "concentration" not in frame.columns:
        raise SourceError(
            f"samples {path}: no 'concentration' column (mg L-1 unless told otherwise); columns are "
            f"{list(frame.columns)}; rename the column of concentrations to 'concentration'"
        )
    single = "concentration" in frame.columns and "nutrient" not in frame.columns  # one unnamed nutrient
    if "concentration" in frame.columns:
        if "nutrient" not in frame.columns:
            frame["nutrient"] = name
        long = frame[["date", "nutrient", "concentration", "censored"]].copy()
    else:
        value_cols = [c for c in frame.columns if c not in {"date", "censored", "station", "time"}]
        if not value_cols:
            raise SourceError(
                f"samples {path}: need a 'concentration' column (with optional 'nutrient') or one column per "
                f"nutrient; columns are {list(frame.columns)}"
            )
        long = frame.melt(
            id_vars=["date", "censored"], value_vars=value_cols, var_name="nutrient", value_name="concentration"
        ).dropna(subset=["concentration"])
    long["nutrient"] = long["nutrient"].astype(str).str.strip().str.lower()
    conc = pd.to_numeric(long["concentration"], errors="coerce")
    bad = long.loc[conc.isna(), "date"]
    if len(bad):
        raise SourceError(
            f"samples {path}: {len(bad)} concentration(s) missing or not numbers, on "
            f"{[f'{d:%Y-%m-%d}' for d in bad.head(5)]}; remove those rows or fill them in"
        )
    neg = long.loc[conc < 0, "date"]
    if len(neg):
        raise SourceError(
            f"samples {path}: negative concentration(s) on {[f'{d:%Y-%m-%d}' for d in neg.head(5)]}; "
            "concentrations must be >= 0 (a value below detection is the detection limit with censored=true)"
        )
    long["concentration"] = convert(conc.to_numpy(dtype=float), units, CANONICAL["concentration"])
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

    Missing days are NaN. Raises :class:`SourceError` for duplicate dates, missing columns or
    negative discharge.
    """
    path = Path(path)
    frame = _read_csv(path, "flow record")
    if "discharge" not in frame.columns:
        raise SourceError(f"flow record {path}: no 'discharge' column (m3 s-1); columns are {list(frame.columns)}")
    dup = frame["date"][frame["date"].duplicated()]
    if len(dup):
        raise SourceError(f"flow record {path}: duplicate dates {[f'{d:%Y-%m-%d}' for d in dup.head(5)]}")
    q = pd.to_numeric(frame["discharge"], errors="coerce")
    neg = frame.loc[q < 0, "date"]
    if len(neg):
        raise SourceError(
            f"flow record {path}: negative discharge on {[f'{d:%Y-%m-%d}' for d in neg.head(5)]}; "
            "leave missing days empty instead"
        )
    series = pd.Series(convert(q.to_numpy(dtype=float), units, CANONICAL["discharge"]), index=frame["date"])
    series = series.sort_index()
    full = pd.date_range(series.index.min(), series.index.max(), freq="D", name="date")
    return series.reindex(full).rename("discharge").astype(np.float64)
