"""Explaining coverage gaps: the former home of models, rules and the threshold sweep.

The three families now live in :mod:`coverage_audit.stats.models` (exclusion models),
:mod:`coverage_audit.stats.rules` (rule discovery) and :mod:`coverage_audit.stats.sweeps`
(threshold sensitivity); this module re-exports their public names so that existing
imports keep working.
"""

from __future__ import annotations

from .errors import DroppedRowsWarning, SmallSampleWarning
from .stats.model_design import MAX_LEVELS, MINORITY_STEP, DroppedRow
from .stats.models import (
    MIN_EVENTS_PER_PARAMETER,
    OUTCOME_NOTE,
    SCALE_NOTE,
    Z_95,
    ExclusionModels,
    MinorityChange,
    ModelFit,
    Term,
    exclusion_models,
)
from .stats.residual_moran import MORAN_Z_FLAG, ResidualMoran, moran_randomisation
from .stats.rules import Condition, Rule, RuleResult, discover_rules
from .stats.sweeps import (
    DEFAULT_THRESHOLDS,
    GroupAtThreshold,
    SensitivityRow,
    sensitivity_thresholds,
    served_from_fraction,
)

__all__ = [
    "DEFAULT_THRESHOLDS",
    "MAX_LEVELS",
    "MINORITY_STEP",
    "MIN_EVENTS_PER_PARAMETER",
    "MORAN_Z_FLAG",
    "OUTCOME_NOTE",
    "SCALE_NOTE",
    "Z_95",
    "Condition",
    "DroppedRow",
    "DroppedRowsWarning",
    "ExclusionModels",
    "GroupAtThreshold",
    "MinorityChange",
    "ModelFit",
    "ResidualMoran",
    "Rule",
    "RuleResult",
    "SensitivityRow",
    "SmallSampleWarning",
    "Term",
    "discover_rules",
    "exclusion_models",
    "moran_randomisation",
    "sensitivity_thresholds",
    "served_from_fraction",
]
