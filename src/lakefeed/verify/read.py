"""Score a user's predictions against a lake's stored feature rows: the one module of
:mod:`lakefeed.verify` that reads (through the :class:`lakefeed.store.Store` API only).

Takes a predictions frame, a store (object or root path) and a lake id; returns the long score table of
:func:`lakefeed.verify.skill_tables.score_predictions`. Not the ``lakefeed verify`` command (store integrity).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import pandas as pd

from lakefeed.verify.baselines import BASELINES
from lakefeed.verify.skill_tables import SkillError, score_predictions

if TYPE_CHECKING:
    from lakefeed.config import Project
    from lakefeed.store import Store

__all__ = ["skill"]

_FEATURE_COLUMNS = ["aoi", "target_date", "lead_days", "fold", "chla", "persistence_chla"]


def skill(
    predictions: pd.DataFrame,
    *,
    store: Store | str,
    lake: str,
    reference: str = "persistence",
    project: Project | None = None,
    thresholds: dict[str, float] | None = None,
    window_days: int | None = None,
) -> pd.DataFrame:
    """Score predictions of chlorophyll-a on the lake's feature rows and folds, beside the baselines.

    Not to be confused with ``lakefeed verify`` (store integrity, :mod:`lakefeed.store.verify`).

    Parameters
    ----------
    predictions
        ``aoi``, ``target_date``, ``lead_days``, ``prediction`` (mg m-3); each key a row of the lake's
        ``features`` table.
    store, lake
        The store (or its root) and the lake id.
    reference
        The baseline listed first after the model: ``persistence`` or ``climatology`` (both are scored, and the
        model's ``skill_vs_<baseline>`` is given against each).
    project
        The lake's configuration: its thresholds and ``skill.climatology_window_days`` are used; else
        ``thresholds`` (name -> mg m-3; default none besides the trophic-class boundaries) and ``window_days``
        (default 31).

    Returns
    -------
    pandas.DataFrame
        ``aoi, lead_days, baseline, fold, metric, value, n`` (``baseline``: ``model`` or a baseline name).
    """
    from lakefeed.store import Store

    if reference not in BASELINES:
        raise SkillError(f"reference {reference!r} is no baseline; use one of {list(BASELINES)}")
    st = store if isinstance(store, Store) else Store(str(store))
    if not st.has_table("features", lake):
        raise SkillError(f"store {st.url} has no features table for lake {lake!r}; build it with `lakefeed features`")
    frame = st.read_table("features", lake, columns=_FEATURE_COLUMNS)
    if project is not None:
        thresholds = {t.name: t.value for t in project.lake.thresholds}
        window_days = project.lake.skill.climatology_window_days
    out = score_predictions(predictions, frame, thresholds=thresholds or {}, window_days=window_days or 31)
    order = {"model": 0, reference: 1}
    out["_o"] = out["baseline"].map(order).fillna(2)
    return out.sort_values(["aoi", "lead_days", "fold", "_o"], kind="stable").drop(columns="_o").reset_index(drop=True)
