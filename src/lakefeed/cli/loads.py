"""`lakefeed loads --samples S.csv --flow F.csv`: every load estimator side by side.

The samples may be a lab sheet (CSV or ``.xlsx``, own headers, ``;`` and decimal commas, local
dates, ``<`` values): ``--column``, ``--date-format``, ``--sheet``, ``--station``, ``--units``,
``--separator`` and ``--decimal`` describe it as a ``samples[]`` entry's keys do (:func:`sheet_options`).
Thin layer over :func:`lakefeed.stages.loads.compare_loads`. Prints one row per method: total
load over the flow record (kg), mean daily load (kg d-1), uncertainty, sample count, warnings.
With ``--out`` writes the chosen method's daily loads (``date, load, lower, upper, method``;
kg d-1) or, for period estimators (Beale, flow-weighted mean), one row per period
(``start, end, [stratum,] days, n_samples, load_kg, mean_kg_d, se_kg, lower_kg, upper_kg, method``).
CSV unless the file name ends in ``.parquet``.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING

import typer
from rich.markup import escape

from lakefeed.cli._app import app, console, err_console
from lakefeed.exceptions import ConfigError, ExtractError

if TYPE_CHECKING:  # heavy imports (pandas, scipy) happen inside the command, so `--help` stays fast
    import pandas as pd

    from lakefeed.config import SampleSheet
    from lakefeed.extract.load_estimation import LoadEstimate

__all__ = ["METHOD_NAMES", "loads", "sheet_options", "to_output_frame"]

#: Names of :data:`lakefeed.extract.load_estimation.METHODS`, spelled out here so that building the
#: command (and ``--help``) does not import the estimators; a test keeps the two equal.
METHOD_NAMES: tuple[str, ...] = (
    "interpolation",
    "rating_curve",
    "rating_curve_ferguson",
    "beale",
    "beale_season",
    "beale_flow",
    "fwmc",
    "composite",
)


def _fmt(x: float, digits: int = 4) -> str:
    return "missing" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{x:,.{digits}g}"


def to_output_frame(est: LoadEstimate) -> pd.DataFrame:
    """The rows ``--out`` writes: daily loads, or one row per period for period estimators."""
    if est.kind == "period":
        frame = est.periods.copy()
        frame["start"] = frame["start"].dt.strftime("%Y-%m-%d")
        frame["end"] = frame["end"].dt.strftime("%Y-%m-%d")
    else:
        frame = est.daily.rename_axis("date").reset_index()
        frame["date"] = frame["date"].dt.strftime("%Y-%m-%d")
    frame["method"] = est.method
    return frame


def sheet_options(
    *,
    units: list[str] | None = None,
    column: list[str] | None = None,
    date_format: str | None = None,
    sheet: str | None = None,
    separator: str | None = None,
    decimal: str | None = None,
) -> SampleSheet:
    """The :class:`~lakefeed.config.SampleSheet` that the command-line options describe.

    Raises :class:`~lakefeed.exceptions.ConfigError` for a ``--column`` or ``--units`` without ``=`` where
    one is needed, or options the sheet model refuses.
    """
    from pydantic import ValidationError

    from lakefeed.config import SampleSheet

    def pairs(values: list[str], option: str) -> dict[str, str]:
        bad = [v for v in values if "=" not in v]
        if bad:
            raise ConfigError(f"{option} {bad[0]!r}: write KEY=VALUE, e.g. {option} date=Datum")
        return dict(v.split("=", 1) for v in values)

    unit_list = list(units or [])
    plain = [u for u in unit_list if "=" not in u]
    if len(plain) > 1 or (plain and len(unit_list) > 1):
        raise ConfigError(f"--units {unit_list}: give one unit for all nutrients, or NUTRIENT=UNIT for each")
    unit: str | dict[str, str] = plain[0] if plain else (pairs(unit_list, "--units") or "mg L-1")
    try:
        return SampleSheet(
            columns=pairs(list(column or []), "--column"),
            date_format=date_format,
            sheet=int(sheet) if sheet is not None and sheet.isdigit() else sheet,
            separator={"\\t": "\t", "tab": "\t"}.get(separator or "", separator),
            decimal=decimal,
            units=unit,
        )
    except ValidationError as err:
        problems = "; ".join(f"{'.'.join(map(str, e['loc']))}: {e['msg']}" for e in err.errors())
        raise ConfigError(f"lab sheet options: {problems}") from err


@app.command("loads")
def loads(
    samples: Path = typer.Option(
        ...,
        "--samples",
        help="Lab sheet (CSV or .xlsx): date, concentration (mg L-1) or one column per nutrient, optional censored; "
        "values like '<0.005' are censored.",
    ),
    flow: Path = typer.Option(..., "--flow", help="CSV: date, discharge (m3 s-1), daily."),
    method: str = typer.Option("rating_curve", "--method", help=f"Method written by --out: {', '.join(METHOD_NAMES)}."),
    out: Path | None = typer.Option(None, "--out", help="Write the chosen method's loads (.csv or .parquet)."),
    nutrient: str | None = typer.Option(
        None,
        "--nutrient",
        help="Which nutrient, when the samples hold several (a 'nutrient' column, or one column per nutrient).",
    ),
    period: str = typer.Option(
        "record", "--period", help="Periods of the period estimators (Beale, fwmc): the whole record or each year."
    ),
    seasonal: bool = typer.Option(False, "--seasonal", help="Rating curve: add seasonal sine/cosine terms."),
    trend: bool = typer.Option(False, "--trend", help="Rating curve: add a linear trend term."),
    units: list[str] | None = typer.Option(
        None, "--units", help="Unit of the concentrations (default mg L-1), or NUTRIENT=UNIT (repeatable)."
    ),
    column: list[str] | None = typer.Option(
        None,
        "--column",
        help="ROLE=HEADER: the sheet's column for a role (date, time, station, nutrient, concentration, censored, "
        "unit) or a nutrient, e.g. --column date=Datum --column tp='TP mg/l' (repeatable).",
    ),
    date_format: str | None = typer.Option(
        None, "--date-format", help="strftime format of the dates, e.g. %d.%m.%Y (default: detected if unambiguous)."
    ),
    sheet: str | None = typer.Option(None, "--sheet", help="Sheet of an .xlsx workbook (default: the first)."),
    station: str | None = typer.Option(None, "--station", help="Station code, when the sheet holds several."),
    separator: str | None = typer.Option(None, "--separator", help="CSV separator (default: detected)."),
    decimal: str | None = typer.Option(None, "--decimal", help="Decimal mark, . or , (default: detected)."),
) -> None:
    """Estimate a tributary's load from sparse samples and daily flow by every method, side by side.

    Censored samples (below detection; the value is the detection limit) count as half the limit.
    Duplicate sample dates are averaged (with a warning); samples outside the flow record are an error.
    """
    from rich.table import Table

    from lakefeed.extract.load_estimation import LoadEstimate
    from lakefeed.stages.loads import compare_loads

    if period not in ("year", "record"):
        raise ExtractError(f"--period {period!r} is unknown; choose 'record' or 'year'")
    if method not in METHOD_NAMES:
        raise ExtractError(f"--method {method!r} is unknown; choose one of {', '.join(METHOD_NAMES)}")
    spec = sheet_options(
        units=units, column=column, date_format=date_format, sheet=sheet, separator=separator, decimal=decimal
    )
    found = compare_loads(
        samples, flow, sheet=spec, nutrient=nutrient, station=station, period=period, seasonal=seasonal, trend=trend
    )
    for w in found.warnings:
        err_console.print(f"[yellow]warning:[/] {escape(w)}", highlight=False)
    part, q, names, chosen, results = found.samples, found.flow, found.nutrients, found.nutrient, found.results
    title = (
        f"Loads from {len(part)} samples and {len(q)} days of flow "
        f"({q.index[0]:%Y-%m-%d}..{q.index[-1]:%Y-%m-%d})" + (f", {chosen}" if len(names) > 1 or nutrient else "")
    )
    done = [e for e in results.values() if isinstance(e, LoadEstimate)]
    common = set.intersection(*(set(e.warnings) for e in done)) if done else set()
    grid = Table(title=escape(title), show_lines=True)
    for col, just in (
        ("method", "left"),
        ("total (kg)", "right"),
        ("mean (kg d-1)", "right"),
        ("SE (kg)", "right"),
        ("95 % interval (kg)", "right"),
        ("warnings", "left"),
    ):
        grid.add_column(col, justify=just)
    for name, est in results.items():
        label = f"[bold]{name}[/]" if name == method else name
        if isinstance(est, ExtractError):
            grid.add_row(label, "-", "-", "-", "-", f"[red]{escape(str(est))}[/]")
            continue
        own = [w for w in est.warnings if w not in common]
        warn = "\n".join(f"- {escape(w)}" for w in own) or "[green]-[/]"
        se = _fmt(est.se_kg, 4) + (" (boot)" if est.uncertainty.startswith("bootstrap") else "")
        interval = "missing" if math.isnan(est.lower_kg) else f"{_fmt(est.lower_kg, 5)} - {_fmt(est.upper_kg, 5)}"
        grid.add_row(label, _fmt(est.total_kg, 6), _fmt(est.mean_kg_d, 5), se, interval, warn)
    console.print(grid)
    for w in sorted(common):
        console.print(f"[yellow]all methods:[/] {escape(w)}", highlight=False)
    console.print(
        "SE: standard error of the total (delta method for the rating curve, root MSE for Beale; where marked "
        "boot, the bootstrap interval width / 3.92); interval: +-1.96 SE, or bootstrap 2.5-97.5 percentiles. "
        "Censored values counted as half the detection limit.",
        highlight=False,
    )
    if out is not None:
        est = results[method]
        if isinstance(est, ExtractError):
            raise est
        frame = to_output_frame(est)
        out.parent.mkdir(parents=True, exist_ok=True)
        if out.suffix.lower() == ".parquet":
            frame.to_parquet(out, index=False)
        else:
            frame.to_csv(out, index=False, float_format="%.6g")
        console.print(f"wrote {len(frame)} row(s) of {est.method} to {escape(str(out))}", highlight=False)
