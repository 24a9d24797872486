"""`lakefeed skill PREDICTIONS.parquet --store DIR --lake ID [--reference persistence] [--fold cv]`: score a
model's predictions against the baselines on the same feature rows and folds.

Reads the predictions file (Parquet or CSV with ``aoi, target_date, lead_days, prediction`` in mg m-3), calls
:func:`lakefeed.verify.skill` and prints per AOI and lead the model's scores beside the reference baseline's
and its MSE skill scores against each baseline; ``--csv`` writes the whole long table. Not ``lakefeed verify``
(store integrity). Holds no science.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import typer

from lakefeed.cli._app import app, console
from lakefeed.exceptions import SkillError

if TYPE_CHECKING:
    import pandas as pd
    from rich.table import Table

__all__ = ["read_predictions", "skill_command", "skill_table"]

_SHOWN = ("rmse", "mae", "bias", "r", "rmse_log", "r_log")


def read_predictions(path: Path) -> pd.DataFrame:
    """The predictions file as a frame (Parquet, or CSV by its suffix); a :class:`SkillError` naming the file."""
    import pandas as pd

    if not path.is_file():
        raise SkillError(f"predictions file {path} does not exist; give a Parquet (or .csv) file of predictions")
    try:
        frame = pd.read_csv(path) if path.suffix.lower() == ".csv" else pd.read_parquet(path)
    except Exception as err:
        raise SkillError(
            f"predictions file {path} cannot be read ({type(err).__name__}: {err}); write it with pandas "
            "DataFrame.to_parquet (columns aoi, target_date, lead_days, prediction)"
        ) from err
    missing = [c for c in ("aoi", "target_date", "lead_days", "prediction") if c not in frame.columns]
    if missing:
        raise SkillError(f"predictions file {path} lacks column(s) {missing}; it has {list(frame.columns)[:12]}")
    return frame


def skill_table(scores: pd.DataFrame, *, reference: str, fold: str, title: str) -> Table:
    """A rich table: per AOI, lead and metric the model's value, the reference's, and the skill scores."""
    import pandas as pd
    from rich.table import Table

    rows = scores[scores["fold"] == fold]
    t = Table(title=title, caption=f"fold {fold}; skill = 1 - MSE/MSE_baseline (linear; _log on ln chla)")
    for col in (
        "aoi",
        "lead d",
        "n",
        *_SHOWN[:4],
        f"{reference} rmse",
        "skill vs persistence",
        "skill vs climatology",
        "skill_log vs persistence",
        "skill_log vs climatology",
    ):
        t.add_column(col, justify="left" if col == "aoi" else "right")
    wide = rows.pivot_table(index=["aoi", "lead_days"], columns=["baseline", "metric"], values="value", aggfunc="first")
    n = rows[(rows["baseline"] == "model") & (rows["metric"] == "rmse")].set_index(["aoi", "lead_days"])["n"]

    def cell(key: tuple, who: str, metric: str) -> str:
        v = wide.loc[key].get((who, metric), float("nan"))
        return "-" if pd.isna(v) else f"{v:.3g}"

    for key in wide.index:
        t.add_row(
            str(key[0]),
            str(key[1]),
            str(int(n.get(key, 0))),
            *(cell(key, "model", m) for m in _SHOWN[:4]),
            cell(key, reference, "rmse"),
            *(cell(key, "model", f"skill_vs_{b}{s}") for s in ("", "_log") for b in ("persistence", "climatology")),
        )
    return t


@app.command("skill")
def skill_command(
    predictions: Path = typer.Argument(
        ..., help="Predictions: Parquet (or .csv) with aoi, target_date, lead_days, prediction (mg m-3)."
    ),
    store: str = typer.Option(..., "--store", help="Store folder or fsspec URL holding the lake's features."),
    lake: str = typer.Option(..., "--lake", help="Lake id."),
    reference: str = typer.Option("persistence", "--reference", help="Baseline shown beside the model."),
    fold: str = typer.Option("cv", "--fold", help="Fold to print: cv (all test rows), all, or a fold number."),
    config: Path | None = typer.Option(None, "--config", help="Lake configuration (thresholds, climatology window)."),
    csv: Path | None = typer.Option(None, "--csv", help="Write the whole score table (every fold and metric) here."),
) -> None:
    """Score a model's chlorophyll-a predictions against persistence and climatology on the same rows and folds."""
    from lakefeed.verify import CAUTION, skill

    project = None
    if config is not None:
        from lakefeed.config import load_project

        project = load_project(config)
    frame = read_predictions(predictions)
    scores = skill(frame, store=store, lake=lake, reference=reference, project=project)
    if fold not in set(scores["fold"]):
        raise SkillError(f"--fold {fold!r} has no rows; folds scored: {sorted(set(scores['fold']))}")
    console.print(skill_table(scores, reference=reference, fold=fold, title=f"Skill of {predictions.name}: {lake}"))
    if csv is not None:
        scores.to_csv(csv, index=False)
        console.print(f"score table ({len(scores)} rows) -> {csv}")
    console.print(CAUTION, highlight=False)
