"""Stage ``skill`` end to end on the reduced sample: ``feature_screening`` and ``baseline_skill`` written for
every lead (0 and the forecast leads), persistence RMSE and a hit rate recomputed with pandas from the
``features`` and ``target_daily`` tables, the leak guard on a copied target, ``lakefeed skill`` and the report
section."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from lakefeed.cli import app
from lakefeed.config import load_project
from lakefeed.exceptions import SkillError
from lakefeed.store import Store
from lakefeed.verify import screen

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def built(small_sample, tmp_path_factory):
    from lakefeed.flows.runtime import available_stages
    from lakefeed.stages.skill import build_skill

    project = load_project(small_sample / "config" / "lake-tallow.yaml")
    store = Store(tmp_path_factory.mktemp("skill") / "store")
    stages, _ = available_stages()
    for name in ("weather", "hydrology", "target", "features", "forecast"):
        stages[name](project, store)
    return project, store, build_skill(project, store)


def test_tables_cover_every_aoi_lead_and_fold(built) -> None:
    project, store, result = built
    assert not result.skipped and set(result.tables) == {"feature_screening", "baseline_skill"}
    feats = store.read_table("features", "tallow", columns=["aoi", "lead_days", "fold"])
    scores = store.read_table("baseline_skill", "tallow")
    leads = {0, *project.lake.features.forecast_leads}
    assert set(feats["lead_days"]) == leads and set(scores["lead_days"]) == leads
    assert set(scores["aoi"]) == set(feats["aoi"]) and set(scores["baseline"]) == {"persistence", "climatology"}
    folds = {str(k) for k in set(feats["fold"]) if k >= 0}
    assert set(scores["fold"]) == folds | {"cv", "all"}
    screening = store.read_table("feature_screening", "tallow")
    assert set(screening["fold"]) == folds | {"all"}
    # each fold screened on its training rows only: the other folds' rows, no embargoed row
    one = feats[(feats["aoi"] == "open_water") & (feats["lead_days"] == 0)]
    k = sorted(folds)[0]
    rows = screening[(screening["aoi"] == "open_water") & (screening["lead_days"] == 0) & (screening["fold"] == k)]
    assert (rows["n_rows"] == ((one["fold"] >= 0) & (one["fold"] != int(k))).sum()).all()
    # over all rows no driver passes for the target; a short training block (a half-year of the one-year sample)
    # can give a smooth seasonal driver |rho| > 0.98 by coincidence: flagged there, for a person to judge
    assert not screening.loc[screening["fold"] == "all", "suspect_leak"].any()
    assert "not a warning system" in store.entry("baseline_skill", "tallow")["metadata"]["caution"]


def test_persistence_rmse_and_hit_rate_recomputed_with_pandas(built) -> None:
    project, store, _ = built
    feats = store.read_table("features", "tallow")
    daily = store.read_table("target_daily", "tallow")
    scores = store.read_table("baseline_skill", "tallow").set_index(["aoi", "lead_days", "baseline", "fold", "metric"])
    threshold = project.lake.thresholds[0]
    for aoi, lead in (("open_water", 3), ("intake", 0)):
        rows = feats[(feats["aoi"] == aoi) & (feats["lead_days"] == lead)].dropna(subset=["chla", "persistence_chla"])
        rmse = np.sqrt(((rows["persistence_chla"] - rows["chla"]) ** 2).mean())  # pandas reference
        assert scores.loc[(aoi, lead, "persistence", "all", "rmse"), "value"] == pytest.approx(rmse, rel=1e-12)
        assert scores.loc[(aoi, lead, "persistence", "all", "rmse"), "n"] == len(rows)
        # the observed event from target_daily's own exceedance flag, the forecast from persistence_chla
        flags = daily[daily["aoi"] == aoi][["date", f"exceeds_{threshold.name}"]]
        flags = flags.assign(date=pd.to_datetime(flags["date"]))
        joined = rows.merge(flags, left_on="target_date", right_on="date", how="left")
        observed = joined[f"exceeds_{threshold.name}"].astype(bool)
        forecast = joined["persistence_chla"] >= threshold.value
        hit_rate = (observed & forecast).sum() / observed.sum()
        assert scores.loc[(aoi, lead, "persistence", "all", f"hit_rate:{threshold.name}"), "value"] == pytest.approx(
            hit_rate
        )


def test_copied_target_is_flagged_and_second_run_is_up_to_date(built) -> None:
    project, store, _ = built
    from lakefeed.stages.skill import build_skill

    feats = store.read_table("features", "tallow")
    copy = feats.assign(chla_copy=feats["chla"])
    out = screen(copy)
    assert (out.loc[out["feature"] == "chla_copy", "reason"] == "suspect_leak").all()
    assert build_skill(project, store).reason == "up to date"


def test_skill_command_and_report_section(built, tmp_path) -> None:
    project, store, _ = built
    from lakefeed.report import render_report

    feats = store.read_table("features", "tallow", columns=["aoi", "target_date", "lead_days", "chla"]).dropna()
    preds = feats[["aoi", "target_date", "lead_days"]].assign(prediction=feats["chla"] * 1.1)
    path = tmp_path / "preds.parquet"
    preds.to_parquet(path)
    res = CliRunner().invoke(app, ["skill", str(path), "--store", store.url, "--lake", "tallow",
                                   "--csv", str(tmp_path / "s.csv")])  # fmt: skip
    assert res.exit_code == 0, res.output
    assert "skill vs" in res.output and "not a warning system" in res.output
    table = pd.read_csv(tmp_path / "s.csv")
    model = table[(table["baseline"] == "model") & (table["metric"] == "bias_log") & (table["fold"] == "all")]
    assert np.allclose(model["value"], np.log(1.1))  # every prediction 10 % high
    bad = CliRunner().invoke(app, ["skill", str(tmp_path / "none.parquet"), "--store", store.url, "--lake", "tallow"])
    assert bad.exit_code == 1 and isinstance(bad.exception, SkillError) and "does not exist" in str(bad.exception)
    text = render_report(project, store)
    assert 'id="fig-skill"' in text and "Baseline skill by lead" in text and "redundant" in text
