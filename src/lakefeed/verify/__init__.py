"""Verification before any model: feature screening and the baseline skill a chlorophyll-a model must beat.

NOT the ``lakefeed verify`` command: that one checks the store's integrity (part files against their
manifest hashes, :mod:`lakefeed.store.verify`). This package scores forecasts.

- :func:`screen`: empty, constant, too sparse, redundant (clusters on |Spearman|) and suspiciously leaking
  feature columns of a frame shaped like ``features``, per AOI, lead and fold (training rows only);
- :func:`baseline_skill`: persistence and climatology scored per AOI, lead and fold, continuous and
  categorical (thresholds and trophic-class boundaries; 2x2 contingency scores);
- :func:`skill`: a user's own predictions scored on the same rows and folds, with MSE skill scores against
  each baseline (reads the lake's ``features`` through :class:`lakefeed.store.Store`).

Every module except :mod:`lakefeed.verify.read` is pure (no file I/O, no Prefect); the stage
:mod:`lakefeed.stages.skill` writes ``feature_screening`` and ``baseline_skill`` to the store. lakefeed does
not train models: these tables are the yardstick any model is compared with.

The categorical scores describe the sample; they are no warning system (:data:`CAUTION`).
"""

from lakefeed.verify.baselines import Event, climatology, climatology_at, events
from lakefeed.verify.read import skill
from lakefeed.verify.scores import Contingency, contingency, continuous_scores
from lakefeed.verify.screening import screen
from lakefeed.verify.skill_tables import SkillError, baseline_skill, mse_skill, score_predictions

__all__ = [
    "CAUTION",
    "Contingency",
    "Event",
    "SkillError",
    "baseline_skill",
    "climatology",
    "climatology_at",
    "contingency",
    "continuous_scores",
    "events",
    "mse_skill",
    "score_predictions",
    "screen",
    "skill",
]

#: Printed and stored beside the categorical scores.
CAUTION = (
    "Hit rates, false-alarm ratios and the other categorical scores describe this sample of past observations; "
    "they are not a warning system. Threshold and trophic-class decisions on bathing and drinking water follow "
    "local regulations and the responsible authority."
)
