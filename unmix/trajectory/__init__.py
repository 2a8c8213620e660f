"""Trajectory labels for fraction time series, and modification rules across endmembers.

One fraction series (one endmember, one pixel, ``(..., time)``) gets one label from
:class:`Trajectory`: stable, a gradual or an abrupt increase or decrease, or too few dates to say.
Rules written by the analyst (see :func:`parse_rules`) then combine the labels of several endmembers
of the same pixel into named modification maps ("green vegetation decreasing while sand increases").

Import the names from here (``from unmix.trajectory import classify_trajectories``).

================  ===================================================================================
module            holds
================  ===================================================================================
``labels``        :class:`Trajectory`, ``FLAG_VALUES``, ``FLAG_MEANINGS``, the decision rule:
                  :func:`classify_trajectories`, :func:`label_trajectories`, :class:`TrajectoryResult`
``per_series``    the per-series stages: :func:`rank_tests`, :func:`effect_sizes` (and their results)
``step_fit``      least-squares line and single-step fits, BIC comparison: :func:`fit_step_and_line`
``rules``         the rules grammar: ``STATE_WORDS``, :class:`Rule`, :func:`parse_rules`,
                  :func:`check_rule_names`, :func:`evaluate_rules`
``areas``         :func:`pixel_area`, :func:`rule_area`
================  ===================================================================================
"""

from __future__ import annotations

from .areas import pixel_area, rule_area
from .labels import (
    FLAG_MEANINGS,
    FLAG_VALUES,
    Trajectory,
    TrajectoryResult,
    classify_trajectories,
    label_trajectories,
)
from .per_series import EffectSizes, RankTests, effect_sizes, rank_tests
from .rules import STATE_WORDS, Rule, check_rule_names, evaluate_rules, parse_rules
from .step_fit import StepLineFit, fit_step_and_line

__all__ = [
    "Trajectory",
    "FLAG_VALUES",
    "FLAG_MEANINGS",
    "TrajectoryResult",
    "StepLineFit",
    "RankTests",
    "EffectSizes",
    "classify_trajectories",
    "rank_tests",
    "effect_sizes",
    "label_trajectories",
    "fit_step_and_line",
    "Rule",
    "parse_rules",
    "evaluate_rules",
    "check_rule_names",
    "pixel_area",
    "rule_area",
    "STATE_WORDS",
]
